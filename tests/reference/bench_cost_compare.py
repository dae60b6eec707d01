"""Times numpy expressions of the map cost sum on one thread, then goalsmith's map kernel and
numpy's fastest expression in turns, and prints the ratios.

The sum: for maps X of shape (N, T, P, h, w) and cost maps M of shape (P, h, w),
per_point[n, p] = w_p * sum_t sum_u X[n, t, p, u] * M[p, u], steps "all", N=200, T=10, P=2 at
64x64 and 128x128, float32 and float16. First each candidate expression is timed (median of
repeats) and checked against the others; the fastest per size and dtype is flagged.

  einsum          np.einsum("ntpu,pu->np", X, M)
  einsum_opt      the same with optimize=True
  matmul_batched  X.reshape(N*T, P, 1, hw) @ M.reshape(P, hw, 1), then a sum over t
  matmul_strided  per p: X.reshape(N*T, P, hw)[:, p] @ M[p] (a strided BLAS gemv, no copy)
  gemm_blockdiag  X.reshape(N*T, P*hw) @ B with B the (P*hw, P) block-diagonal of M: one GEMM
float16 maps are also tried converted to float32 first (numpy has no float16 BLAS).

Then, per size, goalsmith (server/core/examples/bench_cost.rs `serve`, built here with cargo,
release, one thread) on float32 and float16 batches of the same shape and numpy's fastest
expression for each dtype take turns: each round times REPS runs of each, in an order that
rotates from round to round, so that a change in the load of a shared machine reaches all
alike. Each gets its best (least) wall time over ROUNDS x REPS runs (N, printed) and the median;
the ratios are numpy / goalsmith per dtype and goalsmith float16 / float32, of the bests and of
the medians.

Prints one JSON line per expression ({"bench": "cost_numpy", "median_ms": ..., "params": ...}),
then one line per contestant and one line of ratios per size.
Run: tests/reference/.venv/bin/python tests/reference/bench_cost_compare.py [--rounds R] [--reps K]
"""

import os

# One thread everywhere, set before numpy loads its BLAS.
for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import pathlib  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

N, T, P = 200, 10, 2
REPO = pathlib.Path(__file__).resolve().parents[2]
WEIGHTS = np.array([1.0, 1.0], dtype=np.float32)


def median_ms(fn, min_repeats=5, budget_s=2.0):
    fn()  # warm up
    times, start = [], time.perf_counter()
    while len(times) < min_repeats or (time.perf_counter() - start < budget_s and len(times) < 100):
        t0 = time.perf_counter()
        fn()
        times.append((time.perf_counter() - t0) * 1e3)
    return statistics.median(times)


def expressions(X, M):
    n, t, p, h, w = X.shape
    hw = h * w
    Xf = X.reshape(n, t, p, hw)
    Mf = M.reshape(p, hw)
    B = np.zeros((p * hw, p), dtype=M.dtype)
    for k in range(p):
        B[k * hw:(k + 1) * hw, k] = Mf[k]

    def einsum():
        return np.einsum("ntpu,pu->np", Xf, Mf) * WEIGHTS

    def einsum_opt():
        return np.einsum("ntpu,pu->np", Xf, Mf, optimize=True) * WEIGHTS

    def matmul_batched():
        r = X.reshape(n * t, p, 1, hw) @ M.reshape(p, hw, 1)
        return r.reshape(n, t, p).sum(axis=1) * WEIGHTS

    def matmul_strided():
        X3 = X.reshape(n * t, p, hw)
        cols = [X3[:, k] @ Mf[k] for k in range(p)]
        return np.stack(cols, axis=1).reshape(n, t, p).sum(axis=1) * WEIGHTS

    def gemm_blockdiag():
        return (X.reshape(n * t, p * hw) @ B).reshape(n, t, p).sum(axis=1) * WEIGHTS

    return {"einsum": einsum, "einsum_opt": einsum_opt, "matmul_batched": matmul_batched,
            "matmul_strided": matmul_strided, "gemm_blockdiag": gemm_blockdiag}


class Goalsmith:
    """The `bench_cost serve` timing server as a child process."""

    def __init__(self, binary):
        self.proc = subprocess.Popen([str(binary), "serve"], stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, text=True)

    def times(self, dtype, side, reps):
        self.proc.stdin.write(f"time {dtype} {side} {reps}\n")
        self.proc.stdin.flush()
        reply = self.proc.stdout.readline()
        if not reply:
            raise RuntimeError("bench_cost serve gave no answer")
        return json.loads(reply)["times_ms"]

    def close(self):
        self.proc.stdin.close()
        self.proc.wait()


def python_times(fn, reps):
    out = []
    for _ in range(reps):
        t0 = time.perf_counter()
        fn()
        out.append((time.perf_counter() - t0) * 1e3)
    return out


def build():
    subprocess.run(["cargo", "build", "--quiet", "--release", "-p", "goalsmith-core",
                    "--example", "bench_cost"], cwd=REPO, check=True)
    return REPO / "target" / "release" / "examples" / "bench_cost"


def interleaved(side, runs, rounds, reps, impls):
    """Round-robin timing of `runs` (name -> fn(k) returning k times in ms); prints the lines."""
    names = list(runs)
    for name in names:
        runs[name](1)  # warm up
    load_before = os.getloadavg()
    got = {name: [] for name in names}
    for r in range(rounds):
        shift = r % len(names)
        for name in names[shift:] + names[:shift]:
            got[name].extend(runs[name](reps))
    load_after = os.getloadavg()
    n = rounds * reps
    best = {name: min(t) for name, t in got.items()}
    median = {name: statistics.median(t) for name, t in got.items()}
    for name in names:
        print(json.dumps({"bench": "cost_turns", "impl": name, "best_ms": round(best[name], 3),
                          "median_ms": round(median[name], 3), "n": n,
                          "params": {"kind": "maps", "n": N, "t": T, "p": P, "h": side, "w": side,
                                     "steps": "all", "mode": "expected", "threads": 1}}), flush=True)
    line = {"bench": "cost_ratios", "h": side, "w": side, "n": n, "rounds": rounds, "reps": reps,
            "numpy_impl": impls}
    for stat, v in (("best", best), ("median", median)):
        for dtype in ("f32", "f16"):
            line[f"numpy_over_goalsmith_{dtype}_{stat}"] = round(
                v[f"numpy_{dtype}"] / v[f"goalsmith_{dtype}"], 2)
        line[f"goalsmith_f16_over_f32_{stat}"] = round(v["goalsmith_f16"] / v["goalsmith_f32"], 3)
    line["load_average_1min"] = [round(load_before[0], 2), round(load_after[0], 2)]
    print(json.dumps(line), flush=True)


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rounds", type=int, default=10)
    parser.add_argument("--reps", type=int, default=3)
    parser.add_argument("--binary", help="a built bench_cost example (default: build it with cargo)")
    args = parser.parse_args()
    gs = Goalsmith(args.binary or build())
    rng = np.random.default_rng(5)
    try:
        for side in (64, 128):
            M = (rng.uniform(size=(P, side, side)) * 100).astype(np.float32)
            X32 = (rng.uniform(size=(N, T, P, side, side)) * 2 / (side * side)).astype(np.float32)
            fastest = {}
            for dtype in ("f32", "f16"):
                X = X32 if dtype == "f32" else X32.astype(np.float16)
                exprs = dict(expressions(X, M))
                if dtype == "f16":
                    conv = {}
                    for name in ("gemm_blockdiag", "matmul_strided"):
                        def via_f32(name=name, X=X):
                            return expressions(X.astype(np.float32), M)[name]()
                        conv[f"astype_f32+{name}"] = via_f32
                    exprs.update(conv)
                reference = np.einsum("ntpu,pu->np", X.reshape(N, T, P, -1).astype(np.float64),
                                      M.reshape(P, -1).astype(np.float64)) * WEIGHTS
                rows = []
                for name, fn in exprs.items():
                    got = fn()
                    assert np.allclose(got, reference, rtol=1e-3), name
                    ms = median_ms(fn)
                    nbytes = X.nbytes
                    rows.append({"bench": "cost_numpy", "median_ms": round(ms, 4), "params": {
                        "kind": "maps", "n": N, "t": T, "p": P, "h": side, "w": side,
                        "dtype": dtype, "steps": "all", "mode": "expected", "threads": 1,
                        "impl": name, "bytes": nbytes,
                        "gb_per_s": round(nbytes / (ms * 1e-3) / 1e9, 4)}})
                best = min(rows, key=lambda r: r["median_ms"])
                for r in rows:
                    r["params"]["fastest"] = r is best
                    print(json.dumps(r), flush=True)
                fastest[dtype] = (best["params"]["impl"], exprs[best["params"]["impl"]])
            runs = {
                "goalsmith_f32": lambda k, side=side: gs.times("f32", side, k),
                "goalsmith_f16": lambda k, side=side: gs.times("f16", side, k),
                "numpy_f32": lambda k, fn=fastest["f32"][1]: python_times(fn, k),
                "numpy_f16": lambda k, fn=fastest["f16"][1]: python_times(fn, k),
            }
            impls = {dtype: name for dtype, (name, _) in fastest.items()}
            interleaved(side, runs, args.rounds, args.reps, impls)
            del X32, fastest, runs
    finally:
        gs.close()


if __name__ == "__main__":
    main()

"""Times numpy expressions of the map cost sum on one thread, for comparison with the
`cost` rows of `goalsmith bench cost --json` (server/core/src/bench.rs).

The sum: for maps X of shape (N, T, P, h, w) and cost maps M of shape (P, h, w),
per_point[n, p] = w_p * sum_t sum_u X[n, t, p, u] * M[p, u], steps "all", N=200, T=10, P=2 at
64x64 and 128x128, float32 and float16. Each candidate expression is timed (median of
repeats) and checked against the others; the fastest per size and dtype is flagged.

  einsum          np.einsum("ntpu,pu->np", X, M)
  einsum_opt      the same with optimize=True
  matmul_batched  X.reshape(N*T, P, 1, hw) @ M.reshape(P, hw, 1), then a sum over t
  matmul_strided  per p: X.reshape(N*T, P, hw)[:, p] @ M[p] (a strided BLAS gemv, no copy)
  gemm_blockdiag  X.reshape(N*T, P*hw) @ B with B the (P*hw, P) block-diagonal of M: one GEMM
float16 maps are also tried converted to float32 first (numpy has no float16 BLAS).

Prints one JSON line per expression: {"bench": "cost_numpy", "median_ms": ..., "params": {...}}.
Run: tests/reference/.venv/bin/python tests/reference/bench_cost_compare.py
"""

import os

# One thread everywhere, set before numpy loads its BLAS.
for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[var] = "1"

import json  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

N, T, P = 200, 10, 2
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


def main():
    rng = np.random.default_rng(5)
    for side in (64, 128):
        M = (rng.uniform(size=(P, side, side)) * 100).astype(np.float32)
        X32 = (rng.uniform(size=(N, T, P, side, side)) * 2 / (side * side)).astype(np.float32)
        for dtype in ("f32", "f16"):
            X = X32 if dtype == "f32" else X32.astype(np.float16)
            exprs = dict(expressions(X, M))
            if dtype == "f16":
                conv = {}
                for name in ("gemm_blockdiag", "matmul_strided"):
                    def via_f32(name=name):
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
            fastest = min(rows, key=lambda r: r["median_ms"])
            for r in rows:
                r["params"]["fastest"] = r is fastest
                print(json.dumps(r), flush=True)


if __name__ == "__main__":
    main()

"""Speed and memory of Bundle.cost, side by side with numpy in one run.

    OPENBLAS_NUM_THREADS=1 python server/py/bench/bench_cost.py [--quick]

Starts a goalsmith server (as the tests do), makes a goal with 2 source points (a point and a
region) and one with 4 (point, region, mask, point) on a 64×48 frame, downloads their bundles,
then times, alternating the contenders run by run and reporting medians, each call from the
same cache state (warm: just made once untimed; cold: after reading 1 GiB of other data; see
`median_ms`):

- maps 200 × 10 × 2 × 64 × 64 float32 (65 MB) on one thread: Bundle.cost against numpy's
  fastest expression of the same sum Σ_u P(u)·M_p(u) (the best of einsum, matmul over strided
  views, tensordot, a batched matmul and one GEMM with a block-diagonal kernel, with numpy's
  BLAS held to one thread by OPENBLAS_NUM_THREADS=1 set here before numpy loads);
- the same maps as float16 through Bundle.cost, against numpy's float32;
- points N = 10 000, T = 10, P = 4, all steps, one thread and all cores;
- memory: a 1 GiB float16 batch is scored and the peak resident set size before and after is
  read from the kernel (VmHWM), in a child process of its own so nothing else counts.

Prints a Markdown table (and JSON with --json). Timing is for a report, not an assertion.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import argparse  # noqa: E402
import base64  # noqa: E402
import json  # noqa: E402
import pathlib  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

import goalsmith  # noqa: E402
from support import Server, _binary, png_gray  # noqa: E402

W, H = 64, 48


def bundles():
    folder = pathlib.Path(tempfile.mkdtemp(prefix="goalsmith-bench-"))
    s = Server(_binary(), folder)
    try:
        tok = s.token("bench", "editor")
        st, cam = s.request("POST", "/api/cameras", tok, {"name": "seed trays", "width": W, "height": H})
        assert st == 201, cam
        pix = bytes((3 * i + j) % 256 for j in range(H) for i in range(W))
        st, frame = s.request("POST", f"/api/cameras/{cam['id']}/frames", tok, png_gray(W, H, pix), "image/png")
        assert st == 201, frame
        region = {"kind": "region", "source": [8.0, 8.0],
                  "polygon": [[30.0, 6.0], [50.0, 9.0], [47.0, 25.0], [28.0, 21.0]]}
        point = {"kind": "point", "source": [5.0, 40.0], "target": [40.5, 35.25]}
        painted = bytes(255 if (i - 12) ** 2 + (j - 30) ** 2 < 20 else 0 for j in range(H) for i in range(W))
        mask = {"kind": "mask", "source": [60.0, 5.0],
                "mask_png_base64": base64.b64encode(png_gray(W, H, painted)).decode()}
        out = []
        for name, terms in [("two points", [point, region]),
                            ("four points", [point, region, mask, {**point, "target": [3.0, 3.0]}])]:
            st, rev = s.request("POST", "/api/goals", tok, {
                "name": name, "frame_id": frame["id"], "terms": terms,
                "cost": {"metric": "squared", "steps": "all"}})
            assert st == 201, rev
            st, raw = s.request("GET", f"/api/goals/{rev['goal_id']}/revisions/1/bundle.zip", tok)
            assert st == 200
            out.append(goalsmith.open_bundle(raw))
        return out
    finally:
        s.stop()


def numpy_variants(maps, kernel):
    """numpy's expressions of per[n, t, p] = Σ_u maps[n, t, p, u] · kernel[p, u]."""
    n, t, p, h, w = maps.shape
    flat = maps.reshape(n, t, p, h * w)
    k2 = kernel.reshape(p, h * w)

    def einsum():
        return np.einsum("ntpu,pu->ntp", flat, k2, optimize=True)

    def matmul_views():
        out = np.empty((n, t, p), dtype=np.float32)
        for q in range(p):
            out[:, :, q] = flat[:, :, q, :] @ k2[q]
        return out

    def tensordot():
        return np.stack([np.tensordot(flat[:, :, q, :], k2[q], axes=([2], [0])) for q in range(p)], axis=-1)

    def matmul_batched():
        return (maps.reshape(n * t, p, 1, h * w) @ k2.reshape(p, h * w, 1)).reshape(n, t, p)

    # One GEMM over all points at once: (N·T, P·hw) @ the (P·hw, P) block diagonal of the maps.
    block = np.zeros((p * h * w, p), dtype=np.float32)
    for q in range(p):
        block[q * h * w:(q + 1) * h * w, q] = k2[q]

    def gemm_block_diagonal():
        return (maps.reshape(n * t, p * h * w) @ block).reshape(n, t, p)

    return {"einsum": einsum, "matmul over strided views": matmul_views, "tensordot": tensordot,
            "matmul batched": matmul_batched, "GEMM with a block-diagonal kernel": gemm_block_diagonal}


_FLUSH = None


def _flush_caches():
    """Reads 1 GiB of unrelated data, more than this machine's last-level cache holds, so that
    whatever a contender reads next comes from memory."""
    global _FLUSH
    if _FLUSH is None:
        _FLUSH = np.ones(1 << 28, dtype=np.float32)
    _FLUSH.max()


def median_ms(fns, rounds, state="warm"):
    """Runs the functions in turn, `rounds` times, and returns each one's median in ms."""
    return {k: statistics.median(v) for k, v in times_ms(fns, rounds, state).items()}


def times_ms(fns, rounds, state="warm"):
    """Runs the functions in turn, `rounds` times, and returns each one's times in ms, round
    by round (entry i of every list is from the same round).

    Every timed call starts from the same cache state, whatever ran before it: ``"warm"``, the
    call just made once untimed (its inputs as hot as the caches can keep them, as maps that a
    model has just written are); ``"cold"``, the caches flushed first (inputs from memory).
    Without this the order of the contenders decides which inputs the caches still hold. The
    order rotates from round to round too, so that no contender always follows the same one
    (whatever one leaves behind, such as dirty cache lines to write back, falls on each in turn).
    """
    times = {k: [] for k in fns}
    names = list(fns)
    for r in range(rounds):
        for k in names[r % len(names):] + names[:r % len(names)]:
            f = fns[k]
            if state == "cold":
                _flush_caches()
            else:
                f()
            t0 = time.perf_counter()
            f()
            times[k].append((time.perf_counter() - t0) * 1e3)
    return times


def paired_ratio(slow, fast):
    """Median and quartiles of slow[i] / fast[i]: each ratio compares two calls of one round,
    made one after the other, so a change in the machine's load between rounds (it is shared)
    moves both sides of a ratio together rather than one median and not the other."""
    r = sorted(a / b for a, b in zip(slow, fast))
    q = statistics.quantiles(r, n=4) if len(r) > 1 else [r[0]] * 3
    return {"median": statistics.median(r), "q1": q[0], "q3": q[2]}


def peak_rss_child():
    """Child mode: score a 1 GiB float16 batch, report VmHWM before and after (kB)."""
    b = bundles()[0]
    n, t, p, h, w = 2048, 8, 2, 128, 128  # 2048·8·2·128·128·2 bytes = 1 GiB
    maps = np.empty((n, t, p, h, w), dtype=np.float16)
    maps.fill(np.float16(1.0 / (h * w)))  # touch every page

    def hwm():
        for line in open("/proc/self/status"):
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
        return -1

    before = hwm()
    res = b.cost(maps=maps)
    after = hwm()
    print(json.dumps({"batch_bytes": maps.nbytes, "hwm_before_kb": before, "hwm_after_kb": after,
                      "best": res.best}))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="fewer rounds (a smoke run)")
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--peak-rss-child", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.peak_rss_child:
        peak_rss_child()
        return
    rounds = 3 if args.quick else 31
    two, four = bundles()
    rng = np.random.default_rng(1)
    n, t, p, h, w = 200, 10, 2, 64, 64
    maps32 = rng.random((n, t, p, h, w), dtype=np.float32)
    maps16 = maps32.astype(np.float16)
    # The kernel numpy multiplies with: the bundle's cost maps at 64×64 (exactly what the
    # server serves at that size), here from a one-hot scoring so no HTTP is needed.
    kernel = np.stack([_cost_map(two, q, h, w) for q in range(p)])
    variants = numpy_variants(maps32, kernel)
    for f in variants.values():  # the same sums, to float32 rounding
        np.testing.assert_allclose(f().sum(axis=1) @ np.ones(p), two.cost(maps=maps32).costs, rtol=1e-4)
    contenders = {
        "goalsmith f32, 1 thread": lambda: two.cost(maps=maps32, threads=1),
        "goalsmith f16, 1 thread": lambda: two.cost(maps=maps16, threads=1),
        **{f"numpy f32 {k}": v for k, v in variants.items()},
    }
    states = {}
    for state in ("warm", "cold"):
        raw = times_ms(contenders, rounds, state)
        ms = {k: statistics.median(v) for k, v in raw.items()}
        best = min((v, k) for k, v in ms.items() if k.startswith("numpy"))
        states[state] = {
            "maps_ms": ms,
            "numpy_fastest": best[1],
            "numpy_fastest_ms": best[0],
            # numpy's time ÷ goalsmith's, round by round: above 1 is faster than numpy.
            "f32_vs_numpy": paired_ratio(raw[best[1]], raw["goalsmith f32, 1 thread"]),
            "f16_vs_numpy_f32": paired_ratio(raw[best[1]], raw["goalsmith f16, 1 thread"]),
        }
    pts = rng.uniform(-10, 75, size=(10_000, 10, 4, 2))
    pts_ms = median_ms({
        "points N=10000 T=10 P=4, 1 thread": lambda: four.cost(points=pts, threads=1),
        "points N=10000 T=10 P=4, all cores": lambda: four.cost(points=pts),
        "points with grad, all cores": lambda: four.cost(points=pts, grad=True),
    }, max(3, rounds // 3))
    child = subprocess.run([sys.executable, __file__, "--peak-rss-child"], capture_output=True,
                           text=True, check=True)
    mem = json.loads(child.stdout.strip().splitlines()[-1])
    report = {
        "maps": states,
        "points_ms": pts_ms,
        "memory": mem,
        "cpu": os.cpu_count(),
        "numpy": np.__version__,
    }
    if args.json:
        print(json.dumps(report, indent=2))
        return
    print("| case | warm | cold |")
    print("|---|---|---|")
    for k in contenders:
        print(f"| {k} | {states['warm']['maps_ms'][k]:.2f} ms | {states['cold']['maps_ms'][k]:.2f} ms |")
    for k, v in pts_ms.items():
        print(f"| {k} | {v:.2f} ms | |")
    def ratio(r):
        return f"{r['median']:.2f}× (quartiles {r['q1']:.2f}–{r['q3']:.2f})"

    for state, r in states.items():
        print(f"\n{state}: numpy's fastest is {r['numpy_fastest']} ({r['numpy_fastest_ms']:.2f} ms); "
              f"round by round, goalsmith f32 is {ratio(r['f32_vs_numpy'])} numpy's speed, "
              f"f16 {ratio(r['f16_vs_numpy_f32'])}.")
    grow = (mem["hwm_after_kb"] - mem["hwm_before_kb"]) / 1024
    print(f"1 GiB f16 batch ({mem['batch_bytes'] / 2**30:.2f} GiB): peak RSS "
          f"{mem['hwm_before_kb'] / 1024:.0f} MiB before scoring, {mem['hwm_after_kb'] / 1024:.0f} "
          f"MiB after (+{grow:.1f} MiB).")


def _cost_map(bundle, q, h, w):
    """M_q at an h × w map: the map cost of a one-hot map at each pixel (exact, float32)."""
    eye = np.zeros((h * w, 1, bundle.points, h, w), dtype=np.float32)
    idx = np.arange(h * w)
    eye[idx, 0, q, idx // w, idx % w] = 1.0
    res = bundle.cost(maps=eye)
    weight = 1.0  # both terms have weight 1
    return (res.per_point[:, q] / weight).astype(np.float32).reshape(h, w)


if __name__ == "__main__":
    main()

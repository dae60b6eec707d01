"""Times two established exact Euclidean distance transforms on one thread, for comparison
with goalsmith-core's `distance::edt` (see server/core/examples/edt_speed.rs, which builds
the same mask from the same recipe and prints a line in the same format).

Mask: 1280 x 720, pixel k (row-major) painted when u_k < 1 %, where u_k = (z_k >> 11) * 2^-53
and z_k is the k-th output of SplitMix64 seeded with 20261201 (Steele, Lea & Flood 2014; the
same few lines are in edt_speed.rs, so both sides time the very same mask).
Distances are from every pixel centre to the nearest painted pixel centre.

  scipy.ndimage.distance_transform_edt(~painted)      -- distance of nonzero to nearest zero
  cv2.distanceTransform(~painted, DIST_L2, DIST_MASK_PRECISE)

Prints one JSON line per library: {"bench": ..., "median_ms": ..., "min_ms": ...,
"cpu_median_ms": ..., "params": {...}}; cpu_median_ms counts only this process's CPU time,
the fairer figure on a shared, busy machine.
Run: tests/reference/.venv/bin/python tests/reference/bench_edt_compare.py
"""

import os

# One thread everywhere, set before numpy / scipy / cv2 load their thread pools.
for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[var] = "1"

import json  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402

import cv2  # noqa: E402
import numpy as np  # noqa: E402
from scipy import ndimage  # noqa: E402

WIDTH, HEIGHT, DENSITY, SEED = 1280, 720, 0.01, 20261201
REPEATS = 41


def splitmix64(seed, count):
    """The first `count` outputs of SplitMix64 from `seed`, vectorised (uint64 wraps)."""
    with np.errstate(over="ignore"):
        z = np.uint64(seed) + np.arange(1, count + 1, dtype=np.uint64) * np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return z ^ (z >> np.uint64(31))


def mask():
    u = (splitmix64(SEED, WIDTH * HEIGHT) >> np.uint64(11)).astype(np.float64) * 2.0**-53
    return (u < DENSITY).reshape(HEIGHT, WIDTH)


def time_ms(fn, repeats=REPEATS):
    """Median wall time, minimum wall time and median CPU time (process_time, so waiting for a
    shared, busy machine is not counted) in ms over `repeats` runs after one warm-up."""
    fn()  # warm up
    wall, cpu = [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall.append((time.perf_counter() - t0) * 1e3)
        cpu.append((time.process_time() - c0) * 1e3)
    return statistics.median(wall), min(wall), statistics.median(cpu)


def main():
    cv2.setNumThreads(1)
    painted = mask()
    not_painted = ~painted
    not_painted_u8 = not_painted.astype(np.uint8)  # cv2: distance of nonzero to nearest zero
    params = {
        "width": WIDTH,
        "height": HEIGHT,
        "density": DENSITY,
        "seed": SEED,
        "painted": int(painted.sum()),
        "repeats": REPEATS,
        "threads": 1,
    }

    ref = ndimage.distance_transform_edt(not_painted)
    got = cv2.distanceTransform(not_painted_u8, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
    params_cv = dict(params, max_abs_diff_vs_scipy=float(np.abs(ref - got).max()))

    for name, fn, p in (
        ("edt_scipy", lambda: ndimage.distance_transform_edt(not_painted), params),
        ("edt_opencv", lambda: cv2.distanceTransform(not_painted_u8, cv2.DIST_L2, cv2.DIST_MASK_PRECISE), params_cv),
    ):
        ms, least, cpu = time_ms(fn)
        line = {"bench": name, "median_ms": round(ms, 3), "min_ms": round(least, 3), "cpu_median_ms": round(cpu, 3)}
        print(json.dumps(dict(line, params=p)))


if __name__ == "__main__":
    main()

"""Times goalsmith's point tracking against OpenCV's on the same frames, in turns, on one
thread, and prints the ratios.

Frames: 30 of 640 x 480, frame k the smooth texture of `bench::track_bench_frame` in
server/core/src/bench.rs, shifted by (0.37 k, 0.21 k) px and rounded to 8 bits (the formula is
repeated below; the two agree up to a grey level where a value lands on .5).

  goalsmith  `goalsmith bench track --json` (release build, built here with cargo)
  opencv     cv2.buildOpticalFlowPyramid(frame, (21, 21), 3, withDerivatives=True) per frame
             (4 levels with level 0, Scharr derivatives, as goalsmith's pyramid), and per frame
             step cv2.calcOpticalFlowPyrLK forward and back (the forward-backward check
             goalsmith runs), 21 x 21 window, 30 iterations or 0.01 px; cv2.setNumThreads(1).
             The Python binding takes images, not pyramids, so each call builds both
             pyramids inside: OpenCV's step time includes them, goalsmith's does not.

The two take turns: each round runs goalsmith's benchmark once (it reports its own medians) and
then times OpenCV's REPS runs; a figure is the best of its medians over the rounds, and the
ratio is OpenCV / goalsmith (above 1: goalsmith is faster).

Run: tests/reference/.venv/bin/python tests/reference/bench_track_compare.py [--rounds R] [--reps K]
"""

import os

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import pathlib  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import time  # noqa: E402

import cv2  # noqa: E402
import numpy as np  # noqa: E402

REPO = pathlib.Path(__file__).resolve().parents[2]
W, H, FRAMES = 640, 480, 30
WIN, MAX_LEVEL = (21, 21), 3
CRITERIA = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 30, 0.01)


def frame(k):
    j, i = np.mgrid[0:H, 0:W].astype(np.float64)
    x, y = i - 0.37 * k, j - 0.21 * k
    v = (128.0 + 40.0 * np.sin(0.11 * x + 0.07 * y) + 30.0 * np.sin(0.05 * x - 0.13 * y + 1.3)
         + 25.0 * np.cos(0.17 * x) * np.sin(0.19 * y))
    # Rust's f64::round rounds halves away from zero; so does this.
    return np.clip(np.sign(v) * np.floor(np.abs(v) + 0.5), 0, 255).astype(np.uint8)


def points(n):
    side = int(np.ceil(np.sqrt(n)))
    step = 400.0 / side
    out = [[120.0 + (k % side + 0.5) * step, 90.0 + (k // side + 0.5) * step * 0.75] for k in range(n)]
    return np.array(out, dtype=np.float32).reshape(-1, 1, 2)


def goalsmith_rows(binary):
    out = subprocess.run([str(binary), "bench", "track", "--json"], check=True, capture_output=True, text=True)
    return [json.loads(line) for line in out.stdout.splitlines() if line.strip()]


def opencv_times(frames, reps):
    pyr = []
    for _ in range(reps):
        t0 = time.perf_counter()
        for f in frames:
            cv2.buildOpticalFlowPyramid(f, WIN, MAX_LEVEL, withDerivatives=True)
        pyr.append((time.perf_counter() - t0) * 1000 / len(frames))
    # OpenCV's Python binding takes images only (not pyramids) in calcOpticalFlowPyrLK, so each
    # call builds the pyramids of both its images inside: a forward-and-back step builds four.
    track = {}
    for n in (16, 100):
        seeds = points(n)
        times = []
        for _ in range(reps):
            t0 = time.perf_counter()
            at = seeds
            for a, b in zip(frames, frames[1:]):
                nxt, _, _ = cv2.calcOpticalFlowPyrLK(a, b, at, None, winSize=WIN, maxLevel=MAX_LEVEL, criteria=CRITERIA)
                cv2.calcOpticalFlowPyrLK(b, a, nxt, None, winSize=WIN, maxLevel=MAX_LEVEL, criteria=CRITERIA)
                at = nxt
            times.append((time.perf_counter() - t0) * 1000 / (len(frames) - 1))
        track[n] = statistics.median(times)
    return statistics.median(pyr), track


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--reps", type=int, default=5)
    args = ap.parse_args()
    cv2.setNumThreads(1)
    subprocess.run(["cargo", "build", "--release", "-q"], cwd=REPO, check=True)
    binary = REPO / "target" / "release" / "goalsmith"
    frames = [frame(k) for k in range(FRAMES)]
    best = {}
    for _ in range(args.rounds):
        for row in goalsmith_rows(binary):
            key = ("goalsmith", row["params"]["stage"], row["params"].get("points"))
            best[key] = min(best.get(key, float("inf")), row["median_ms"])
        pyr, track = opencv_times(frames, args.reps)
        best[("opencv", "pyramid", None)] = min(best.get(("opencv", "pyramid", None), float("inf")), pyr)
        for n, ms in track.items():
            best[("opencv", "track", n)] = min(best.get(("opencv", "track", n), float("inf")), ms)
    for stage, n in (("pyramid", None), ("track", 16), ("track", 100)):
        g, o = best[("goalsmith", stage, n)], best[("opencv", stage, n)]
        row = {"stage": stage, "points": n, "goalsmith_ms": round(g, 4), "opencv_ms": round(o, 4),
               "opencv_over_goalsmith": round(o / g, 3), "rounds": args.rounds,
               "opencv": cv2.__version__, "per": "frame", "threads": 1}
        if stage == "track":
            # OpenCV's step builds the pyramids of its images inside (four per step), which
            # goalsmith's step does not; no estimate of OpenCV's tracking alone is made, since
            # its internal pyramids (no stored derivatives) cost less than the stage timed above.
            row["opencv_step_builds_pyramids"] = True
        print(json.dumps(row))


if __name__ == "__main__":
    main()

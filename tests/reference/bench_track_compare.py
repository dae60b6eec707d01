"""Times goalsmith's point tracking against OpenCV's on the same frames, in turns, on one
thread, and prints the ratios.

Frames: 30 of 640 x 480, frame k the smooth texture of `bench::track_bench_frame` in
server/core/src/bench.rs, shifted by (0.37 k, 0.21 k) px and rounded to 8 bits (the formula is
repeated below; the two agree up to a grey level where a value lands on .5).

  goalsmith  `goalsmith bench track --json` (release build, built here with cargo): per frame,
             building the pyramid from the 8-bit frame (4 levels with Scharr gradients) in fresh
             memory (`memory: fresh`, each pyramid allocated and dropped) and into the memory of
             the previous one (`memory: reused`, Pyramid::rebuild_from_u8), and one frame step
             of 16 and of 100 points with the forward-backward check on pyramids built before.
  opencv     cv2.setNumThreads(1), 21 x 21 window, maxLevel 3, 30 iterations or 0.01 px:
             pyramid    cv2.buildOpticalFlowPyramid(frame, (21, 21), 3, withDerivatives=True)
                        per frame (4 levels with level 0, Scharr derivatives, as goalsmith's),
                        new arrays each call.
             track, with pyramids
                        per frame step cv2.calcOpticalFlowPyrLK forward and back (the
                        forward-backward check goalsmith runs). The Python binding takes images
                        only: given the lists buildOpticalFlowPyramid returns it refuses them
                        (OpenCV 5.0.0: "prevImg is not a numerical tuple", "Expected
                        Ptr<cv::UMat>"), so each call builds the pyramids of both its images
                        inside (without stored derivatives; the Scharr derivatives of the first
                        image's levels are computed inside too). This figure includes all that.
             track, alone (estimated)
                        the same step with one point, timed in the same reps, does all of that
                        pyramid work and tracks one point; the tracking of n points alone is
                        estimated as (step(n) - step(1)) * n / (n - 1), the marginal cost of a
                        point times n, from the best figures of step(n) and step(1). OpenCV's pyramids are fresh in the cache when it tracks;
                        goalsmith's step reads pyramids built earlier (30 of them, more than the
                        cache holds), so the estimate, if anything, favours OpenCV.

The two take turns: each round runs goalsmith's benchmark once (it reports its own medians) and
then times OpenCV's REPS runs of each; a figure is the best of its medians over the rounds, and
a ratio is OpenCV / goalsmith (above 1: goalsmith is faster). The 1-minute load average is
printed before and after.

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
    # calcOpticalFlowPyrLK on images: each call builds the pyramids of both its images inside,
    # so a forward-and-back step builds four. One point's step is timed in the same reps.
    sizes = (1, 16, 100)
    times = {n: [] for n in sizes}
    for _ in range(reps):
        for n in sizes:
            seeds = points(n)
            t0 = time.perf_counter()
            at = seeds
            for a, b in zip(frames, frames[1:]):
                nxt, _, _ = cv2.calcOpticalFlowPyrLK(a, b, at, None, winSize=WIN, maxLevel=MAX_LEVEL, criteria=CRITERIA)
                cv2.calcOpticalFlowPyrLK(b, a, nxt, None, winSize=WIN, maxLevel=MAX_LEVEL, criteria=CRITERIA)
                at = nxt
            times[n].append((time.perf_counter() - t0) * 1000 / (len(frames) - 1))
    track = {n: statistics.median(t) for n, t in times.items()}
    return statistics.median(pyr), track


def load():
    return round(os.getloadavg()[0], 2)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--reps", type=int, default=5)
    args = ap.parse_args()
    cv2.setNumThreads(1)
    subprocess.run(["cargo", "build", "--release", "-q"], cwd=REPO, check=True)
    binary = REPO / "target" / "release" / "goalsmith"
    frames = [frame(k) for k in range(FRAMES)]
    load_before = load()
    best = {}

    def keep(key, ms):
        best[key] = min(best.get(key, float("inf")), ms)

    for _ in range(args.rounds):
        for row in goalsmith_rows(binary):
            p = row["params"]
            keep(("goalsmith", p["stage"], p.get("memory"), p.get("points")), row["median_ms"])
        pyr, track = opencv_times(frames, args.reps)
        keep(("opencv", "pyramid"), pyr)
        for n, ms in track.items():
            keep(("opencv", "track", n), ms)
    for n in (16, 100):
        # The tracking of n points alone, from the marginal cost of a point: the best step of n
        # points less the best step of one.
        best[("opencv", "track alone", n)] = (best[("opencv", "track", n)] - best[("opencv", "track", 1)]) * n / (n - 1)
    common = {"rounds": args.rounds, "reps": args.reps, "opencv": cv2.__version__, "per": "frame",
              "threads": 1, "load_before": load_before, "load_after": load()}
    out = []
    for memory in ("fresh", "reused"):
        g, o = best[("goalsmith", "pyramid", memory, None)], best[("opencv", "pyramid")]
        out.append({"stage": "pyramid", "goalsmith_memory": memory, "goalsmith_ms": round(g, 4),
                    "opencv_ms": round(o, 4), "opencv_over_goalsmith": round(o / g, 3)})
    for n in (16, 100):
        g = best[("goalsmith", "track", None, n)]
        for what, key in (("with pyramids", "track"), ("alone (estimated)", "track alone")):
            o = best[("opencv", key, n)]
            out.append({"stage": "track", "points": n, "opencv_step": what, "goalsmith_ms": round(g, 4),
                        "opencv_ms": round(o, 4), "opencv_over_goalsmith": round(o / g, 3)})
    out.append({"stage": "track", "points": 1, "opencv_step": "with pyramids",
                "opencv_ms": round(best[("opencv", "track", 1)], 4)})
    for row in out:
        print(json.dumps({**row, **common}))


if __name__ == "__main__":
    main()

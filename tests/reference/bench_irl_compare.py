"""Times goalsmith's reward fit against the numpy implementation of gen_irl.py on the same
problem, in turns, on one thread, and prints the ratios.

Problem (the recipe of `bench::irl_bench_problem` in server/core/src/bench.rs, repeated
below): a 640 x 480 frame in 8 px cells (80 x 60), six features, 10 demos of 100 moves.

  goalsmith  `cargo run --release -p goalsmith-core --example bench_irl` (the `irl` rows of
             goalsmith's built-in benchmark): one evaluation of the objective and gradient, and
             a full fit from w = 0 (L-BFGS, stop at |grad|_2 <= 1e-6)
  numpy      gen_irl.evaluate at the same weights, and gen_irl.fit (scipy L-BFGS-B, gtol 1e-6
             on the largest gradient component, so it stops no later than goalsmith's rule)

Each round runs goalsmith's benchmark once (it reports its own medians) and then times numpy's
REPS runs; a figure is the best of its medians over the rounds. The ratio is numpy / goalsmith
(above 1: goalsmith is faster). The fits' iteration counts differ (different line searches),
so the fit row also gives both iteration counts; the evaluate row compares like with like.

Run: tests/reference/.venv/bin/python tests/reference/bench_irl_compare.py [--rounds R] [--reps K]
"""

import os

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import pathlib  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
import gen_irl  # noqa: E402

REPO = pathlib.Path(__file__).resolve().parents[2]


def sign(v):
    return (v > 0) - (v < 0)


def bench_problem():
    features = [
        {"kind": "distance_to", "point": [483.5, 123.5]},
        {"kind": "inside", "polygon": gen_irl.rect(200.0, 160.0, 320.0, 300.0)},
        {"kind": "rbf", "centre": [120.0, 360.0], "sigma_px": 40.0},
        {"kind": "rbf", "centre": [400.0, 300.0], "sigma_px": 60.0},
        {"kind": "distance_to", "point": [100.0, 80.0]},
        {"kind": "no_go"},
    ]
    demos = []
    for i in range(10):
        at, waypoint, goal, reached = (2 + 5 * i, 58 - 2 * i), (40, 10 + 3 * i), (60, 15), False
        path = [list(at)]
        while len(path) < 101:
            reached |= at == waypoint
            to = goal if reached else waypoint
            at = (at[0] + sign(to[0] - at[0]), at[1] + sign(to[1] - at[1]))
            path.append(list(at))
        demos.append(path)
    grid = {"width": 640, "height": 480, "cell_px": 8, "no_go": [gen_irl.rect(520.0, 320.0, 600.0, 420.0)],
            "remove_no_go": False}
    return gen_irl.build_problem(grid, features, demos)


def goalsmith_rows():
    out = subprocess.run(["cargo", "run", "-q", "--release", "-p", "goalsmith-core", "--example", "bench_irl"],
                         cwd=REPO, check=True, capture_output=True, text=True)
    return {json.loads(line)["params"]["stage"]: json.loads(line) for line in out.stdout.splitlines() if line.strip()}


def numpy_times(problem, reps, l2=1e-3):
    w = np.array([0.5 - 0.3 * j for j in range(problem["phi"].shape[1])])
    ev = []
    for _ in range(reps):
        t0 = time.perf_counter()
        gen_irl.evaluate(problem, w, l2)
        ev.append((time.perf_counter() - t0) * 1000)
    fits, res = [], None
    for _ in range(max(1, reps // 3)):
        t0 = time.perf_counter()
        res = gen_irl.fit(problem, l2, gtol=1e-6, maxiter=200)
        fits.append((time.perf_counter() - t0) * 1000)
    return statistics.median(ev), statistics.median(fits), res


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--reps", type=int, default=6)
    args = ap.parse_args()
    problem = bench_problem()
    best = {}
    info = {}
    for _ in range(args.rounds):
        rows = goalsmith_rows()
        for stage in ("evaluate", "fit"):
            best[("goalsmith", stage)] = min(best.get(("goalsmith", stage), float("inf")), rows[stage]["median_ms"])
        info["goalsmith_iterations"] = rows["fit"]["params"]["iterations"]
        ev, fit, res = numpy_times(problem, args.reps)
        best[("numpy", "evaluate")] = min(best.get(("numpy", "evaluate"), float("inf")), ev)
        best[("numpy", "fit")] = min(best.get(("numpy", "fit"), float("inf")), fit)
        info["numpy_iterations"], info["numpy_evaluations"] = int(res.nit), int(res.nfev)
    for stage in ("evaluate", "fit"):
        g, n = best[("goalsmith", stage)], best[("numpy", stage)]
        row = {"stage": stage, "goalsmith_ms": round(g, 4), "numpy_ms": round(n, 4),
               "numpy_over_goalsmith": round(n / g, 3), "rounds": args.rounds, "numpy": np.__version__,
               "threads": 1}
        if stage == "fit":
            row.update(info)
        print(json.dumps(row))


if __name__ == "__main__":
    main()

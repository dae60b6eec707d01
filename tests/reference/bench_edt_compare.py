"""Times goalsmith-core's `distance::edt` against two established exact Euclidean distance
transforms, in turns, on one thread, and prints the ratios.

Mask: 1280 x 720, pixel k (row-major) painted when u_k < 1 %, where u_k = (z_k >> 11) * 2^-53
and z_k is the k-th output of SplitMix64 seeded with 20261201 (Steele, Lea & Flood 2014; the
same recipe is `bench::edt_bench_mask` in server/core/src/bench.rs, and the painted counts are
checked to agree). Distances are from every pixel centre to the nearest painted pixel centre.

  goalsmith  server/core/examples/edt_speed.rs --serve (built here with cargo, release)
  scipy      scipy.ndimage.distance_transform_edt(~painted)  -- distance of nonzero to nearest zero
  opencv     cv2.distanceTransform(~painted, DIST_L2, DIST_MASK_PRECISE), cv2.setNumThreads(1)

The three take turns: each round times REPS runs of each, in an order that rotates from round
to round, so that a change in the load of a shared machine reaches all three alike. A
library's figure is its best (least) wall time over all ROUNDS x REPS runs (N, printed), with
the median beside it; the ratios are scipy / goalsmith and OpenCV / goalsmith of those bests,
and also the least ratio of any one round (each round's best against each round's best), which
shows whether the lead holds in every round. goalsmith's distances are checked against
scipy's before timing.

Prints one JSON line per library and a line of ratios per goalsmith build (`--also` adds
builds, say of another branch, to the same turns).
Run: tests/reference/.venv/bin/python tests/reference/bench_edt_compare.py [--rounds R] [--reps K]
"""

import os

# One thread everywhere, set before numpy / scipy / cv2 load their thread pools.
for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import pathlib  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402

import cv2  # noqa: E402
import numpy as np  # noqa: E402
from scipy import ndimage  # noqa: E402

WIDTH, HEIGHT, DENSITY, SEED = 1280, 720, 0.01, 20261201
REPO = pathlib.Path(__file__).resolve().parents[2]


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


class Goalsmith:
    """The `edt_speed --serve` timing server as a child process."""

    def __init__(self, binary):
        self.proc = subprocess.Popen([str(binary), "--serve"], stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, text=True)

    def ask(self, line):
        self.proc.stdin.write(line + "\n")
        self.proc.stdin.flush()
        reply = self.proc.stdout.readline()
        if not reply:
            raise RuntimeError(f"edt_speed --serve gave no answer to {line!r}")
        return json.loads(reply)

    def times(self, reps):
        return self.ask(f"time {reps}")["times_ms"]

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
                    "--example", "edt_speed"], cwd=REPO, check=True)
    return REPO / "target" / "release" / "examples" / "edt_speed"


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rounds", type=int, default=20)
    parser.add_argument("--reps", type=int, default=5)
    parser.add_argument("--binary", help="a built edt_speed example (default: build it with cargo)")
    parser.add_argument("--also", action="append", default=[], metavar="NAME=PATH",
                        help="time another build of edt_speed (say, of another branch) in the "
                             "same turns, reported as edt_NAME")
    args = parser.parse_args()

    cv2.setNumThreads(1)
    painted = mask()
    not_painted = ~painted
    not_painted_u8 = not_painted.astype(np.uint8)  # cv2: distance of nonzero to nearest zero
    servers = {"goalsmith": Goalsmith(args.binary or build())}
    try:
        for spec in args.also:
            name, _, path = spec.partition("=")
            servers[name] = Goalsmith(path)
        ref = ndimage.distance_transform_edt(not_painted)
        diff = {"scipy": 0.0}
        for name, gs in servers.items():
            info = gs.ask("info")
            if (info["width"], info["height"], info["painted"]) != (WIDTH, HEIGHT, int(painted.sum())):
                raise RuntimeError(f"{name}'s mask differs from this script's: {info}")
            with tempfile.TemporaryDirectory() as tmp:
                path = os.path.join(tmp, "edt.f32")
                gs.ask(f"dump {path}")
                ours = np.fromfile(path, dtype="<f4").reshape(HEIGHT, WIDTH)
            diff[name] = float(np.abs(ours - ref).max())
        theirs = cv2.distanceTransform(not_painted_u8, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
        diff["opencv"] = float(np.abs(theirs - ref).max())

        runs = {name: gs.times for name, gs in servers.items()}
        runs["scipy"] = lambda k: python_times(lambda: ndimage.distance_transform_edt(not_painted), k)
        runs["opencv"] = lambda k: python_times(
            lambda: cv2.distanceTransform(not_painted_u8, cv2.DIST_L2, cv2.DIST_MASK_PRECISE), k)
        names = list(runs)
        for name in names:
            runs[name](1)  # warm up
        load_before = os.getloadavg()
        rounds = []
        for r in range(args.rounds):
            shift = r % len(names)
            order = names[shift:] + names[:shift]
            rounds.append({name: runs[name](args.reps) for name in order})
        load_after = os.getloadavg()
    finally:
        for gs in servers.values():
            gs.close()

    n = args.rounds * args.reps
    best = {}
    for name in names:
        times = [t for rnd in rounds for t in rnd[name]]
        best[name] = min(times)
        print(json.dumps({"bench": f"edt_{name}", "best_ms": round(best[name], 3),
                          "median_ms": round(statistics.median(times), 3), "n": n,
                          "max_abs_diff_vs_scipy": diff[name],
                          "params": {"width": WIDTH, "height": HEIGHT, "density": DENSITY,
                                     "seed": SEED, "painted": int(painted.sum()), "threads": 1}}))
    for name in servers:
        line = {"bench": "edt_ratios", "goalsmith": name, "n": n, "rounds": args.rounds,
                "reps": args.reps}
        for other in ("scipy", "opencv"):
            line[f"{other}_over_goalsmith"] = round(best[other] / best[name], 2)
            least = min(min(rnd[other]) / min(rnd[name]) for rnd in rounds)
            line[f"least_round_{other}_over_goalsmith"] = round(least, 2)
        line["load_average_1min"] = [round(load_before[0], 2), round(load_after[0], 2)]
        print(json.dumps(line))


if __name__ == "__main__":
    main()

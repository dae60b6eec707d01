"""Reference costs for the HTTP cost route and the offline `goalsmith cost` (tests/it/export.rs).

Fixed goals on the 64 x 48 frame of tests/it/support.rs (`camera_and_frame`, a camera without
zones), fixed candidates, and the expected `costs`, `per_point` and `best` computed here in numpy
float64 from the formulas of docs/conventions.md, not from goalsmith:
  - P source points over all terms in term order; a rigid term gives one point per source and
    its weight divided evenly over them (weight / k, as a float64 division);
  - d_p(x): point and rigid targets np.hypot; a region shapely's Polygon.distance (0 inside or
    on the boundary); a mask the minimum over its painted pixel centres of the Euclidean
    distance (brute force, checked against scipy.ndimage.distance_transform_edt on the grid);
  - metric m: euclidean d, squared d*d, huber d*d/2 for d <= delta, else delta (d - delta/2);
  - points: c = m(d), or in hit mode c = -ln(1e-9 + 1[d <= tol]);
  - maps (N, T, P, h, w): c = sum_u P(u) M_p(u), with map pixel (i, j) standing for frame point
    ((i + .5) W/w - .5, (j + .5) H/h - .5) and M_p = m(d_p) there as float32 (cost maps are
    float32 by the conventions); the maps are used as sent, not renormalised;
  - steps final (t = T-1) or all (sum over t); per_point[n][p] = w_p sum_t c;
    costs[n] = sum_p per_point[n][p]; best = the first candidate of least cost.

Two parts:
  - `export_goal`: the goal of tests/it/export.rs's `goal()` (a point and an axis-aligned
    region, squared, all steps), with the candidate points of its bundle test and a batch of
    probability maps at half the frame size. The map values are multiples of 2^-10 and the
    sample points half-integers, so every M_p is a multiple of 1/4 and every product and partial
    sum a dyadic rational that float32 holds exactly: the map costs are exact in any summation
    order, and the test compares them exactly.
  - `goals`: one set of terms (point, region with slanted edges, mask, rigid with three
    sources) under three cost settings, each with candidates partly outside the frame, one far
    away, one on every target at its last step and an exact copy of it later (so `best` is the
    first of a tie). Distances here are irrational, and goalsmith computes them in another order
    of float64 operations than shapely and numpy, so these agree to rounding: the test allows
    1e-9 relative. The script checks that no distance lies within 1e-6 of a tolerance (a hit
    would otherwise depend on rounding) and that `best` is decided by more than that margin.

Masks are written as rows of 0/1 (`mask_rows`); the test encodes them as the PNG the goal
document carries (painted pixels 255, the others 0).

Run:  tests/reference/.venv/bin/python tests/reference/gen_route_cost.py
Writes tests/reference/route_cost.json.
"""

import json
import pathlib

import numpy as np
from scipy import ndimage
from shapely.geometry import Point, Polygon

W, H = 64, 48
EPS = 1e-9
RNG = np.random.default_rng(20261202)


# --- distances, metrics, totals ------------------------------------------------------------

def source_points(terms):
    """One entry per source point, in term order: (target kind, target, weight, tolerance)."""
    out = []
    for t in terms:
        w = float(t.get("weight", 1.0))
        tol = float(t.get("tolerance_px", 5.0))
        if t["kind"] == "rigid":
            k = len(t["sources"])
            out += [("point", tg, w / k, tol) for tg in t["targets"]]
        elif t["kind"] == "point":
            out.append(("point", t["target"], w, tol))
        elif t["kind"] == "region":
            out.append(("region", t["polygon"], w, tol))
        elif t["kind"] == "mask":
            out.append(("mask", mask_of(t["mask_rows"]), w, tol))
        else:
            raise ValueError(t["kind"])
    return out


def mask_of(rows):
    return np.array([[c == "1" for c in row] for row in rows], dtype=bool)


def distance_fn(kind, target):
    if kind == "point":
        tx, ty = target
        return lambda x, y: np.hypot(np.asarray(x, float) - tx, np.asarray(y, float) - ty)
    if kind == "region":
        poly = Polygon(target)
        assert poly.is_valid and poly.exterior.is_simple
        return np.vectorize(lambda x, y: poly.distance(Point(x, y)), otypes=[float])
    painted = np.argwhere(target)  # (row j, column i)
    assert len(painted) > 0

    def brute(x, y):
        x, y = np.broadcast_arrays(np.asarray(x, float), np.asarray(y, float))
        dx = x[..., None] - painted[:, 1]
        dy = y[..., None] - painted[:, 0]
        return np.sqrt((dx * dx + dy * dy).min(axis=-1))

    # On the frame grid the brute force is scipy's exact Euclidean distance transform.
    gx, gy = np.meshgrid(np.arange(W, dtype=float), np.arange(H, dtype=float))
    assert target.shape == (H, W)
    assert np.allclose(brute(gx, gy), ndimage.distance_transform_edt(~target), rtol=0, atol=1e-12)
    return brute


def metric_fn(cost):
    name = cost.get("metric", "euclidean")
    if name == "euclidean":
        return lambda d: d
    if name == "squared":
        return lambda d: d * d
    delta = cost["huber_delta_px"]
    return lambda d: np.where(d <= delta, 0.5 * d * d, delta * (d - 0.5 * delta))


def finish(c, weights, steps):
    """c: (N, T, P) -> per_point (N, P), costs (N,), best."""
    sel = c[:, -1:, :] if steps == "final" else c
    per_point = sel.sum(axis=1) * weights
    costs = per_point.sum(axis=1)
    best = int(np.flatnonzero(costs == costs.min())[0])
    return per_point, costs, best


def point_costs(terms, cost, pts, check_margins=False):
    """Candidates pts (N, T, P, 2) against the goal: per_point, costs, best."""
    sp = source_points(terms)
    assert pts.shape[2] == len(sp)
    d = np.stack([distance_fn(kind, tg)(pts[:, :, p, 0], pts[:, :, p, 1])
                  for p, (kind, tg, _, _) in enumerate(sp)], axis=-1)  # (N, T, P)
    weights = np.array([w for _, _, w, _ in sp])
    tols = np.array([tol for _, _, _, tol in sp])
    if check_margins:
        off = np.abs(d - tols)
        assert off.min() > 1e-6, f"a distance within {off.min()} of its tolerance"
        if cost.get("metric") == "huber":
            off = np.abs(d - cost["huber_delta_px"])
            assert off.min() > 1e-6, "a distance at Huber's delta"
    if cost.get("mode", "expected") == "hit":
        c = -np.log(EPS + (d <= tols).astype(float))
    else:
        c = metric_fn(cost)(d)
    return finish(c, weights, cost.get("steps", "final"))


def map_costs(terms, cost, maps):
    """Probability maps (N, T, P, h, w), expected mode."""
    assert cost.get("mode", "expected") == "expected"
    n, t, p, h, w = maps.shape
    sp = source_points(terms)
    assert p == len(sp)
    xs = (np.arange(w) + 0.5) * W / w - 0.5
    ys = (np.arange(h) + 0.5) * H / h - 0.5
    gx, gy = np.meshgrid(xs, ys)
    m = metric_fn(cost)
    kernel = np.stack([m(distance_fn(kind, tg)(gx, gy)) for kind, tg, _, _ in sp])
    kernel = kernel.astype(np.float32).astype(np.float64)  # cost maps are float32
    c = np.einsum("ntphw,phw->ntp", maps.astype(np.float64), kernel)
    return kernel, finish(c, np.array([wt for _, _, wt, _ in sp]), cost.get("steps", "final"))


def result(per_point, costs, best):
    return {"per_point": per_point.tolist(), "costs": costs.tolist(), "best": best}


# --- the goal of tests/it/export.rs --------------------------------------------------------

def export_goal():
    terms = [
        {"kind": "point", "source": [10.0, 12.0], "target": [40.0, 30.0], "tolerance_px": 3.0},
        {"kind": "region", "source": [20.0, 5.0],
         "polygon": [[30.0, 5.0], [50.0, 5.0], [50.0, 20.0], [30.0, 20.0]], "weight": 2.0},
    ]
    cost = {"metric": "squared", "steps": "all"}
    # The bundle test's candidates: N = 2, T = 1, P = 2.
    pts = np.array([[[[37.0, 30.0], [40.0, 12.0]]], [[[0.0, 0.0], [63.0, 47.0]]]])
    # Maps (N, T, P, h, w) = (3, 2, 2, 24, 32) of random multiples of 2^-10 (0 to 3/1024), so
    # the layout of the batch matters; candidate 1 keeps only what lies near its targets (and
    # is the best).
    n, t, p, h, w = 3, 2, 2, 24, 32
    maps = RNG.integers(0, 4, (n, t, p, h, w)).astype(np.float64)
    near = np.zeros((p, h, w), dtype=bool)
    near[0, 12:18, 17:23] = True  # around the point target (40, 30), map pixel (20, 15)
    near[1, 1:11, 14:26] = True  # the region x 30..50, y 5..20, and a little around it
    maps[1] *= near
    maps = (maps / 1024.0).astype(np.float32)
    assert np.all(maps.astype(np.float64) * 1024 == np.round(maps.astype(np.float64) * 1024))
    kernel, maps_result = map_costs(terms, cost, maps)
    # The exactness argument, checked: every cost-map value is a multiple of 1/4 and the maps
    # multiples of 2^-10, so each product is a multiple of 2^-12; a sum of them (all >= 0) is
    # exact in float32 while it stays below 2^12 (24 bits), and every map's whole sum is below
    # that. The totals over steps and points are then exact in float64.
    assert np.all(kernel * 4 == np.round(kernel * 4))
    plane_sums = np.einsum("ntphw,phw->ntp", maps.astype(np.float64), kernel)
    assert plane_sums.max() < 2 ** 12, plane_sums.max()
    return {
        "terms": terms,
        "cost": cost,
        "points": dict(points=pts.tolist(), **result(*point_costs(terms, cost, pts))),
        "maps": dict(n=n, t=t, p=p, height=h, width=w,
                     values=[float(v) for v in maps.ravel()],
                     **result(*maps_result)),
    }


# --- one goal of every scorable term kind, three cost settings -----------------------------

def rich_terms():
    yy, xx = np.mgrid[0:H, 0:W]
    mask = (xx - 12.0) ** 2 + (yy - 38.0) ** 2 <= 9.5  # a pot, radius about 3
    mask |= (xx >= 50) & (xx <= 55) & (yy >= 36) & (yy <= 40)  # a tray cell
    mask[44, 30] = True  # one stray painted pixel
    # The rigid term's targets: its sources turned by 30 degrees about their centroid and moved.
    sources = np.array([[8.0, 8.0], [16.0, 8.0], [12.0, 14.0]])
    a = np.deg2rad(30.0)
    rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    centre = sources.mean(axis=0)
    targets = ((sources - centre) @ rot.T + centre + [14.0, 20.0]).round(3)
    return [
        {"kind": "point", "label": "seedling", "source": [10.0, 12.0], "target": [40.5, 30.25],
         "weight": 1.5, "tolerance_px": 3.0},
        {"kind": "region", "label": "mat", "source": [20.0, 5.0],
         "polygon": [[30.0, 4.0], [52.25, 8.5], [56.0, 20.0], [41.5, 27.75], [28.0, 16.0]],
         "weight": 2.0, "tolerance_px": 2.0},
        {"kind": "mask", "label": "pots", "source": [5.0, 30.0],
         "mask_rows": ["".join("1" if v else "0" for v in row) for row in mask],
         "weight": 0.5, "tolerance_px": 2.5},
        {"kind": "rigid", "label": "tray", "sources": sources.tolist(),
         "targets": targets.tolist(), "weight": 1.2, "tolerance_px": 4.0},
    ]


def rich_candidates(terms):
    """(N, T, P, 2) = (6, 3, 6, 2): random (partly outside the frame); candidate 1 far away at
    one step; candidate 2 on every target at its last step; candidate 4 a copy of candidate 2."""
    n, t, p = 6, 3, 6
    pts = RNG.uniform([-10.0, -10.0], [W + 10.0, H + 10.0], (n, t, p, 2)).round(3)
    mask = mask_of(terms[2]["mask_rows"])
    painted = np.argwhere(mask)[5]  # (row, column) of one painted pixel centre
    pts[2, -1] = [terms[0]["target"], terms[1]["polygon"][3], [painted[1], painted[0]],
                  *terms[3]["targets"]]
    pts[2, :-1] = pts[2, -1] + [[0.5, -0.75]]  # near the targets before the last step
    pts[1, 1, 0] = [1e4, -3e4]
    pts[4] = pts[2]
    return pts


def main():
    terms = rich_terms()
    pts = rich_candidates(terms)
    goals = []
    for name, cost in [
        ("squared, all steps", {"metric": "squared", "steps": "all", "mode": "expected"}),
        ("huber, final step", {"metric": "huber", "huber_delta_px": 2.5, "steps": "final",
                               "mode": "expected"}),
        ("euclidean hit, all steps", {"metric": "euclidean", "steps": "all", "mode": "hit"}),
    ]:
        per, costs, best = point_costs(terms, cost, pts, check_margins=True)
        assert best == 2, (name, costs)
        others = np.delete(costs, [2, 4])
        assert others.min() > costs[2] * (1 + 1e-6) + 1e-6, (name, costs)
        assert costs[4] == costs[2]
        goals.append({"name": name, "terms": terms, "cost": cost, "points": pts.tolist(),
                      **result(per, costs, best)})
    out = {
        "width": W,
        "height": H,
        "epsilon": EPS,
        "export_goal": export_goal(),
        "goals": goals,
    }
    path = pathlib.Path(__file__).with_name("route_cost.json")
    path.write_text(json.dumps(out, separators=(",", ":")) + "\n")
    print(f"wrote {path} ({path.stat().st_size} bytes, {len(goals)} goals)")


if __name__ == "__main__":
    main()

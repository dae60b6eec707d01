"""Reference vectors for server/core/src/cost.rs and npy.rs.

The cost formulas of docs/conventions.md evaluated directly in numpy (float64) on random
data with a fixed seed:
  - distances: point targets by np.hypot; a polygon region by shapely (Polygon.distance, 0
    inside); a painted mask by scipy.ndimage.distance_transform_edt on the frame grid and by
    brute force (min over painted pixel centres) at off-grid positions; both agree on the grid;
  - metric m: euclidean d, squared d^2, huber (d^2/2 for d <= delta, else delta (d - delta/2));
  - points (N, T, P, 2): c = m(d), hit: c = -ln(eps + 1[d <= tol]);
  - maps (N, T, P, h, w): c = sum_u P(u) M_p(u), hit: c = -ln(eps + sum_{d_p(u) <= tol} P(u));
  - steps final (t = T-1) or all (sum); C_n = sum_p w_p sum_t c; eps = 1e-9;
  - maps at a size other than the frame's sample frame point ((i+.5) W/w - .5, (j+.5) H/h - .5).
Maps are random and normalised to sum 1 per (n, t, p), stored as float32; the float16 results
use the same maps cast with numpy's astype(float16) (round to nearest even, as half::f16).

NPY: byte strings written by numpy.save / numpy.lib.format.write_array (versions 1.0, 2.0,
3.0; a Fortran-order and a big-endian array for the refusals).

Run:  tests/reference/.venv/bin/python tests/reference/gen_cost.py
Writes tests/reference/gen_cost.json.
"""

import io
import json
import pathlib

import numpy as np
from scipy import ndimage
from shapely.geometry import Point, Polygon

RNG = np.random.default_rng(20240612)
W, H = 24, 18
EPS = 1e-9


def f32_list(a):
    """Shortest decimal strings that round-trip each float32, as JSON numbers."""
    return [float(np.format_float_positional(v, unique=True, trim="-"))
            for v in np.asarray(a, dtype=np.float32).ravel()]


def make_points():
    target0 = RNG.uniform([-0.5, -0.5], [W - 0.5, H - 0.5]).round(3)
    angles = np.sort(RNG.uniform(0, 2 * np.pi, 7))
    radii = RNG.uniform(2.0, 6.0, 7)
    centre = np.array([15.3, 6.7])
    polygon = (centre + np.column_stack([radii * np.cos(angles), radii * np.sin(angles)])).round(3)
    mask = np.zeros((H, W), dtype=bool)
    yy, xx = np.mgrid[0:H, 0:W]
    mask |= (xx - 5.2) ** 2 + (yy - 12.6) ** 2 <= 6.5  # a pot
    mask |= (xx >= 17) & (xx <= 20) & (yy >= 13) & (yy <= 15)  # a seed tray cell
    mask |= RNG.uniform(size=(H, W)) < 0.01  # a few stray painted pixels
    rigid = RNG.uniform([-0.5, -0.5], [W - 0.5, H - 0.5], (2, 2)).round(3)
    return [
        {"kind": "point", "target": target0.tolist(), "weight": 1.0, "tolerance_px": 3.0},
        {"kind": "region", "polygon": polygon.tolist(), "weight": 0.5, "tolerance_px": 2.0},
        {"kind": "mask", "rows": ["".join("1" if v else "0" for v in row) for row in mask],
         "weight": 2.0, "tolerance_px": 2.5},
        # A rigid term of weight 1.5 with two points: each gets 0.75.
        {"kind": "point", "target": rigid[0].tolist(), "weight": 0.75, "tolerance_px": 4.0},
        {"kind": "point", "target": rigid[1].tolist(), "weight": 0.75, "tolerance_px": 4.0},
    ], mask


def distance_fn(point, mask):
    if point["kind"] == "point":
        tx, ty = point["target"]
        return lambda x, y: np.hypot(x - tx, y - ty)
    if point["kind"] == "region":
        poly = Polygon(point["polygon"])
        assert poly.is_valid
        return np.vectorize(lambda x, y: poly.distance(Point(x, y)))
    painted = np.argwhere(mask)  # (row j, column i)

    def brute(x, y):
        x, y = np.broadcast_arrays(np.asarray(x, float), np.asarray(y, float))
        dx = x[..., None] - painted[:, 1]
        dy = y[..., None] - painted[:, 0]
        return np.sqrt((dx * dx + dy * dy).min(axis=-1))

    return brute


def metric_fn(name, delta):
    if name == "euclidean":
        return lambda d: d
    if name == "squared":
        return lambda d: d * d
    return lambda d: np.where(d <= delta, 0.5 * d * d, delta * (d - 0.5 * delta))


def map_grid(w, h):
    xs = (np.arange(w) + 0.5) * W / w - 0.5
    ys = (np.arange(h) + 0.5) * H / h - 0.5
    return np.meshgrid(xs, ys)  # (h, w) each


def random_maps(n, t, p, h, w):
    raw = RNG.exponential(size=(n, t, p, h, w)) ** 3  # peaky, like real predictions
    maps = (raw / raw.sum(axis=(-2, -1), keepdims=True)).astype(np.float32)
    return np.array(f32_list(maps), dtype=np.float32).reshape(maps.shape)


def finish(c, weights, steps):
    """c: (N, T, P) -> per_point (N, P), costs (N,), best."""
    sel = c[:, -1:, :] if steps == "final" else c
    per_point = sel.sum(axis=1) * weights
    costs = per_point.sum(axis=1)
    return per_point, costs, int(np.argmin(costs))


def npy_vectors():
    out = []

    def save(name, arr, version=None):
        buf = io.BytesIO()
        if version is None:
            np.save(buf, arr)
        else:
            np.lib.format.write_array(buf, arr, version=version)
        out.append({"name": name, "dtype": arr.dtype.str, "shape": list(arr.shape),
                    "fortran": bool(arr.flags.f_contiguous and not arr.flags.c_contiguous),
                    "values": [float(v) for v in np.asarray(arr).ravel(order="C")],
                    "hex": buf.getvalue().hex(), "numpy_save": version is None})

    save("f32_2x3", (np.arange(6, dtype=np.float32) * 0.25 - 0.5).reshape(2, 3))
    save("f32_1d", np.array([1.5, -2.0, 3.25], dtype=np.float32))
    save("f32_scalar", np.array(7.5, dtype=np.float32))
    save("f32_5d", (np.arange(12, dtype=np.float32) / 8).reshape(1, 2, 3, 1, 2))
    save("f32_empty", np.zeros((0, 4), dtype=np.float32))
    save("f32_big_first_axis", np.zeros((123456789012, 0), dtype=np.float32))
    save("f16_2x2", np.array([[0.5, -1.0], [65504.0, 0.0009765625]], dtype=np.float16))
    save("f64_2", np.array([0.1, -1e300], dtype=np.float64))
    save("f32_v2", np.array([1.0, 2.0], dtype=np.float32), version=(2, 0))
    save("f32_v3", np.array([[3.0], [4.0]], dtype=np.float32), version=(3, 0))
    save("fortran", np.asfortranarray(np.arange(6, dtype=np.float32).reshape(2, 3)))
    save("big_endian", np.array([1.0, 2.0], dtype=">f4"))
    save("int32", np.array([1, 2], dtype="<i4"))
    return out


def main():
    points, mask = make_points()
    dist = [distance_fn(p, mask) for p in points]
    weights = np.array([p["weight"] for p in points])
    tols = np.array([p["tolerance_px"] for p in points])
    P = len(points)

    # The mask's brute-force distances agree with scipy's exact transform on the grid.
    gx, gy = map_grid(W, H)
    scipy_edt = ndimage.distance_transform_edt(~mask)
    assert np.allclose(dist[2](gx, gy), scipy_edt, atol=1e-12)

    sizes = {"frame": (W, H), "resampled": (11, 7)}
    distance_maps = {}
    for key, (w, h) in sizes.items():
        gx, gy = map_grid(w, h)
        d = np.stack([np.asarray(f(gx, gy), dtype=float) for f in dist])
        if key == "frame":
            d[2] = scipy_edt  # the exact transform itself at the frame size
        distance_maps[key] = d

    # Predicted points (N, T, P, 2): mostly random, partly outside the frame; candidate 0 ends on
    # every target (a target point, a polygon vertex, a painted pixel centre).
    N, T = 6, 3
    pts = RNG.uniform([-10, -10], [W + 10, H + 10], (N, T, P, 2)).round(4)
    painted = np.argwhere(mask)[3]
    pts[0, -1] = [points[0]["target"], points[1]["polygon"][2], [painted[1], painted[0]],
                  points[3]["target"], points[4]["target"]]
    pts[1, 1, 0] = [1e4, -3e4]  # far outside the frame
    d_pts = np.stack([np.asarray(dist[p](pts[:, :, p, 0], pts[:, :, p, 1]), float)
                      for p in range(P)], axis=-1)  # (N, T, P)

    batches = {
        "frame": random_maps(2, 3, P, H, W),
        "resampled": random_maps(3, 2, P, 7, 11),
    }

    cases = []
    for metric, delta in [("euclidean", None), ("squared", None), ("huber", 3.0)]:
        m = metric_fn(metric, delta)
        for steps in ["final", "all"]:
            for mode in ["expected", "hit"]:
                settings = {"metric": metric, "huber_delta_px": delta, "steps": steps,
                            "mode": mode}
                if mode == "expected":
                    c = m(d_pts)
                else:
                    c = -np.log(EPS + (d_pts <= tols).astype(float))
                per, costs, best = finish(c, weights, steps)
                cases.append(dict(settings, input="points", per_point=per.tolist(),
                                  costs=costs.tolist(), best=best))
                for key, maps in batches.items():
                    dmap = distance_maps[key]
                    for dtype in ["f32", "f16"]:
                        pm = maps.astype(np.float64) if dtype == "f32" else \
                            maps.astype(np.float16).astype(np.float64)
                        if mode == "expected":
                            c = np.einsum("ntphw,phw->ntp", pm, m(dmap))
                        else:
                            inside = (dmap <= tols[:, None, None]).astype(float)
                            c = -np.log(EPS + np.einsum("ntphw,phw->ntp", pm, inside))
                        per, costs, best = finish(c, weights, steps)
                        cases.append(dict(settings, input=f"maps_{key}", dtype=dtype,
                                          per_point=per.tolist(), costs=costs.tolist(),
                                          best=best))

    out = {
        "width": W,
        "height": H,
        "epsilon": EPS,
        "points": points,
        "distance_maps": {k: {"width": sizes[k][0], "height": sizes[k][1],
                              "values": v.ravel().tolist()} for k, v in distance_maps.items()},
        "predicted_points": {"n": N, "t": T, "values": pts.ravel().tolist()},
        "maps": {k: {"n": v.shape[0], "t": v.shape[1], "height": v.shape[3],
                     "width": v.shape[4], "values": f32_list(v)} for k, v in batches.items()},
        "cases": cases,
        "npy": npy_vectors(),
    }
    path = pathlib.Path(__file__).with_name("gen_cost.json")
    path.write_text(json.dumps(out, separators=(",", ":")) + "\n")
    print(f"wrote {path} ({path.stat().st_size} bytes, {len(cases)} cases)")


if __name__ == "__main__":
    main()

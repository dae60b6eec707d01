"""Reference vectors for goalsmith-core's geometry, distance and rigid modules.

Writes, next to this script (all committed; `cargo test` needs no Python):

  geometry_polygons.json  polygon distance and closed containment, from
                          shapely.geometry.Polygon(...).distance(Point(...)) and .covers(Point(...)),
                          plus self-intersecting rings that shapely's LinearRing.is_simple rejects
  edt_scipy.json          exact Euclidean distance transforms from scipy.ndimage.distance_transform_edt,
                          and the worked example printed in that function's docstring
  rigid_umeyama.json      least-squares similarity fits from skimage.transform.SimilarityTransform
                          and rigid fits from skimage.transform.EuclideanTransform (both estimated
                          with Umeyama's method)

Fixed seeds; rerun with  tests/reference/.venv/bin/python tests/reference/gen_geometry.py
"""

import ast
import json
import math
import pathlib
import re

import numpy as np
import scipy
import shapely
import skimage
from scipy import ndimage
from shapely.geometry import LinearRing, Point, Polygon
from skimage.transform import EuclideanTransform, SimilarityTransform

HERE = pathlib.Path(__file__).resolve().parent


def write(name, payload):
    path = HERE / name
    path.write_text(json.dumps(payload, separators=(",", ":")) + "\n")
    print(f"wrote {path.name}: {path.stat().st_size} bytes")


# ---------------------------------------------------------------- polygons


def exact_pairs(points):
    """Coordinates as shortest round-trip decimal strings: JSON readers are not all correctly
    rounded, and closed containment of points exactly on (or a hair off) an edge needs the
    very same doubles on both sides."""
    return [[repr(float(x)), repr(float(y))] for x, y in points]


def star_polygon(rng, n, centre, radius, integer=False):
    """Star-shaped about `centre`: sorted random angles, random radii in [0.25, 1] * radius."""
    angles = np.sort(rng.uniform(0, 2 * math.pi, n))
    radii = rng.uniform(0.25, 1.0, n) * radius
    pts = np.stack([centre[0] + radii * np.cos(angles), centre[1] + radii * np.sin(angles)], 1)
    if integer:
        pts = np.round(pts)
    return pts


def untangled_polygon(rng, n, size):
    """A random simple polygon through n random points, by 2-opt untangling of crossings."""
    pts = rng.uniform(0, size, (n, 2))
    order = list(rng.permutation(n))
    while True:
        ring = LinearRing(pts[order])
        if ring.is_simple:
            return pts[order]
        done = False
        for i in range(n):
            for j in range(i + 2, n):
                if i == 0 and j == n - 1:
                    continue
                a, b = pts[order[i]], pts[order[(i + 1) % n]]
                c, d = pts[order[j]], pts[order[(j + 1) % n]]
                if shapely.LineString([a, b]).intersects(shapely.LineString([c, d])):
                    order[i + 1 : j + 1] = order[i + 1 : j + 1][::-1]
                    done = True
                    break
            if done:
                break


def comb_polygon():
    """A seed-tray outline: a bar along the top with five teeth hanging down (integer px)."""
    pts = [(10, 10), (210, 10), (210, 40)]
    x = 210
    for _ in range(5):
        pts += [(x, 120), (x - 20, 120), (x - 20, 40), (x - 40, 40)]
        x -= 40
    pts[-1] = (10, 40)
    return np.array(pts, dtype=float)


def queries_for(rng, pts, integer):
    poly = Polygon(pts)
    minx, miny, maxx, maxy = poly.bounds
    dx, dy = maxx - minx, maxy - miny
    q = []
    # Anywhere around the polygon, and some far away.
    q += list(rng.uniform([minx - 0.3 * dx, miny - 0.3 * dy], [maxx + 0.3 * dx, maxy + 0.3 * dy], (60, 2)))
    q += list(rng.uniform(-3 * max(dx, dy), 4 * max(dx, dy), (6, 2)))
    # Every vertex, and points on edges: at random t, and (for integer vertices) at t = k/8,
    # which is exactly representable, so the point lies exactly on the edge.
    n = len(pts)
    q += [tuple(p) for p in pts]
    for i in range(n):
        a, b = pts[i], pts[(i + 1) % n]
        t = rng.uniform()
        q.append(tuple(a + t * (b - a)))
        if integer:
            k = int(rng.integers(1, 8))
            q.append(tuple(a + (k / 8.0) * (b - a)))
    # Points known to be inside.
    inside = 0
    while inside < 15:
        p = rng.uniform([minx, miny], [maxx, maxy])
        if poly.covers(Point(p)):
            q.append(tuple(p))
            inside += 1
    # Just off a vertex, either side.
    for i in rng.choice(n, size=min(n, 6), replace=False):
        for off in (1e-7, -1e-7, 0.25, -0.25):
            q.append((pts[i][0] + off, pts[i][1] - off))
    return [[float(x), float(y)] for x, y in q]


def polygon_cases():
    rng = np.random.default_rng(20261201)
    cases = []

    def add(name, pts, integer):
        poly = Polygon(pts)
        assert poly.is_valid and LinearRing(pts).is_simple, name
        queries = queries_for(rng, pts, integer)
        cases.append(
            {
                "name": name,
                "vertices": exact_pairs(pts),
                "queries": exact_pairs(queries),
                "distance": [poly.distance(Point(p)) for p in queries],
                "covers": [bool(poly.covers(Point(p))) for p in queries],
            }
        )

    for n in (5, 8, 13, 24, 40):
        add(f"star_{n}", star_polygon(rng, n, rng.uniform(100, 600, 2), rng.uniform(20, 200)), False)
    for n in (6, 11, 30):
        pts = star_polygon(rng, n, np.round(rng.uniform(100, 600, 2)), rng.uniform(40, 200), integer=True)
        # Rounding may create repeats or collinear steps; keep only rings shapely calls simple.
        if len(np.unique(pts, axis=0)) == n and LinearRing(pts).is_simple and Polygon(pts).area > 0:
            add(f"star_int_{n}", pts, True)
    for n in (7, 12, 20):
        add(f"untangled_{n}", untangled_polygon(rng, n, 400.0), False)
    add("seed_tray_comb", comb_polygon(), True)
    # Clockwise copy of the comb (vertex order reversed).
    add("seed_tray_comb_reversed", comb_polygon()[::-1].copy(), True)

    rejected = []
    bad_rings = {
        "bowtie": [[0, 0], [10, 10], [10, 0], [0, 10]],
        "vertex_on_edge": [[0, 0], [10, 0], [10, 10], [5, 0], [0, 10]],
        "folds_back": [[0, 0], [10, 0], [5, 0], [5, 8]],
        "figure_eight_touch": [[0, 0], [4, 4], [8, 0], [8, 8], [4, 4], [0, 8]],
    }
    for name, ring in bad_rings.items():
        assert not LinearRing(ring).is_simple, name
        rejected.append({"name": name, "vertices": exact_pairs(ring)})
    for k in range(6):
        # Random rings shapely finds non-simple (random order of random points usually crosses).
        while True:
            pts = rng.uniform(0, 100, (int(rng.integers(4, 12)), 2))
            if not LinearRing(pts).is_simple and Polygon(pts).area > 0:
                break
        rejected.append({"name": f"random_crossing_{k}", "vertices": exact_pairs(pts)})
    return cases, rejected


# ---------------------------------------------------------------- distance transforms


def docstring_example():
    """The 5x5 example of distance_transform_edt's docstring, read from the installed scipy."""
    doc = ndimage.distance_transform_edt.__doc__
    a_text = re.search(r">>> a = np\.array\(\((.*?)\)\)\n", doc, re.S).group(1)
    a = np.array(ast.literal_eval("[" + a_text.replace("...", "").replace("\n", " ") + "]"))
    out_text = re.search(r">>> ndimage\.distance_transform_edt\(a\)\n\s*array\((.*?)\)\n", doc, re.S).group(1)
    documented = ast.literal_eval(out_text.replace("\n", " "))
    return a, np.array(documented, dtype=float)


def edt_cases():
    rng = np.random.default_rng(424242)
    shapes_densities = [
        ((1, 1), 1.0),
        ((1, 9), 0.2),
        ((11, 1), 0.2),
        ((5, 5), 0.1),
        ((7, 13), 0.05),
        ((16, 12), 0.02),
        ((23, 31), 0.01),
        ((40, 64), 0.003),
        ((40, 64), 0.3),
        ((32, 48), 0.0),  # replaced by a single painted pixel below
        ((20, 20), 1.0),
    ]
    cases = []
    for k, ((h, w), dens) in enumerate(shapes_densities):
        painted = rng.random((h, w)) < dens
        if not painted.any():
            painted[rng.integers(h), rng.integers(w)] = True
        # scipy measures from each nonzero entry to the nearest zero: pass the unpainted pixels.
        dist = ndimage.distance_transform_edt(~painted)
        cases.append(
            {
                "name": f"random_{k}_{h}x{w}",
                "width": w,
                "height": h,
                "rows": ["".join("1" if b else "0" for b in row) for row in painted],
                "distance": [float(v) for v in dist.ravel()],
            }
        )
    a, documented = docstring_example()
    # In the docstring, distances run from the nonzero entries of `a` to its zeros: the zeros
    # are the painted pixels in goalsmith's terms.
    painted = a == 0
    cases_doc = {
        "name": "scipy_docstring_example",
        "width": int(a.shape[1]),
        "height": int(a.shape[0]),
        "rows": ["".join("1" if b else "0" for b in row) for row in painted],
        "distance": [float(v) for v in ndimage.distance_transform_edt(a).ravel()],
        "documented_distance": [float(v) for v in documented.ravel()],
        "documented_decimals": 4,
    }
    return cases, cases_doc


# ---------------------------------------------------------------- rigid fits


def rigid_cases():
    rng = np.random.default_rng(7)
    cases = []

    def add(name, src, dst):
        for allow_scale, cls in ((True, SimilarityTransform), (False, EuclideanTransform)):
            tf = cls.from_estimate(src, dst)
            m = tf.params
            cases.append(
                {
                    "name": name,
                    "allow_scale": allow_scale,
                    "sources": src.tolist(),
                    "targets": dst.tolist(),
                    # [[s*r00, s*r01, tx], [s*r10, s*r11, ty]]
                    "matrix": m[:2].tolist(),
                    "residuals": [float(v) for v in np.hypot(*(tf(src) - dst).T)],
                }
            )

    add("umeyama_1991_example", np.array([[0.0, 0], [1, 0], [0, 2]]), np.array([[0.0, 0], [-1, 0], [0, 2]]))
    for k in range(24):
        n = int(rng.integers(2, 13))
        while True:
            src = rng.uniform(0, 1280, (n, 2)) * [1, 720 / 1280]
            centred = src - src.mean(0)
            # Keep away from the collinear refusal (all points within 0.5 px of a line).
            if n == 2 or np.linalg.svd(centred, compute_uv=False)[-1] > 5.0:
                break
        theta = rng.uniform(-math.pi, math.pi)
        scale = math.exp(rng.uniform(math.log(0.3), math.log(3.0)))
        rot = np.array([[math.cos(theta), -math.sin(theta)], [math.sin(theta), math.cos(theta)]])
        dst = scale * src @ rot.T + rng.uniform(-300, 300, 2)
        kind = k % 3
        if kind == 1:
            dst = dst + rng.normal(0, rng.uniform(0.5, 3.0), dst.shape)
        elif kind == 2:
            # Mirrored targets (plus noise): Umeyama's reflection guard decides the rotation.
            dst = dst * [-1, 1] + rng.normal(0, 1.0, dst.shape)
        add(f"random_{k}_n{n}_{['exact', 'noisy', 'mirrored'][kind]}", src, dst)
    return cases


def main():
    versions = {
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "shapely": shapely.__version__,
        "scikit-image": skimage.__version__,
    }
    polys, rejected = polygon_cases()
    write(
        "geometry_polygons.json",
        {
            "source": "shapely Polygon.distance(Point) and Polygon.covers(Point); LinearRing.is_simple",
            "note": "vertices and queries are decimal strings that round-trip to the exact doubles",
            "versions": versions,
            "polygons": polys,
            "rejected": rejected,
        },
    )
    edts, doc = edt_cases()
    write(
        "edt_scipy.json",
        {
            "source": "scipy.ndimage.distance_transform_edt(~painted); docstring example of the same",
            "versions": versions,
            "cases": edts,
            "docstring_example": doc,
        },
    )
    write(
        "rigid_umeyama.json",
        {
            "source": "skimage.transform.SimilarityTransform.from_estimate (allow_scale) and "
            "EuclideanTransform.from_estimate (rigid), Umeyama 1991",
            "versions": versions,
            "cases": rigid_cases(),
        },
    )


if __name__ == "__main__":
    main()

"""Reference vectors for goalsmith-core's polygon-polygon predicates (the safety-zone checks).

Writes, next to this script (committed; `cargo test` needs no Python):

  zones_polygon_pairs.json  for pairs of simple polygons a, b: shapely's
                            shapely.geometry.Polygon(a).intersects(Polygon(b)),
                            Polygon(a).covers(Polygon(b)) and Polygon(b).covers(Polygon(a))

The pairs: random star-shaped polygons (convex when all radii are equal) and random simple
polygons from 2-opt untangling, both from gen_geometry.py, with float and with integer
coordinates; random polyominoes (non-convex, many shared and collinear edges) against each other
and against small integer triangles; and hand-built touching cases: a shared vertex, a shared
edge part, a vertex on an edge, collinear overlapping edges, one polygon inside the other
touching its boundary from inside, a thin band through a small rectangle, a thin region cutting
the corner of an L, an edge through a reflex vertex, an edge bridging a notch along the
boundary, and one running from wall to wall of a notch. The touching cases also appear scaled by
3/8 and shifted by quarter pixels, so that their coordinates are exact non-integer doubles.

Fixed seed; rerun with  tests/reference/.venv/bin/python tests/reference/gen_zones.py
"""

import json
import pathlib
import sys
from itertools import product

import numpy as np
import shapely
from shapely.geometry import LinearRing, Polygon, box
from shapely.ops import unary_union

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from gen_geometry import exact_pairs, star_polygon, untangled_polygon  # noqa: E402


def usable(pts):
    """Rings goalsmith's Polygon::new accepts and shapely calls simple and valid."""
    pts = np.asarray(pts, dtype=float)
    if len(pts) < 3:
        return False
    if any((pts[i] == pts[(i + 1) % len(pts)]).all() for i in range(len(pts))):
        return False
    ring = LinearRing(pts)
    poly = Polygon(pts)
    return ring.is_simple and poly.is_valid and poly.area > 0


def grow_cells(rng, cells, grid, start=None, within=None):
    """A random connected set of unit cells (as (x, y) of their top-left corners), grown from
    `start` (random if None) and, when `within` is given, only through cells of `within`."""
    if start is None:
        start = tuple(int(v) for v in rng.integers(0, grid, 2))
    chosen = [start]
    for _ in range(50 * cells):
        if len(chosen) >= cells:
            break
        cx, cy = chosen[int(rng.integers(len(chosen)))]
        dx, dy = [(1, 0), (-1, 0), (0, 1), (0, -1)][int(rng.integers(4))]
        cell = (cx + dx, cy + dy)
        if 0 <= cell[0] < grid and 0 <= cell[1] < grid and cell not in chosen:
            if within is None or cell in within:
                chosen.append(cell)
    return chosen


def outline(cells):
    """The outline of a set of unit cells when it is one polygon without holes, else None."""
    shape = unary_union([box(x, y, x + 1, y + 1) for x, y in cells])
    if shape.geom_type != "Polygon" or len(shape.interiors) > 0:
        return None
    pts = np.array(shape.exterior.coords[:-1])
    return pts if usable(pts) else None


def polyomino(rng, cells, grid):
    """A random polyomino without holes; its outline, or None."""
    return outline(grow_cells(rng, cells, grid))


def hand_cases():
    """Touching cases, named; integer pixel coordinates, screen convention (y down)."""
    square = [[0, 0], [10, 0], [10, 10], [0, 10]]
    l_shape = [[0, 0], [40, 0], [40, 20], [20, 20], [20, 40], [0, 40]]
    # A U: a bar along the bottom with two arms up, the notch between x = 10 and 20.
    u_shape = [[0, 0], [10, 0], [10, 10], [20, 10], [20, 0], [30, 0], [30, 20], [0, 20]]
    no_go = [[20, 30], [30, 30], [30, 40], [20, 40]]
    return {
        "shared_vertex": (square, [[10, 10], [20, 10], [15, 20]]),
        "shared_edge_part": (square, [[10, 2], [18, 2], [18, 7], [10, 7]]),
        "shared_whole_edge": (square, [[10, 0], [20, 0], [20, 10], [10, 10]]),
        "vertex_on_edge_outside": (square, [[10, 5], [16, 1], [16, 9]]),
        "collinear_overlapping_edges": (square, [[5, 10], [15, 10], [15, 14], [5, 14]]),
        "inside_sharing_edge_part": (square, [[2, 0], [8, 0], [8, 4], [2, 4]]),
        "inside_vertex_on_edge": (square, [[5, 0], [9, 6], [1, 6]]),
        "inside_touching_corner": (square, [[0, 0], [4, 1], [1, 4]]),
        "equal": (square, square),
        "equal_reversed": (square, square[::-1]),
        "strictly_inside": (square, [[3, 3], [7, 3], [5, 7]]),
        "disjoint_near": (square, [[11, 0], [15, 0], [15, 4]]),
        "band_through_small_rectangle": (no_go, [[10, 34], [40, 34], [40, 36], [10, 36]]),
        "band_beside_small_rectangle": (no_go, [[10, 41], [40, 41], [40, 44], [10, 44]]),
        "band_along_small_rectangle": (no_go, [[10, 40], [40, 40], [40, 44], [10, 44]]),
        "l_corner_cut": (l_shape, [[18, 21], [21, 18], [22, 19], [19, 22]]),
        "l_corner_touch_inside": (l_shape, [[10, 10], [20, 10], [20, 20], [10, 20]]),
        "l_arm_exactly": (l_shape, [[0, 0], [20, 0], [20, 40], [0, 40]]),
        "l_edge_through_reflex_vertex_inside": (l_shape, [[10, 30], [30, 10], [10, 10]]),
        "l_notch_square_touching_reflex": (l_shape, [[20, 20], [30, 20], [30, 30], [20, 30]]),
        "u_edge_through_reflex_vertex_into_notch": (u_shape, [[0, 20], [20, 0], [30, 20]]),
        "u_bridge_over_notch": (u_shape, [[0, 0], [30, 0], [15, 15]]),
        "u_bar_exactly": (u_shape, [[0, 10], [30, 10], [30, 20], [0, 20]]),
        "u_arm_along_notch": (u_shape, [[10, 0], [10, 10], [5, 5]]),
        # Only one edge leaves the U: from inside one wall of the notch straight to the other.
        "u_notch_lower_half": (u_shape, [[10, 5], [20, 5], [20, 10], [10, 10]]),
        "u_notch_lower_half_reversed": (u_shape, [[10, 10], [20, 10], [20, 5], [10, 5]]),
    }


def pair_cases():
    rng = np.random.default_rng(20270113)
    cases = []

    def add(name, a, b):
        a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
        assert usable(a) and usable(b), name
        pa, pb = Polygon(a), Polygon(b)
        cases.append(
            {
                "name": name,
                "a": exact_pairs(a),
                "b": exact_pairs(b),
                "intersects": bool(pa.intersects(pb)),
                "a_covers_b": bool(pa.covers(pb)),
                "b_covers_a": bool(pb.covers(pa)),
            }
        )

    for name, (a, b) in hand_cases().items():
        add(name, a, b)
        # The same configuration in exact non-integer doubles (3/8 and 1/4 are dyadic).
        s = lambda p: np.asarray(p, dtype=float) * 0.375 + [0.25, 0.75]  # noqa: E731
        add(f"{name}_dyadic", s(a), s(b))

    def retry(make):
        while True:
            pts = make()
            if pts is not None and usable(pts):
                return pts

    # Random stars and untangled polygons, placed so that they overlap, touch or nest often.
    for k in range(160):
        kind = k % 8
        centre = rng.uniform(100, 300, 2)
        radius = rng.uniform(20, 120)

        def star(integer, convex, c=centre, r=radius):
            n = int(rng.integers(3, 12))
            pts = star_polygon(rng, n, c, r, integer)
            if convex:
                # Equal radii: the vertices lie on a circle, so the polygon is convex.
                ang = np.arctan2(pts[:, 1] - c[1], pts[:, 0] - c[0])
                pts = np.stack([c[0] + r * np.cos(ang), c[1] + r * np.sin(ang)], 1)
                if integer:
                    pts = np.round(pts)
            return pts

        def shifted(offset_scale, c=centre, r=radius):
            return c + rng.uniform(-offset_scale, offset_scale, 2) * r

        # Every other convex pair is a small polygon near the centre of a bigger one.
        near = 2.0 if k % 16 < 8 else 0.4
        small = 1.2 if k % 16 < 8 else 0.5
        if kind == 0:
            a = retry(lambda: star(False, True))
            b = retry(lambda: star(False, True, shifted(near), radius * rng.uniform(0.2, small)))
            add(f"convex_float_{k}", a, b)
        elif kind == 1:
            a = retry(lambda: star(True, True))
            b = retry(lambda: star(True, True, np.round(shifted(near)), radius * rng.uniform(0.2, small)))
            add(f"convex_int_{k}", a, b)
        elif kind == 2:
            a = retry(lambda: star(False, False))
            b = retry(lambda: star(False, False, shifted(1.5), radius * rng.uniform(0.1, 1.0)))
            add(f"star_float_{k}", a, b)
        elif kind == 3:
            a = retry(lambda: star(True, False))
            b = retry(lambda: star(True, False, np.round(shifted(1.5)), radius * rng.uniform(0.1, 1.0)))
            add(f"star_int_{k}", a, b)
        elif kind == 4:
            a = retry(lambda: untangled_polygon(rng, int(rng.integers(5, 14)), 200.0))
            b = retry(lambda: untangled_polygon(rng, int(rng.integers(3, 9)), 200.0) * rng.uniform(0.1, 0.8) + rng.uniform(0, 150, 2))
            add(f"untangled_float_{k}", a, b)
        elif kind == 5:
            a = retry(lambda: np.round(untangled_polygon(rng, int(rng.integers(5, 12)), 60.0)))
            b = retry(lambda: np.round(untangled_polygon(rng, int(rng.integers(3, 8)), 60.0) * rng.uniform(0.2, 0.8)) + rng.integers(0, 40, 2))
            add(f"untangled_int_{k}", a, b)
        elif kind == 6:
            # b a shrunken copy of a star about its centre: inside, or (for big factors) out.
            a = retry(lambda: star(False, False))
            f = rng.choice([0.3, 0.9, 1.0])
            b = centre + (a - centre) * f
            add(f"star_scaled_{f}_{k}", a, b)
        else:
            a = retry(lambda: untangled_polygon(rng, int(rng.integers(4, 10)), 100.0))
            b = a[::-1] + rng.choice([0.0, 1e-9, 0.5], 2)
            add(f"untangled_reversed_shifted_{k}", a, b)

    # Polyominoes on a small grid: non-convex outlines sharing vertices and edge parts.
    for k in range(150):
        grid = 6
        a = retry(lambda: polyomino(rng, int(rng.integers(3, 14)), grid))
        if k % 3 == 2:
            # A small integer triangle on the same grid: its edges often pass exactly through
            # reflex vertices of the polyomino or run along its edges.
            b = retry(lambda: rng.integers(0, grid + 1, (3, 2)).astype(float))
        elif k % 3 == 1:
            # Part of a's cells, or a's cells and a few more: nested, sharing boundary.
            def nested(a=a, grid=grid):
                cells = [c for c in product(range(grid), range(grid)) if Polygon(a).covers(box(c[0], c[1], c[0] + 1, c[1] + 1))]
                start = cells[int(rng.integers(len(cells)))]
                if rng.uniform() < 0.7:
                    return outline(grow_cells(rng, int(rng.integers(1, len(cells) + 1)), grid, start, set(cells)))
                return outline(set(grow_cells(rng, len(cells) + int(rng.integers(1, 4)), grid, start)) | set(cells))

            b = retry(nested)
        else:
            b = retry(lambda: polyomino(rng, int(rng.integers(1, 8)), grid))
        if k % 5 == 4:
            a, b = a * 0.5 + 0.25, b * 0.5 + 0.25
        add(f"polyomino_{k}", a, b)
    return cases


def main():
    pairs = pair_cases()
    path = HERE / "zones_polygon_pairs.json"
    payload = {
        "source": "shapely Polygon(a).intersects(Polygon(b)), Polygon(a).covers(Polygon(b)), "
        "Polygon(b).covers(Polygon(a))",
        "note": "vertices are decimal strings that round-trip to the exact doubles",
        "versions": {"shapely": shapely.__version__, "geos": ".".join(map(str, shapely.geos_version))},
        "pairs": pairs,
    }
    path.write_text(json.dumps(payload, separators=(",", ":")) + "\n")
    counts = {k: sum(p[k] for p in pairs) for k in ("intersects", "a_covers_b", "b_covers_a")}
    print(f"wrote {path.name}: {path.stat().st_size} bytes, {len(pairs)} pairs, true counts {counts}")


if __name__ == "__main__":
    main()

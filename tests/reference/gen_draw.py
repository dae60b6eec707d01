"""Reference pixel coverages for goalsmith's anti-aliased drawing (tiny-skia, checked in server/draw/tests.rs).

Pixel (i, j) is the square [i - 0.5, i + 0.5] x [j - 0.5, j + 0.5] (the centre of the top-left
pixel is (0, 0)). The coverage of a pixel by a shape is the area of their intersection, computed
with shapely: Polygon.intersection(box(...)).area (shapely 2, GEOS). Discs are
Point.buffer(r, quad_segs=512); round-capped strokes are LineString.buffer(w / 2, quad_segs=512,
cap_style="round").

Writes tests/reference/draw_coverage.json.
Run: tests/reference/.venv/bin/python tests/reference/gen_draw.py
"""

import json
import os

from shapely.geometry import LineString, Point, Polygon, box

W, H = 24, 18

CASES = [
    {"kind": "disc", "center": [9.3, 8.8], "radius": 5.7},
    {"kind": "disc", "center": [4.0, 4.5], "radius": 1.2},
    {"kind": "polygon", "points": [[2.2, 1.7], [20.6, 3.1], [13.4, 8.2], [19.9, 15.6], [3.1, 13.3]]},
    {"kind": "polygon", "points": [[11.0, 1.0], [12.3, 16.8], [10.1, 16.9]]},
    {"kind": "stroke", "from": [2.5, 3.2], "to": [20.7, 13.9], "width": 2.6},
    {"kind": "stroke", "from": [3.0, 9.0], "to": [21.0, 9.0], "width": 1.0},
]


def shape(case):
    if case["kind"] == "disc":
        return Point(*case["center"]).buffer(case["radius"], quad_segs=512)
    if case["kind"] == "polygon":
        return Polygon(case["points"])
    line = LineString([case["from"], case["to"]])
    return line.buffer(case["width"] / 2, quad_segs=512, cap_style="round")


def coverage(geom):
    rows = []
    for j in range(H):
        row = []
        for i in range(W):
            a = geom.intersection(box(i - 0.5, j - 0.5, i + 0.5, j + 0.5)).area
            row.append(round(a, 5))
        rows.append(row)
    return rows


def main():
    out = {
        "source": "shapely 2 (GEOS) intersection areas of each shape with each pixel square",
        "width": W,
        "height": H,
        "cases": [dict(case, coverage=coverage(shape(case))) for case in CASES],
    }
    path = os.path.join(os.path.dirname(__file__), "draw_coverage.json")
    with open(path, "w") as f:
        json.dump(out, f, separators=(",", ":"))
        f.write("\n")


if __name__ == "__main__":
    main()

#!/usr/bin/env python3
"""Writes the hand-made seed inputs of the fuzz targets into fuzz/corpus/<target>/seed-*.

Plain Python 3; Pillow only for the one JPEG seed (without it that seed is left as it is). PNG (zlib), GIF (LZW with a clear code before every code, so
every code has the same width), ZIP (zipfile) and NPY (numpy's format, version 1.0, 2.0 and
3.0 headers) are written by hand. Deterministic: the same bytes on every run.

The committed corpus (fuzz/corpus/<target>/) is these seeds plus the inputs the fuzzer found
that reach new coverage (libFuzzer's -merge=1); see fuzz/README.md.
"""

import base64
import io
import json
import struct
import sys
import zipfile
import zlib
from pathlib import Path

HERE = Path(__file__).resolve().parent
FIT_ID = "00000000-0000-4000-8000-00000000f17a"  # goalsmith::fuzzing::FUZZ_REWARD_FIT_ID


def png_gray(width, height, pixel):
    """An 8-bit greyscale PNG; pixel(i, j) gives the value."""
    raw = b"".join(
        b"\x00" + bytes(pixel(i, j) for i in range(width)) for j in range(height)
    )

    def chunk(kind, data):
        body = kind + data
        return struct.pack(">I", len(data)) + body + struct.pack(">I", zlib.crc32(body))

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    return (
        b"\x89PNG\r\n\x1a\n"
        + chunk(b"IHDR", ihdr)
        + chunk(b"IDAT", zlib.compress(raw, 9))
        + chunk(b"IEND", b"")
    )


def gif(width, height, frames, delay_cs=10):
    """An animated GIF with a 4-colour global palette; frames are lists of rows of indices."""
    out = bytearray(b"GIF89a")
    out += struct.pack("<HHBBB", width, height, 0b10000001, 0, 0)  # global table of 4
    out += bytes([0, 0, 0, 255, 255, 255, 200, 60, 40, 40, 160, 60])
    out += b"\x21\xff\x0bNETSCAPE2.0\x03\x01\x00\x00\x00"  # loop forever
    for rows in frames:
        out += b"\x21\xf9\x04\x00" + struct.pack("<H", delay_cs) + b"\x00\x00"
        out += b"\x2c" + struct.pack("<HHHHB", 0, 0, width, height, 0)
        out += bytes([2])  # LZW minimum code size
        # Clear (4) before every literal: the table never grows, every code is 3 bits.
        codes = []
        for row in rows:
            for index in row:
                codes += [4, index]
        codes.append(5)  # end of information
        bits, nbits, data = 0, 0, bytearray()
        for c in codes:
            bits |= c << nbits
            nbits += 3
            while nbits >= 8:
                data.append(bits & 0xFF)
                bits >>= 8
                nbits -= 8
        if nbits:
            data.append(bits & 0xFF)
        for k in range(0, len(data), 255):
            block = data[k : k + 255]
            out += bytes([len(block)]) + block
        out += b"\x00"
    out += b"\x3b"
    return bytes(out)


def zip_of(entries, method=zipfile.ZIP_DEFLATED):
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", method) as z:
        for name, data in entries:
            info = zipfile.ZipInfo(name, date_time=(2024, 6, 11, 0, 0, 0))
            info.compress_type = method
            z.writestr(info, data)
    return buf.getvalue()


def npy(descr, shape, values=b"", version=(1, 0), fortran=False):
    """An NPY file as numpy writes it (header padded so the data starts at a multiple of 64)."""
    shape_repr = "(" + ", ".join(str(d) for d in shape) + ("," if len(shape) == 1 else "") + ")"
    text = "{'descr': '%s', 'fortran_order': %s, 'shape': %s, }" % (
        descr,
        "True" if fortran else "False",
        shape_repr,
    )
    length_size = 2 if version == (1, 0) else 4
    pad = 64 - (6 + 2 + length_size + len(text) + 1) % 64
    header = (text + " " * pad + "\n").encode("utf-8")
    length = struct.pack("<H" if length_size == 2 else "<I", len(header))
    return b"\x93NUMPY" + bytes(version) + length + header + values


def f32(*xs):
    return struct.pack("<%df" % len(xs), *xs)


def f16(*xs):
    return struct.pack("<%de" % len(xs), *xs)


def f64(*xs):
    return struct.pack("<%dd" % len(xs), *xs)


def goal_seeds():
    bench_mask = png_gray(640, 480, lambda i, j: 255 if 320 <= i < 360 and 200 <= j < 230 else 0)
    small_mask = png_gray(64, 48, lambda i, j: 255 if 20 <= i < 30 and 10 <= j < 20 else 0)
    touching = png_gray(640, 480, lambda i, j: 255 if 540 <= i <= 560 and 390 <= j < 420 else 0)
    b64 = lambda b: base64.b64encode(b).decode()
    goals = {
        # README's curl session.
        "readme_point.json": {
            "name": "small pot onto the mat",
            "frame_id": "f",
            "terms": [{"kind": "point", "label": "small pot", "source": [318, 380], "target": [484, 262]}],
            "cost": {"metric": "squared", "steps": "final"},
            "note": "first try",
        },
        # demo-data/scene.json's suggested goals, in one goal.
        "scene_suggested.json": {
            "name": "the bench's suggested goals",
            "frame_id": "f",
            "terms": [
                {"kind": "point", "source": [318.0, 380.0], "target": [484.0, 262.0], "tolerance_px": 8.0},
                {
                    "kind": "region",
                    "polygon": [[318.49, 198.77], [386.49, 198.77], [389.28, 305.14], [321.28, 305.14]],
                    "source": [132.0, 338.0],
                },
                {
                    "kind": "rigid",
                    "sources": [[356.0, 452.0], [415.56, 462.85], [405.99, 417.86], [524.24, 416.24]],
                    "targets": [[276.0, 58.0], [253.0, 114.0], [299.0, 114.0], [276.0, 230.0]],
                },
            ],
        },
        "huber_all_hit.json": {
            "name": "huber",
            "frame_id": "f",
            "terms": [
                {"kind": "point", "source": [10, 10], "target": [40, 30], "weight": 2.5, "tolerance_px": 3},
                {"kind": "rigid", "sources": [[5, 5], [20, 5], [5, 20]], "targets": [[30, 30], [45, 30], [30, 45]],
                 "allow_scale": True},
            ],
            "cost": {"metric": "huber", "huber_delta_px": 4.0, "steps": "all", "mode": "hit"},
        },
        "mask_small.json": {
            "name": "mask on the small camera",
            "frame_id": "f",
            "terms": [{"kind": "mask", "source": [2, 3], "mask_png_base64": b64(small_mask)}],
        },
        "mask_bench.json": {
            "name": "mask on the bench",
            "frame_id": "f",
            "terms": [{"kind": "mask", "label": "mat", "source": [200, 110], "mask_png_base64": b64(bench_mask)}],
        },
        "mask_touching_override.json": {
            "name": "touches the no-go zone",
            "frame_id": "f",
            "terms": [{"kind": "mask", "source": [200, 110], "mask_png_base64": b64(touching)}],
            "override_safety": True,
        },
        "learned.json": {
            "name": "tray the way the demos went",
            "frame_id": "f",
            "terms": [{"kind": "learned", "reward_fit_id": FIT_ID, "source": [31, 20], "weight": 0.5}],
        },
        "region_no_go_override.json": {
            "name": "region by the no-go zone",
            "frame_id": "f",
            "terms": [{"kind": "region", "source": [30, 30],
                       "polygon": [[500, 380], [560, 380], [560, 400], [500, 420]]}],
            "override_safety": True,
            "note": "line one\nline two",
        },
        "concave_region.json": {
            "name": "L-shaped region",
            "frame_id": "f",
            "terms": [{"kind": "region", "source": [1, 1],
                       "polygon": [[10, 10], [40, 10], [40, 20], [20, 20], [20, 40], [10, 40], [10, 10]]}],
        },
    }
    out = {name: json.dumps(doc, indent=None).encode() for name, doc in goals.items()}
    # Refusals the parser must give (strict JSON: an array where an object is expected).
    out["array_for_term.json"] = b'{"name": "a", "frame_id": "f", "terms": [["point", null, [1, 2], [3, 4]]]}'
    out["trailing.json"] = b'{"name": "a", "frame_id": "f", "terms": []} {}'
    out["duplicate_field.json"] = b'{"name": "a", "name": "b", "frame_id": "f", "terms": []}'
    return out


def npy_seeds():
    return {
        "points_f64.npy": npy("<f8", (1, 2, 2, 2), f64(1, 2, 5, 3, 1.5, 2.5, 6, 1)),
        "points_f32.npy": npy("<f4", (2, 1, 2, 2), f32(0, 0, 4, 1, 7, 5, 5.5, 3)),
        "points_f16.npy": npy("<f2", (1, 1, 2, 2), f16(1, 2, 6, 3)),
        "maps_f32.npy": npy("<f4", (1, 1, 2, 2, 3), f32(*([1 / 6] * 12))),
        "maps_f16_v2.npy": npy("<f2", (1, 1, 2, 1, 2), f16(0.5, 0.5, 0.25, 0.75), version=(2, 0)),
        "maps_v3.npy": npy("<f4", (1, 2, 2, 1, 1), f32(1, 1, 1, 1), version=(3, 0)),
        "scalar.npy": npy("<f8", (), f64(3.25)),
        "empty.npy": npy("<f4", (0,)),
        "fortran.npy": npy("<f4", (2, 2), f32(1, 2, 3, 4), fortran=True),
        "big_endian.npy": npy(">f4", (1,), b"\x3f\x80\x00\x00"),
        "nan_points.npy": npy("<f4", (1, 1, 2, 2), f32(float("nan"), 1, float("inf"), 2)),
    }


def jpeg_frames():
    """Two 8 x 6 JPEG frames, when Pillow is installed (JPEG is not written by hand here)."""
    try:
        from PIL import Image
    except ImportError:
        return None
    frames = []
    for k in range(2):
        img = Image.new("RGB", (8, 6))
        img.putdata([((i + k) * 30, j * 40, 128) for j in range(6) for i in range(8)])
        buf = io.BytesIO()
        img.save(buf, "JPEG", quality=90)
        frames.append(buf.getvalue())
    return frames


def demo_seeds():
    frame = lambda k: png_gray(8, 6, lambda i, j: 255 if (i + k) % 4 < 2 else 20 * j)
    rows = lambda k: [[(i + j + k) % 4 for i in range(8)] for j in range(6)]
    jpegs = jpeg_frames()
    extra = {}
    if jpegs:
        extra["jpeg_frames.zip"] = zip_of([("0.jpg", jpegs[0]), ("1.jpeg", jpegs[1])])
    else:
        print("Pillow is not installed: the JPEG seed is left as it is", file=sys.stderr)
    return extra | {
        "two_frames.zip": zip_of([("frame_000.png", frame(0)), ("frame_001.png", frame(1))]),
        "timestamps.zip": zip_of(
            [
                ("clip/b.png", frame(1)),
                ("clip/a.png", frame(0)),
                ("clip/timestamps.csv", b"t\n0.0\n0.1\n"),
            ]
        ),
        "stored.zip": zip_of([("x.png", frame(2))], method=zipfile.ZIP_STORED),
        "three_frames.gif": gif(8, 6, [rows(0), rows(1), rows(2)]),
    }


def polygon_seeds():
    def enc(mode, w, h, zones, polys, queries, mask=b""):
        def coord(v):
            if mode == 0:
                return struct.pack("<b", v)
            if mode == 1:
                return struct.pack("<h", round(v * 16))
            return struct.pack("<d", v)

        out = bytes([mode, w - 1, h - 1, zones])
        for vs in list(polys) + [queries]:
            out += bytes([len(vs)]) + b"".join(coord(x) + coord(y) for x, y in vs)
        return out + mask

    square = [(2, 2), (29, 2), (29, 21), (2, 21)]
    corner = [(20, 15), (28, 15), (28, 21)]
    small = [(5, 5), (10, 5), (10, 10), (5, 10)]
    q = [(0, 0), (5, 5), (25, 18), (31, 23), (-3, 4), (20, 15), (28, 18)]
    ell = [(1.5, 1.5), (30.25, 1.5), (30.25, 10), (12, 10), (12, 22.5), (1.5, 22.5)]
    touch = [(12, 10), (20, 10), (20, 14)]
    return {
        "grid_zones.bin": enc(0, 32, 24, 3, [square, corner, small], q, bytes([0x0F] * 40 + [0xF0] * 56)),
        "grid_no_zones.bin": enc(0, 16, 16, 0, [square, corner, small], q, b"\x01"),
        "fraction_l_shape.bin": enc(1, 32, 24, 3, [ell, touch, [(3, 3), (11.9375, 3), (11.9375, 20)]],
                                    [(12, 10), (16, 12), (11.9375, 9.9375)], b"\xff" * 96),
        "collinear_vertex.bin": enc(0, 20, 20, 1, [[(0, 0), (5, 0), (10, 0), (10, 10), (0, 10)], [], small],
                                    [(5, 0), (7, 3)], b"\x80"),
        "bowtie_and_repeat.bin": enc(0, 20, 20, 3, [[(0, 0), (10, 10), (10, 0), (0, 10)],
                                                   [(1, 1), (1, 1), (5, 1), (1, 5)], [(0, 0), (4, 0), (8, 0)]],
                                     [(3, 3)]),
        "raw_f64.bin": enc(2, 40, 30, 3, [[(1.0, 1.0), (35.5, 2.0), (20.0, 28.0)],
                                          [(10.0, 10.0), (12.0, 10.0), (11.0, 12.0)],
                                          [(15.0, 8.0), (18.0, 8.0), (16.0, 11.0)]],
                           [(float("nan"), 1.0), (1e300, 2.0), (-0.0, 0.0), (11.0, 10.0), (5e-324, 3.0)], b"\x55" * 150),
    }


def main():
    target_dir = Path(sys.argv[1]) if len(sys.argv) > 1 else HERE / "corpus"
    for target, files in [
        ("goal_document", goal_seeds()),
        ("npy_reader", npy_seeds()),
        ("demo_archive", demo_seeds()),
        ("polygon_zone", polygon_seeds()),
    ]:
        d = target_dir / target
        d.mkdir(parents=True, exist_ok=True)
        for name, data in files.items():
            (d / ("seed-" + name)).write_bytes(data)
        print(f"{d}: {len(files)} files, {sum(len(v) for v in files.values())} bytes")


if __name__ == "__main__":
    main()

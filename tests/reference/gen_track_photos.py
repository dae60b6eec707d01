"""Photographs for goalsmith-core's point tracker (server/core/src/track.rs): sequences made by
warping scikit-image's sample photographs with known affine maps, OpenCV's pyramidal
Lucas-Kanade (cv2.calcOpticalFlowPyrLK) run on them, and the true positions the warps give.

Photographs (all bundled with scikit-image 0.26, read offline from the installed package; the
provenance is the one each function's documentation gives):
  - skimage.data.camera(): a man with a camera on a tripod, 512 x 512, CC0 by the photographer
    (Lav Varshney); halved here with cv2.resize INTER_AREA to 256 x 256;
  - skimage.data.brick(): a brick wall, 512 x 512, from CC0Textures (Bricks25), CC0;
  - skimage.data.grass(): grass, 512 x 512, from DeviantArt (linolafett, "Grass 01"), CC0;
  - skimage.data.text(): text and corner shapes, 172 x 448, from Wikipedia
    (File:Corner.png), public domain;
  - skimage.data.astronaut(): Eileen Collins, from the NASA Great Images database, public
    domain; to gray with cv2.cvtColor RGB2GRAY and halved with INTER_AREA to 256 x 256;
  - skimage.data.coins(): Greek coins from Pompeii, 303 x 384, from the Brooklyn Museum
    Collection, no known copyright restrictions;
  - skimage.data.gravel(): gravel, 512 x 512, from CC0Textures (Gravel04), CC0.

Frames: frame k of a sequence is cv2.warpAffine(photo, M_k, (width, height),
flags=INTER_LINEAR) (bilinear; BORDER_CONSTANT is never reached, the maps keep every frame
inside the photo), M_k the 2 x 3 map from photo pixels to frame pixels. OpenCV's warpAffine
samples dst(x) = src(M_k^-1 x) with integer coordinates at pixel centres, the convention of
goalsmith (the centre of the top-left pixel is (0, 0)), so a photo point u is at M_k u in frame
k, and a point p of frame k is at M_k+1 M_k^-1 p in frame k+1: that is the true motion.
warpAffine on 8-bit images rounds source coordinates to 1/32 px; the translations below are
whole multiples of 1/32 px so that they are rendered exactly, and with rotations and scalings
the rounding varies from pixel to pixel (under 1/64 px) and averages out over a window.

Sequences (5 frames, 4 consecutive pairs each):
  - "camera_subpixel", "brick_subpixel", "grass_subpixel": 192 x 192, pure sub-pixel
    translations between consecutive frames (each component under 1 px);
  - "text_shift": 192 x 172, translations of 2 to 7 px with a sub-pixel part;
  - "astronaut_rotate": 192 x 192, rotations of 2 degrees per frame about an off-centre point;
  - "coins_scale": 192 x 192, scalings by 1.025 per frame (and one by 1/1.025) about an
    off-centre point with a small shift;
  - "gravel_similarity": 192 x 192, 1.5 degrees and 2 % shrinking per frame, plus a shift.
Points: up to 30 per sequence, cv2.goodFeaturesToTrack on frame 0 (quality 0.01, 12 px apart,
at least 24 px from the border), moved by a random sub-pixel offset, and kept only if they stay
at least 16 px inside every frame. For each pair (k, k+1) the points are their true positions in
frame k.

Cases of points that must be lost, each one pair of frames (192 x 192):
  - "occlusion": camera, the second frame translated by a sub-pixel amount, with a 56 x 56
    square of skimage.data.grass() pasted over one place and a 56 x 56 square of flat grey (128)
    over another. "occluded" points are those whose 21 x 21 window around their true position
    in the second frame lies entirely inside a square; "visible" ones are at least 32 px from
    both squares in both frames; points in between are stored as "partial" and not judged.
  - "leaving": gravel, the second frame translated by (-11.40625, 9.28125) px, so points near
    the left and the bottom edge leave the frame. "leaving" points end at least 1.5 px outside
    the frame; "visible" ones end at least 16 px inside it; others "edge", not judged.
  - "leaving_brick": the same on brick. The brick courses repeat down the image, and for a
    few points well inside the frame the step back (9.3 px up) locks onto the wrong course
    in both trackers, so there the visible points are compared with OpenCV's verdicts.

For each pair and point the script stores OpenCV's forward result (calcOpticalFlowPyrLK with
winSize 21 x 21, maxLevel 3, criteria COUNT|EPS 30 / 0.01, minEigThreshold 1e-4, flags 0: the
parameters of gen_track.py and goalsmith's defaults), its status, the backward result from the
forward one, its status, the forward-backward error, and the true position. For these cases
it also stores whether OpenCV's own round trip flags the point (either status 0, a round trip
beyond 1 px, or the forward position off the frame, as in gen_track.py's chain).

Frames are stored as base64 PNG (lossless, so the Rust test reads the exact 8-bit frames) with
the maps beside them for the record.
Writes tests/reference/track_photos.json.
Run:  tests/reference/.venv/bin/python tests/reference/gen_track_photos.py
"""

import base64
import json
import math
import pathlib

import cv2
import numpy as np
import skimage
import skimage.data

WIN = 21
MAX_LEVEL = 3
CRITERIA = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 30, 0.01)
MIN_EIG = 1e-4
MAX_FB = 1.0
HALF = (WIN - 1) // 2


def half(img):
    return cv2.resize(img, (img.shape[1] // 2, img.shape[0] // 2), interpolation=cv2.INTER_AREA)


def gray(img):
    return cv2.cvtColor(img, cv2.COLOR_RGB2GRAY)


def translation(dx, dy):
    return np.array([[1.0, 0.0, dx], [0.0, 1.0, dy]])


def similarity(angle_deg, scale, centre, shift):
    """The 2 x 3 map x -> s R (x - c) + c + t."""
    a = math.radians(angle_deg)
    r = scale * np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
    c = np.asarray(centre, float)
    t = r @ (-c) + c + np.asarray(shift, float)
    return np.hstack([r, t[:, None]])


def compose(m2, m1):
    """m2 after m1, both 2 x 3."""
    return (np.vstack([m2, [0, 0, 1]]) @ np.vstack([m1, [0, 0, 1]]))[:2]


def invert(m):
    return np.linalg.inv(np.vstack([m, [0, 0, 1]]))[:2]


def apply(m, pts):
    return np.asarray(pts, float) @ m[:, :2].T + m[:, 2]


def chain(first, steps):
    """Maps photo -> frame k: `first` for frame 0, then each step (frame k -> frame k+1) after."""
    maps = [first]
    for s in steps:
        maps.append(compose(s, maps[-1]))
    return maps


def warp(photo, m, width, height):
    return cv2.warpAffine(photo, m, (width, height), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT)


def inside_photo(photo, m, width, height):
    """Whether every frame pixel (and its bilinear neighbour) samples inside the photo."""
    inv = invert(m)
    corners = apply(inv, [(0, 0), (width - 1, 0), (0, height - 1), (width - 1, height - 1)])
    h, w = photo.shape
    return corners.min() >= 0 and (corners[:, 0] <= w - 2).all() and (corners[:, 1] <= h - 2).all()


def png_b64(img):
    ok, buf = cv2.imencode(".png", img, [cv2.IMWRITE_PNG_COMPRESSION, 9])
    assert ok
    return base64.b64encode(buf.tobytes()).decode("ascii")


def lk(a, b, pts):
    p = np.asarray(pts, np.float32).reshape(-1, 1, 2)
    nxt, status, _ = cv2.calcOpticalFlowPyrLK(
        a, b, p, None, winSize=(WIN, WIN), maxLevel=MAX_LEVEL, criteria=CRITERIA, flags=0, minEigThreshold=MIN_EIG
    )
    return nxt.reshape(-1, 2).astype(float), status.reshape(-1).astype(int)


def r6(v):
    return [round(float(x), 6) for x in v]


def on_frame(p, width, height):
    return -0.5 <= p[0] <= width - 0.5 and -0.5 <= p[1] <= height - 0.5


def features(frame, n, margin, rng, mask=None):
    """Corners of frame (cv2.goodFeaturesToTrack), moved by a random sub-pixel offset."""
    if mask is None:
        mask = np.zeros(frame.shape, np.uint8)
        mask[margin:-margin, margin:-margin] = 255
    pts = cv2.goodFeaturesToTrack(frame, n, 0.01, 12, mask=mask)
    pts = pts.reshape(-1, 2).astype(float)
    return pts + rng.uniform(-0.5, 0.5, pts.shape)


def pair_record(a, b, pts, truth, width, height):
    fwd, st = lk(a, b, pts)
    back, st_b = lk(b, a, fwd)
    fb = np.hypot(*(back - pts).T)
    flagged = [
        bool(st[i] == 0 or st_b[i] == 0 or not fb[i] <= MAX_FB or not on_frame(fwd[i], width, height))
        for i in range(len(pts))
    ]
    return {
        "points": [r6(p) for p in pts],
        "truth": [r6(p) for p in truth],
        "forward": [r6(p) for p in fwd],
        "status": st.tolist(),
        "backward": [r6(p) for p in back],
        "backward_status": st_b.tolist(),
        "fb_error": r6(fb),
        "opencv_flagged": flagged,
    }


def sequence(name, photo_name, photo, warp_kind, subpixel, width, height, maps, rng):
    for m in maps:
        assert inside_photo(photo, m, width, height), name
    frames = [warp(photo, m, width, height) for m in maps]
    pts0 = features(frames[0], 40, 24, rng)
    seeds = apply(invert(maps[0]), pts0)
    keep = []
    for i, s in enumerate(seeds):
        ok = True
        for m in maps:
            x, y = apply(m, [s])[0]
            ok &= 16 <= x <= width - 17 and 16 <= y <= height - 17
        if ok:
            keep.append(i)
    seeds = seeds[keep[:30]]
    pairs = []
    for k in range(len(frames) - 1):
        pts = apply(maps[k], seeds)
        truth = apply(maps[k + 1], seeds)
        rec = pair_record(frames[k], frames[k + 1], pts, truth, width, height)
        assert all(s == 1 for s in rec["status"]), (name, k)
        pairs.append({"from": k, **rec})
    return {
        "name": name,
        "photo": photo_name,
        "warp": warp_kind,
        "subpixel_translation": subpixel,
        "width": width,
        "height": height,
        "maps": [[r6(row) for row in m] for m in maps],
        "frames_png": [png_b64(f) for f in frames],
        "pairs": pairs,
    }


def occlusion_case(camera, grass, rng):
    width = height = 192
    m0 = translation(-32, -32)
    m1 = compose(translation(0.40625, -0.28125), m0)
    a = warp(camera, m0, width, height)
    b = warp(camera, m1, width, height)
    squares = [
        ("grass", (112, 24)),  # (x0, y0) of a 56 x 56 square
        ("flat", (20, 112)),
    ]
    side = 56
    for kind, (x0, y0) in squares:
        if kind == "grass":
            b[y0 : y0 + side, x0 : x0 + side] = grass[200 : 200 + side, 300 : 300 + side]
        else:
            b[y0 : y0 + side, x0 : x0 + side] = 128
    # Points: corners away from the squares, and a grid of corners inside each square.
    pts = [features(a, 40, 20, rng)]
    for _, (x0, y0) in squares:
        mask = np.zeros(a.shape, np.uint8)
        mask[y0 + 12 : y0 + side - 12, x0 + 12 : x0 + side - 12] = 255
        pts.append(features(a, 8, 0, rng, mask=mask))
    pts = np.vstack(pts)
    truth = apply(compose(m1, invert(m0)), pts)

    def gap(p, x0, y0):
        """Distance from p to the square (0 inside)."""
        dx = max(x0 - p[0], 0, p[0] - (x0 + side - 1))
        dy = max(y0 - p[1], 0, p[1] - (y0 + side - 1))
        return math.hypot(dx, dy)

    cats = []
    for p, t in zip(pts, truth):
        occluded = any(
            x0 <= t[0] - HALF - 0.5 and t[0] + HALF + 1.5 <= x0 + side and y0 <= t[1] - HALF - 0.5 and t[1] + HALF + 1.5 <= y0 + side
            for _, (x0, y0) in squares
        )
        visible = all(gap(p, x0, y0) >= 32 and gap(t, x0, y0) >= 32 for _, (x0, y0) in squares)
        cats.append("occluded" if occluded else "visible" if visible else "partial")
    rec = pair_record(a, b, pts, truth, width, height)
    return {
        "name": "occlusion",
        "photo": "camera",
        "warp": "translation (0.40625, -0.28125) px; 56 x 56 squares pasted over the second frame: grass at "
        "(112, 24), flat grey 128 at (20, 112) (top-left corners)",
        "width": width,
        "height": height,
        "squares": [{"kind": k, "x0": x0, "y0": y0, "side": side} for k, (x0, y0) in squares],
        "frames_png": [png_b64(a), png_b64(b)],
        "category": cats,
        **rec,
    }


def leaving_case(name, photo_name, photo, offset, rng):
    width = height = 192
    m0 = translation(*offset)
    shift = (-11.40625, 9.28125)
    m1 = compose(translation(*shift), m0)
    a = warp(photo, m0, width, height)
    b = warp(photo, m1, width, height)
    pts = [features(a, 30, 20, rng)]
    # Corners near the left and the bottom edge, which the shift carries off the frame.
    for sl in [(slice(10, height - 10), slice(1, 10)), (slice(height - 9, height - 1), slice(20, width - 10))]:
        mask = np.zeros(a.shape, np.uint8)
        mask[sl] = 255
        pts.append(features(a, 8, 0, rng, mask=mask))
    pts = np.vstack(pts)
    pts = np.clip(pts, 0, width - 1)
    truth = apply(compose(m1, invert(m0)), pts)
    cats = []
    for t in truth:
        outside = max(-0.5 - t[0], -0.5 - t[1], t[0] - (width - 0.5), t[1] - (height - 0.5))
        cats.append("leaving" if outside >= 1.5 else "visible" if outside <= -16 else "edge")
    rec = pair_record(a, b, pts, truth, width, height)
    return {
        "name": name,
        "photo": photo_name,
        "warp": "translation (%s, %s) px" % shift,
        "width": width,
        "height": height,
        "frames_png": [png_b64(a), png_b64(b)],
        "category": cats,
        **rec,
    }


def main():
    rng = np.random.default_rng(20261208)
    camera = half(skimage.data.camera())
    brick = skimage.data.brick()
    grass = skimage.data.grass()
    text = skimage.data.text()
    astronaut = half(gray(skimage.data.astronaut()))
    coins = skimage.data.coins()
    gravel = skimage.data.gravel()

    seqs = []
    sub = [
        translation(0.375, -0.21875),
        translation(-0.65625, 0.46875),
        translation(0.28125, 0.8125),
        translation(-0.90625, -0.5),
    ]
    seqs.append(
        sequence(
            "camera_subpixel", "camera", camera, "sub-pixel translations", True, 192, 192,
            chain(translation(-32, -32), sub), rng,
        )
    )
    sub2 = [
        translation(-0.46875, 0.59375),
        translation(0.8125, 0.125),
        translation(-0.15625, -0.71875),
        translation(0.53125, 0.34375),
    ]
    seqs.append(
        sequence(
            "brick_subpixel", "brick", brick, "sub-pixel translations", True, 192, 192,
            chain(translation(-160, -160), sub2), rng,
        )
    )
    seqs.append(
        sequence(
            "grass_subpixel", "grass", grass, "sub-pixel translations", True, 192, 192,
            chain(translation(-40, -260), sub), rng,
        )
    )
    big = [
        translation(2.40625, -1.28125),
        translation(-4.15625, 3.59375),
        translation(6.71875, 0.4375),
        translation(-3.3125, -2.84375),
    ]
    seqs.append(
        sequence(
            "text_shift", "text", text, "translations of 2-7 px", False, 192, 160,
            chain(translation(-120, -6), big), rng,
        )
    )
    rot = similarity(2.0, 1.0, (84.0, 101.0), (0.0, 0.0))
    seqs.append(
        sequence(
            "astronaut_rotate", "astronaut", astronaut, "rotations of 2 degrees", False, 192, 192,
            chain(translation(-32, -32), [rot] * 4), rng,
        )
    )
    up = similarity(0.0, 1.025, (88.0, 104.0), (0.3125, -0.1875))
    down = similarity(0.0, 1 / 1.025, (88.0, 104.0), (-0.25, 0.4375))
    seqs.append(
        sequence(
            "coins_scale", "coins", coins, "scalings by 1.025", False, 192, 192,
            chain(translation(-150, -70), [up, up, down, up]), rng,
        )
    )
    simi = similarity(-1.5, 0.98, (110.0, 80.0), (0.4375, -0.34375))
    seqs.append(
        sequence(
            "gravel_similarity", "gravel", gravel, "rotation -1.5 degrees and scaling 0.98", False, 192, 192,
            chain(translation(-200, -180), [simi] * 4), rng,
        )
    )

    out = {
        "source": "OpenCV %s cv2.calcOpticalFlowPyrLK via tests/reference/gen_track_photos.py; frames: "
        "skimage.data photographs (scikit-image %s) warped with cv2.warpAffine INTER_LINEAR"
        % (cv2.__version__, skimage.__version__),
        "window": WIN,
        "max_level": MAX_LEVEL,
        "max_iterations": CRITERIA[1],
        "epsilon": CRITERIA[2],
        "min_eigenvalue": MIN_EIG,
        "max_fb_error": MAX_FB,
        "sequences": seqs,
        "occlusion": occlusion_case(camera, grass, rng),
        "leaving": leaving_case("leaving", "gravel", gravel, (-40, -60), rng),
        "leaving_brick": leaving_case("leaving_brick", "brick", brick, (-160, -160), rng),
    }
    path = pathlib.Path(__file__).with_name("track_photos.json")
    with open(path, "w") as fh:
        json.dump(out, fh, separators=(",", ":"))
        fh.write("\n")
    print(path, path.stat().st_size, "bytes")
    for s in seqs:
        errs = np.array([np.hypot(*(np.array(p["forward"]) - np.array(p["truth"])).T) for p in s["pairs"]]).ravel()
        print("%-18s %2d points  OpenCV median error %.4f px, max %.4f px" % (s["name"], len(s["pairs"][0]["points"]), np.median(errs), errs.max()))
    for case in (out["occlusion"], out["leaving"], out["leaving_brick"]):
        cats = case["category"]
        summary = {}
        for c, f in zip(cats, case["opencv_flagged"]):
            n, k = summary.get(c, (0, 0))
            summary[c] = (n + 1, k + f)
        print(case["name"], {c: "%d of %d flagged by OpenCV" % (k, n) for c, (n, k) in summary.items()})


if __name__ == "__main__":
    main()

"""Reference tracks for goalsmith-core's point tracker (server/core/src/track.rs), computed with
OpenCV's pyramidal Lucas-Kanade (opencv-python-headless, cv2.calcOpticalFlowPyrLK).

Frames are rendered here, deterministically: a smooth texture (a sum of Gaussian blobs, sigma
2.5-9 px, and two slow sinusoids) evaluated at the pixel centres (the centre of the top-left pixel
is (0, 0), as in OpenCV and in goalsmith) after a known motion, then rounded to 8 bits. Frame k is
the texture seen through the map T_k (texture coordinates -> frame k), so a texture point u is at
T_k(u) in frame k and the true position in frame k+1 of a point p of frame k is T_{k+1}(T_k^-1(p)).

Sequences:
  - "translate": 192 x 176 (4 pyramid levels usable with a 21 px window: level 3 is 24 x 22),
    sub-pixel and large shifts between consecutive frames (up to about 12 px);
  - "similarity": 128 x 96, each frame rotated by 1.5 degrees and scaled by 1.5 % about an
    off-centre point, plus a small shift;
  - "small": 40 x 30, smaller than two windows, so only level 0 is used and every window hangs
    over the border (reflect-101 images, zero gradients outside, as both trackers do).

For each consecutive pair (k, k+1) and each point p (true positions of frame k), the script
stores OpenCV's
  - forward result: calcOpticalFlowPyrLK(I_k, I_k+1, p) with winSize 21 x 21, maxLevel 3,
    criteria COUNT|EPS 30 / 0.01, minEigThreshold 1e-4, flags 0 -> position and status;
  - minimum eigenvalue: the same call with OPTFLOW_LK_GET_MIN_EIGENVALS (err is then the minimum
    eigenvalue of the gradient matrix divided by the window area);
  - backward result: calcOpticalFlowPyrLK(I_k+1, I_k, forward) -> position and status, and the
    forward-backward error |backward - p| (Kalal et al. 2010);
  - the true position in frame k+1.
For "translate" it also stores a chained track: from seeds in frame 0, forward step by step
from OpenCV's own previous result, lost once a step fails (status 0 either way, a round trip
beyond 1 px or the point off the frame).

The building blocks are checked on their own too ("filters"): a random 13 x 11 float32 image,
two levels of cv2.pyrDown (5 x 5 Gaussian [1 4 6 4 1]^2 / 256, BORDER_REFLECT_101, size
((w+1)/2, (h+1)/2)), and cv2.Scharr dx and dy of the image (BORDER_REFLECT_101), divided by 32
so they are gradients in grey levels per pixel.

Frames are stored as base64 PNG inside the JSON.
Writes tests/reference/track_opencv.json.
Run:  tests/reference/.venv/bin/python tests/reference/gen_track.py
"""

import base64
import json
import math
import pathlib

import cv2
import numpy as np

WIN = 21
MAX_LEVEL = 3
CRITERIA = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 30, 0.01)
MIN_EIG = 1e-4
MAX_FB = 1.0


def texture(seed, extent):
    """A smooth random texture f(u, v) over roughly [0, extent]^2 texture units."""
    rng = np.random.default_rng(seed)
    n = int(extent * extent / 90)
    blobs = []
    for _ in range(n):
        cx, cy = rng.uniform(-10, extent + 10, 2)
        sigma = rng.uniform(2.5, 9.0)
        amp = rng.uniform(-70, 70)
        blobs.append((cx, cy, sigma, amp))
    waves = [
        (rng.uniform(0, 2 * math.pi), 2 * math.pi / rng.uniform(25, 60), rng.uniform(0, math.pi), 18.0)
        for _ in range(2)
    ]

    def f(u, v):
        out = np.full(u.shape, 128.0)
        for cx, cy, sigma, amp in blobs:
            out += amp * np.exp(-((u - cx) ** 2 + (v - cy) ** 2) / (2 * sigma * sigma))
        for phase, k, angle, amp in waves:
            out += amp * np.sin(k * (u * math.cos(angle) + v * math.sin(angle)) + phase)
        return out

    return f


def similarity(angle_deg, scale, centre, shift):
    """The 2 x 3 map x -> s R (x - c) + c + t."""
    a = math.radians(angle_deg)
    r = scale * np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
    c = np.asarray(centre, float)
    t = r @ (-c) + c + np.asarray(shift, float)
    return np.hstack([r, t[:, None]])


def compose(m2, m1):
    """m2 after m1, both 2 x 3."""
    a = np.vstack([m1, [0, 0, 1]])
    b = np.vstack([m2, [0, 0, 1]])
    return (b @ a)[:2]


def invert(m):
    a = np.vstack([m, [0, 0, 1]])
    return np.linalg.inv(a)[:2]


def apply(m, pts):
    pts = np.asarray(pts, float)
    return pts @ m[:, :2].T + m[:, 2]


def render(f, m, width, height):
    """Frame seen through m (texture -> frame): pixel x shows f(m^-1 x), rounded to 8 bits."""
    inv = invert(m)
    xs, ys = np.meshgrid(np.arange(width, dtype=float), np.arange(height, dtype=float))
    u = inv[0, 0] * xs + inv[0, 1] * ys + inv[0, 2]
    v = inv[1, 0] * xs + inv[1, 1] * ys + inv[1, 2]
    return np.clip(np.round(f(u, v)), 0, 255).astype(np.uint8)


def png_b64(img):
    ok, buf = cv2.imencode(".png", img, [cv2.IMWRITE_PNG_COMPRESSION, 9])
    assert ok
    return base64.b64encode(buf.tobytes()).decode("ascii")


def lk(a, b, pts, flags=0):
    p = np.asarray(pts, np.float32).reshape(-1, 1, 2)
    nxt, status, err = cv2.calcOpticalFlowPyrLK(
        a, b, p, None, winSize=(WIN, WIN), maxLevel=MAX_LEVEL, criteria=CRITERIA, flags=flags,
        minEigThreshold=MIN_EIG,
    )
    return nxt.reshape(-1, 2).astype(float), status.reshape(-1).astype(int), err.reshape(-1).astype(float)


def r6(v):
    return [round(float(x), 6) for x in v]


def r6e(v):
    """Eigenvalues: 6 significant digits."""
    return [float(f"{float(x):.6g}") for x in v]


def on_frame(p, width, height):
    return -0.5 <= p[0] <= width - 0.5 and -0.5 <= p[1] <= height - 0.5


def sequence(name, width, height, maps, f, seeds, chain=False):
    frames = [render(f, m, width, height) for m in maps]
    pairs = []
    for k in range(len(frames) - 1):
        # True positions of the seeds (texture points) in frame k.
        pts = apply(maps[k], seeds)
        truth = apply(maps[k + 1], seeds)
        fwd, st, _ = lk(frames[k], frames[k + 1], pts)
        _, st_e, eig = lk(frames[k], frames[k + 1], pts, cv2.OPTFLOW_LK_GET_MIN_EIGENVALS)
        assert (st == st_e).all()
        back, st_b, _ = lk(frames[k + 1], frames[k], fwd)
        fb = np.hypot(*(back - pts).T)
        pairs.append(
            {
                "from": k,
                "points": [r6(p) for p in pts],
                "truth": [r6(p) for p in truth],
                "forward": [r6(p) for p in fwd],
                "status": st.tolist(),
                "min_eigenvalue": r6e(eig),
                "backward": [r6(p) for p in back],
                "backward_status": st_b.tolist(),
                "fb_error": r6(fb),
            }
        )
    out = {
        "name": name,
        "width": width,
        "height": height,
        "frames_png": [png_b64(fr) for fr in frames],
        "pairs": pairs,
    }
    if chain:
        pos = apply(maps[0], seeds)
        lost = np.zeros(len(seeds), bool)
        rows = [{"positions": [r6(p) for p in pos], "lost": lost.tolist()}]
        for k in range(len(frames) - 1):
            fwd, st, _ = lk(frames[k], frames[k + 1], pos)
            back, st_b, _ = lk(frames[k + 1], frames[k], fwd)
            fb = np.hypot(*(back - pos).T)
            for i in range(len(seeds)):
                if lost[i]:
                    continue
                if st[i] == 0 or st_b[i] == 0 or not fb[i] <= MAX_FB or not on_frame(fwd[i], width, height):
                    lost[i] = True
                else:
                    pos[i] = fwd[i]
            rows.append({"positions": [r6(p) for p in pos], "lost": lost.tolist()})
        out["chain"] = {"truth": [[r6(p) for p in apply(m, seeds)] for m in maps], "rows": rows}
    return out


def grid(x0, x1, y0, y1, nx, ny, jitter, rng):
    pts = []
    for j in range(ny):
        for i in range(nx):
            x = x0 + (x1 - x0) * i / (nx - 1) + rng.uniform(-jitter, jitter)
            y = y0 + (y1 - y0) * j / (ny - 1) + rng.uniform(-jitter, jitter)
            pts.append((x, y))
    return np.array(pts)


def main():
    rng = np.random.default_rng(20261207)
    seqs = []

    # Translation: cumulative shifts of the texture in each frame.
    f = texture(1, 240)
    steps = [(0.37, -0.21), (1.56, 0.85), (-3.25, 4.11), (6.42, -11.78)]
    shifts = [(0.0, 0.0)]
    for dx, dy in steps:
        shifts.append((shifts[-1][0] + dx, shifts[-1][1] + dy))
    maps = [similarity(0.0, 1.0, (0, 0), s) for s in shifts]
    seeds = grid(30, 160, 32, 140, 5, 4, 3.0, rng)
    seqs.append(sequence("translate", 192, 176, maps, f, seeds, chain=True))

    # Similarity: rotation and scale about an off-centre point, plus a shift.
    f = texture(2, 140)
    step = similarity(1.5, 1.015, (58.3, 41.7), (0.8, -0.45))
    maps = [similarity(0.0, 1.0, (0, 0), (0, 0))]
    for _ in range(3):
        maps.append(compose(step, maps[-1]))
    seeds = grid(22, 104, 20, 74, 5, 4, 2.0, rng)
    seqs.append(sequence("similarity", 128, 96, maps, f, seeds))

    # Small frames: every window hangs over the border.
    f = texture(3, 60)
    maps = [similarity(0.0, 1.0, (0, 0), s) for s in [(0.0, 0.0), (0.61, -0.34), (0.95, 0.12)]]
    seeds = np.array([[4.2, 5.1], [19.6, 14.3], [34.8, 24.9], [10.3, 22.7], [30.1, 6.4], [2.1, 27.5]])
    seqs.append(sequence("small", 40, 30, maps, f, seeds))

    img = np.round(rng.uniform(0, 255, (11, 13)), 4).astype(np.float32)
    down1 = cv2.pyrDown(img)
    down2 = cv2.pyrDown(down1)
    filters = {
        "source": "OpenCV %s cv2.pyrDown and cv2.Scharr (BORDER_REFLECT_101) via tests/reference/gen_track.py"
        % cv2.__version__,
        "width": 13,
        "height": 11,
        "image": r6(img.ravel()),
        "pyr_down": [{"width": d.shape[1], "height": d.shape[0], "data": r6(d.ravel())} for d in (down1, down2)],
        "scharr_dx": r6(cv2.Scharr(img, cv2.CV_32F, 1, 0).ravel() / 32),
        "scharr_dy": r6(cv2.Scharr(img, cv2.CV_32F, 0, 1).ravel() / 32),
    }

    out = {
        "source": "OpenCV %s cv2.calcOpticalFlowPyrLK via tests/reference/gen_track.py" % cv2.__version__,
        "window": WIN,
        "max_level": MAX_LEVEL,
        "max_iterations": CRITERIA[1],
        "epsilon": CRITERIA[2],
        "min_eigenvalue": MIN_EIG,
        "max_fb_error": MAX_FB,
        "sequences": seqs,
        "filters": filters,
    }
    path = pathlib.Path(__file__).with_name("track_opencv.json")
    with open(path, "w") as fh:
        json.dump(out, fh, separators=(",", ":"))
        fh.write("\n")
    print(path, path.stat().st_size, "bytes")


if __name__ == "__main__":
    main()

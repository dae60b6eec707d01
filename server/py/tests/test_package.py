"""The Python package against a real server on SQLite, and against numpy.

Goals: the point, region (slanted edges), mask and rigid terms of the numpy reference
`tests/reference/route_cost.json` (written by `tests/reference/gen_route_cost.py`, which evaluates
docs/conventions.md's formulas with numpy, shapely and scipy, not with goalsmith), under its three
cost settings, created over HTTP on a 64×48 frame.
"""

from __future__ import annotations

import base64
import io
import json
import pathlib
import sys
import threading
import zipfile

import numpy as np
import pytest

import goalsmith
from support import ROOT, png_gray

sys.path.insert(0, str(ROOT / "tests" / "reference"))
import gen_route_cost as ref  # noqa: E402  (numpy evaluation of the documented formulas)

REFERENCE = json.loads((ROOT / "tests" / "reference" / "route_cost.json").read_text())
W, H = 64, 48


def _terms_for_server(terms):
    out = []
    for t in terms:
        t = dict(t)
        rows = t.pop("mask_rows", None)
        if rows is not None:
            painted = bytes(255 if c == "1" else 0 for r in rows for c in r)
            t["mask_png_base64"] = base64.b64encode(png_gray(W, H, painted)).decode()
        out.append(t)
    return out


@pytest.fixture(scope="module")
def goals(server, team):
    """Per reference goal: (reference entry, goal id, bundle bytes)."""
    editor, _, frame = team
    made = []
    for want in REFERENCE["goals"]:
        body = {"name": want["name"], "frame_id": frame,
                "terms": _terms_for_server(want["terms"]), "cost": want["cost"]}
        st, rev = server.request("POST", "/api/goals", editor, body)
        assert st == 201, rev
        st, raw = server.request(
            "GET", f"/api/goals/{rev['goal_id']}/revisions/1/bundle.zip", editor)
        assert st == 200
        made.append((want, rev["goal_id"], raw))
    return made


def _server_cost(server, token, goal_id, body, content_type=None):
    st, res = server.request("POST", f"/api/goals/{goal_id}/revisions/1/cost", token,
                             body, content_type)
    assert st == 200, res
    return res


def _npy(arr):
    buf = io.BytesIO()
    np.save(buf, arr)
    return buf.getvalue()


def _same_bits(a, b):
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    assert a.shape == b.shape
    assert np.array_equal(a.view(np.uint64), b.view(np.uint64)), (a, b)


def test_bundle_fields(goals):
    want, goal_id, raw = goals[0]
    b = goalsmith.open_bundle(raw)
    assert b.goal["goal_id"] == goal_id and b.goal["revision"] == 1
    assert b.points == len(b.goal["derived"]["points"]) == 6
    assert b.cost_maps.dtype == np.float32 and b.cost_maps.shape == (6, H, W)
    assert "ISO 10218" in b.caution and b.caution == goalsmith.SAFETY_CAUTION
    cam = b.camera
    assert cam.K.shape == (3, 3) and cam.K[0, 0] == 60.0 and cam.K[1, 2] == 23.5
    assert cam.plane_offset_m == 0.8 and list(cam.plane_normal) == [0.0, 0.0, 1.0]
    assert cam.pose is None
    assert cam.targets_3d and cam.targets_3d[0].camera_m.shape == (3,)
    # The cost maps are the costs at the pixel centres: the map cost of a one-hot map is the
    # point cost at that pixel.
    one_hot = np.zeros((1, 1, 6, H, W), dtype=np.float32)
    pts = np.zeros((1, 1, 6, 2))
    for p, (i, j) in enumerate([(3, 4), (10, 40), (5, 30), (60, 47), (0, 0), (33, 21)]):
        one_hot[0, 0, p, j, i] = 1.0
        pts[0, 0, p] = (i, j)
    by_map = b.cost(maps=one_hot).per_point[0]
    by_point = b.cost(points=pts).per_point[0]
    np.testing.assert_allclose(by_map, by_point, rtol=1e-6)
    weights = by_point / np.array([b.cost_maps[p, j, i] for p, (i, j) in enumerate(
        [(3, 4), (10, 40), (5, 30), (60, 47), (0, 0), (33, 21)])], dtype=np.float64)
    np.testing.assert_allclose(weights, [1.5, 2.0, 0.5, 0.4, 0.4, 0.4], rtol=1e-6)


def test_costs_equal_the_server_bit_for_bit(server, team, goals):
    editor = team[0]
    rng = np.random.default_rng(7)
    for want, goal_id, raw in goals:
        b = goalsmith.open_bundle(raw)
        pts = np.asarray(want["points"], dtype=np.float64)
        srv = _server_cost(server, editor, goal_id, {"points": pts.tolist()})
        mine = b.cost(points=pts)
        _same_bits(mine.costs, srv["costs"])
        _same_bits(mine.per_point, srv["per_point"])
        assert mine.best == srv["best"] == want["best"]
        # float32 points, as an NPY body: widened exactly on both sides.
        p32 = (pts * 1.37).astype(np.float32)
        srv = _server_cost(server, editor, goal_id, _npy(p32), "application/x-npy")
        _same_bits(b.cost(points=p32).costs, srv["costs"])
        # Maps, float32 and float16, at the frame's size and at another size.
        for (h, w) in [(H, W), (17, 23)]:
            maps = rng.random((3, 2, 6, h, w), dtype=np.float32)
            maps /= maps.sum(axis=(3, 4), keepdims=True)
            for arr in (maps, maps.astype(np.float16)):
                srv = _server_cost(server, editor, goal_id, _npy(arr), "application/x-npy")
                mine = b.cost(maps=arr)
                _same_bits(mine.costs, srv["costs"])
                _same_bits(mine.per_point, srv["per_point"])
                assert mine.best == srv["best"]
            # One thread or many: the same bits.
            _same_bits(b.cost(maps=maps, threads=1).costs, b.cost(maps=maps).costs)


def test_gradients_equal_the_server_bit_for_bit(server, team, goals):
    editor = team[0]
    for want, goal_id, raw in goals:
        b = goalsmith.open_bundle(raw)
        pts = np.asarray(want["points"], dtype=np.float64)
        srv = _server_cost(server, editor, goal_id, {"points": pts.tolist(), "grad": True})
        mine = b.cost(points=pts, grad=True)
        assert mine.grad.shape == pts.shape
        _same_bits(mine.grad, srv["grad"])
        _same_bits(mine.costs, srv["costs"])
        assert "grad" not in _server_cost(server, editor, goal_id, {"points": pts.tolist()})


def test_costs_match_numpy_formulas(goals):
    """Outside check: numpy/shapely/scipy evaluation of docs/conventions.md (gen_route_cost)."""
    for want, _, raw in goals:
        b = goalsmith.open_bundle(raw)
        pts = np.asarray(want["points"], dtype=np.float64)
        mine = b.cost(points=pts)
        np.testing.assert_allclose(mine.costs, want["costs"], rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(mine.per_point, want["per_point"], rtol=1e-9, atol=1e-12)
        # And a fresh batch evaluated here by the same numpy code, to 1e-5 relative.
        rng = np.random.default_rng(11)
        fresh = rng.uniform(-10, 75, size=(40, 3, 6, 2))
        per, costs, best = ref.point_costs(want["terms"], want["cost"], fresh)
        got = b.cost(points=fresh)
        np.testing.assert_allclose(got.costs, costs, rtol=1e-5, atol=1e-9)
        np.testing.assert_allclose(got.per_point, per, rtol=1e-5, atol=1e-9)


def test_gradients_match_central_differences_of_numpy(goals):
    """∂C/∂x against central differences of the numpy evaluation, away from kinks (where the
    differences at h and h/2 disagree, the point is skipped; most are smooth)."""
    rng = np.random.default_rng(5)
    for want, _, raw in goals:
        if want["cost"].get("mode") == "hit":
            continue  # piecewise constant: gradient 0, checked below
        b = goalsmith.open_bundle(raw)
        pts = rng.uniform(-6, 70, size=(12, 3, 6, 2))
        g = b.cost(points=pts, grad=True).grad

        def cost(x):
            return ref.point_costs(want["terms"], want["cost"], x)[1]

        checked = 0
        for idx in np.ndindex(pts.shape):
            n = idx[0]
            fd = []
            for h in (1e-5, 5e-6):
                plus, minus = pts.copy(), pts.copy()
                plus[idx] += h
                minus[idx] -= h
                fd.append((cost(plus[n:n + 1])[0] - cost(minus[n:n + 1])[0]) / (2 * h))
            if abs(fd[0] - fd[1]) > 1e-7 * (1 + abs(fd[0])):
                continue
            checked += 1
            assert abs(g[idx] - fd[0]) <= 1e-6 * max(1.0, abs(fd[0])), (want["name"], idx, g[idx], fd)
        assert checked > 0.75 * pts.size, checked
    hit = [g for g in goals if g[0]["cost"].get("mode") == "hit"][0]
    res = goalsmith.open_bundle(hit[2]).cost(points=np.asarray(hit[0]["points"]), grad=True)
    assert not res.grad.any()


def test_zero_gradient_on_targets(goals):
    want, _, raw = goals[0]
    b = goalsmith.open_bundle(raw)
    # The last step of candidate 2 lies on every target (the reference's construction).
    pts = np.asarray(want["points"], dtype=np.float64)[2:3, -1:]
    assert b.cost(points=pts).costs[0] == 0.0
    assert not b.cost(points=pts, grad=True).grad.any()


def test_bad_input_is_refused_with_the_servers_messages(server, team, goals):
    editor = team[0]
    want, goal_id, raw = goals[0]
    b = goalsmith.open_bundle(raw)
    pts = np.asarray(want["points"], dtype=np.float64).copy()
    pts[1, 2, 3, 0] = np.nan
    with pytest.raises(ValueError) as e:
        b.cost(points=pts)
    st, res = server.request("POST", f"/api/goals/{goal_id}/revisions/1/cost", editor,
                             _npy(pts), "application/x-npy")
    assert st == 422 and res["error"]["message"] == str(e.value)
    maps = np.full((2, 1, 6, 8, 8), 1 / 64, dtype=np.float32)
    maps[1, 0, 4, 3, 3] = -0.5
    with pytest.raises(ValueError) as e:
        b.cost(maps=maps)
    st, res = server.request("POST", f"/api/goals/{goal_id}/revisions/1/cost", editor,
                             _npy(maps), "application/x-npy")
    assert st == 422 and res["error"]["message"] == str(e.value)
    with pytest.raises(ValueError, match="P = 6"):
        b.cost(points=np.zeros((2, 1, 5, 2)))
    with pytest.raises(ValueError, match="float32 or float64"):
        b.cost(points=np.zeros((2, 1, 6, 2), dtype=np.int64))
    with pytest.raises(ValueError, match="float32 or float16"):
        b.cost(maps=np.zeros((2, 1, 6, 4, 4), dtype=np.float64))
    with pytest.raises(ValueError, match="C-contiguous"):
        b.cost(points=np.zeros((2, 1, 6, 4))[..., ::2])
    with pytest.raises(ValueError, match="exactly one"):
        b.cost()
    with pytest.raises(ValueError, match="grad"):
        b.cost(maps=maps, grad=True)
    with pytest.raises(ValueError, match="threads"):
        b.cost(points=np.zeros((1, 1, 6, 2)), threads=0)


def test_buffers_are_read_in_place_and_the_gil_is_released(goals):
    want, _, raw = goals[0]
    b = goalsmith.open_bundle(raw)
    maps = np.random.default_rng(3).random((64, 10, 6, 48, 64), dtype=np.float32)
    # A memoryview (the buffer protocol alone) scores as the array does.
    _same_bits(b.cost(maps=memoryview(maps)).costs, b.cost(maps=maps).costs)
    # Another Python thread keeps running while a long cost call runs.
    ticks = []
    stop = threading.Event()

    def count():
        while not stop.is_set():
            ticks.append(1)

    th = threading.Thread(target=count)
    th.start()
    before = len(ticks)
    for _ in range(5):
        b.cost(maps=maps, threads=1)
    during = len(ticks) - before
    stop.set()
    th.join()
    assert during > 1000, during


def test_tampered_bundles_raise_bundle_error(goals):
    _, _, raw = goals[0]

    def rebuilt(change):
        src = zipfile.ZipFile(io.BytesIO(raw))
        out = io.BytesIO()
        with zipfile.ZipFile(out, "w") as z:
            for info in src.infolist():
                data = change(info.filename, src.read(info.filename))
                if data is not None:
                    z.writestr(info.filename, data)
        return out.getvalue()

    cases = {
        "goal.json": lambda n, d: d.replace(b"1.5", b"9.5", 1) if n == "goal.json" else d,
        "cost-maps.npy": lambda n, d: d[:-4] + b"\0\0\0\0" if n == "cost-maps.npy" else d,
        "camera.json": lambda n, d: None if n == "camera.json" else d,
    }
    for name, change in cases.items():
        data = rebuilt(change)
        assert data != raw
        with pytest.raises(goalsmith.BundleError) as e:
            goalsmith.open_bundle(data)
        assert name in str(e.value), (name, str(e.value))
        assert isinstance(e.value, ValueError)
    with pytest.raises(goalsmith.BundleError, match="format_version"):
        goalsmith.open_bundle(rebuilt(
            lambda n, d: d.replace(b'"format_version": 2,', b'"format_version": 99,')
            if n == "manifest.json" else d))
    with pytest.raises(goalsmith.BundleError, match="not a goalsmith bundle"):
        goalsmith.open_bundle(b"PK not really")


def test_client_round_trip(server, team, goals, tmp_path):
    editor, cam, _ = team
    want, goal_id, raw = goals[0]
    c = goalsmith.Client(server.base, editor, cache_dir=tmp_path)
    assert any(g["id"] == goal_id for g in c.goals())
    assert c.goal(goal_id)["revision"] == 1
    b = c.bundle(goal_id)
    assert b.file("goal.json") == goalsmith.open_bundle(raw).file("goal.json")
    assert list(tmp_path.glob("*.etag"))
    # Cached: a second fetch revalidates (304) and reads the same bundle from disk.
    again = c.bundle(goal_id, 1)
    assert again.goal == b.goal
    # A goal set's bundles, in order.
    items = [{"goal_id": g[1], "revision": 1} for g in reversed(goals)]
    st, gs = server.request("POST", "/api/goal-sets", editor, {"name": "bench run", "items": items})
    assert st == 201, gs
    got = c.goal_set_bundles(gs["id"])
    assert [x.goal["goal_id"] for x in got] == [i["goal_id"] for i in items]
    # An outcome appears in the summary.
    final = np.asarray(want["points"])[2, -1]
    res = c.record_outcome(goal_id, 1, final.tolist(), note="bench trial")
    assert res["success"] is True
    summary = c.outcomes(goal_id)["summary"]
    assert summary["trials"] == 1 and summary["successes"] == 1
    # Errors carry the contract's code, message and field.
    with pytest.raises(goalsmith.ApiError) as e:
        c.record_outcome(goal_id, 1, [[1.0, 2.0]])
    assert e.value.status == 422 and e.value.code and e.value.field == "final_points"
    with pytest.raises(goalsmith.ApiError) as e:
        goalsmith.Client(server.base, "not-a-token").goals()
    assert e.value.status == 401
    # A frame upload.
    pixels = bytes((i * 5) % 256 for i in range(W * H))
    path = tmp_path / "frame.png"
    path.write_bytes(png_gray(W, H, pixels))
    frame = c.upload_frame(cam, path)
    assert frame["width"] == W and frame["height"] == H and len(frame["sha256"]) == 64


def test_readme_example_runs(server, team, goals, tmp_path):
    """The MPC example of server/py/README.md, run as written against the test server."""
    editor = team[0]
    goal_id = goals[0][1]
    text = (ROOT / "server" / "py" / "README.md").read_text()
    code = text.split("```python\n", 1)[1].split("```", 1)[0]
    code = code.replace('"http://goals.lab.example:8080", token="…"',
                        f'{server.base!r}, token={editor!r}, cache_dir={str(tmp_path)!r}')
    code = code.replace('"6f1c…", revision=3', f"{goal_id!r}, revision=1")
    assert "lab.example" not in code and "6f1c" not in code
    scope: dict = {}
    exec(compile(code, "README example", "exec"), scope)
    assert scope["scored"].costs.shape == (512,)
    assert scope["verdict"]["cost"] >= 0.0

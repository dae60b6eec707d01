"""A real goalsmith server on SQLite for the package's tests.

The server binary is `$GOALSMITH_BIN`, or the workspace's `target/debug/goalsmith` (built with
`cargo build` when it is missing). Each test session starts one server on a free loopback port
with its own database and data folder, and makes API tokens with the real CLI.
"""

from __future__ import annotations

import pathlib
import tempfile

import pytest

from support import ROOT, Server, _binary, png_gray  # noqa: F401  (ROOT, png_gray for tests)


@pytest.fixture(scope="session")
def server():
    folder = pathlib.Path(tempfile.mkdtemp(prefix="goalsmith-py-"))
    s = Server(_binary(), folder)
    yield s
    s.stop()


@pytest.fixture(scope="session")
def team(server):
    """(editor token, camera id, frame id) of a 64×48 camera with intrinsics and a work plane."""
    editor = server.token("python", "editor")
    st, cam = server.request("POST", "/api/cameras", editor, {
        "name": "potting bench", "width": 64, "height": 48,
        "intrinsics": {"fx": 60.0, "fy": 60.0, "cx": 31.5, "cy": 23.5},
        "work_plane": {"normal": [0.0, 0.0, 1.0], "offset_m": 0.8},
    })
    assert st == 201, cam
    pixels = bytes((7 * i + 3 * j) % 256 for j in range(48) for i in range(64))
    st, frame = server.request("POST", f"/api/cameras/{cam['id']}/frames", editor,
                               png_gray(64, 48, pixels), "image/png")
    assert st == 201, frame
    return editor, cam["id"], frame["id"]

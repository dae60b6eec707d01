"""Starting a real goalsmith server for the package's tests and benchmarks."""

from __future__ import annotations

import json
import os
import pathlib
import struct
import subprocess
import sys
import urllib.error
import urllib.request
import zlib

ROOT = pathlib.Path(__file__).resolve().parents[3]


def _binary() -> str:
    env = os.environ.get("GOALSMITH_BIN")
    if env:
        return env
    path = ROOT / "target" / "debug" / "goalsmith"
    if not path.exists():
        subprocess.run(["cargo", "build", "--bin", "goalsmith"], cwd=ROOT, check=True)
    return str(path)


def png_gray(width: int, height: int, pixels: bytes) -> bytes:
    """An 8-bit greyscale PNG (PNG Specification: signature, IHDR, one IDAT, IEND)."""
    def chunk(kind: bytes, data: bytes) -> bytes:
        body = kind + data
        return struct.pack(">I", len(data)) + body + struct.pack(">I", zlib.crc32(body))

    rows = b"".join(b"\x00" + pixels[j * width:(j + 1) * width] for j in range(height))
    return (
        b"\x89PNG\r\n\x1a\n"
        + chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0))
        + chunk(b"IDAT", zlib.compress(rows))
        + chunk(b"IEND", b"")
    )


class Server:
    def __init__(self, binary: str, folder: pathlib.Path):
        self.binary = binary
        self.db = f"sqlite://{folder / 'goalsmith.db'}?mode=rwc"
        env = dict(os.environ, GOALSMITH_LOG="warn")
        self.proc = subprocess.Popen(
            [binary, "serve", "--bind", "127.0.0.1:0", "--database", self.db,
             "--data-dir", str(folder / "data")],
            stdout=subprocess.PIPE, stderr=sys.stderr, env=env, text=True,
        )
        line = self.proc.stdout.readline().strip()
        if not line.startswith("listening on "):
            self.proc.kill()
            raise RuntimeError(f"unexpected first line from goalsmith serve: {line!r}")
        self.base = line[len("listening on "):]

    def token(self, team: str, role: str) -> str:
        out = subprocess.run(
            [self.binary, "token", "create", "--team", team, "--role", role,
             "--database", self.db],
            check=True, capture_output=True, text=True, env=dict(os.environ, GOALSMITH_LOG="warn"),
        )
        return out.stdout.strip()

    def request(self, method, path, token, body=None, content_type=None):
        """(status, parsed JSON or raw bytes) of one request."""
        data = body
        if body is not None and content_type is None:
            data, content_type = json.dumps(body).encode(), "application/json"
        req = urllib.request.Request(self.base + path, data=data, method=method)
        req.add_header("Authorization", f"Bearer {token}")
        if content_type:
            req.add_header("Content-Type", content_type)
        try:
            with urllib.request.urlopen(req, timeout=120) as r:
                status, raw, ctype = r.status, r.read(), r.headers.get("Content-Type", "")
        except urllib.error.HTTPError as e:
            status, raw, ctype = e.code, e.read(), e.headers.get("Content-Type", "")
        return status, (json.loads(raw) if ctype.startswith("application/json") else raw)

    def stop(self):
        self.proc.kill()
        self.proc.wait()

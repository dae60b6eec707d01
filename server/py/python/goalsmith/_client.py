"""A thin HTTP client for a goalsmith server (standard library only)."""

from __future__ import annotations

import hashlib
import json
import os
import pathlib
import urllib.error
import urllib.parse
import urllib.request
from typing import Any, List, Optional, Sequence

from ._bundle import Bundle

__all__ = ["ApiError", "Client"]


class ApiError(Exception):
    """An error answer of the server: HTTP ``status`` and the contract's ``code``, ``message``
    and ``field`` (``None`` where none applies)."""

    def __init__(self, status: int, code: str, message: str, field: Optional[str] = None):
        super().__init__(f"{status} {code}: {message}" + (f" (field {field})" if field else ""))
        self.status = status
        self.code = code
        self.message = message
        self.field = field


def _default_cache() -> pathlib.Path:
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return pathlib.Path(base) / "goalsmith" / "bundles"


class Client:
    """Talks to a goalsmith server with an API token (``Authorization: Bearer``).

    ``cache_dir`` holds downloaded bundles by ETag (default ``$XDG_CACHE_HOME/goalsmith/bundles``
    or ``~/.cache/goalsmith/bundles``; ``None`` keeps nothing on disk). ``timeout`` is per
    request, in seconds. Every error answer raises :class:`ApiError`.
    """

    def __init__(
        self,
        base_url: str,
        token: str,
        *,
        cache_dir: Optional[os.PathLike] = _default_cache(),  # noqa: B008 (evaluated once)
        timeout: float = 60.0,
    ):
        parsed = urllib.parse.urlsplit(base_url)
        if parsed.scheme not in ("http", "https") or not parsed.netloc:
            raise ValueError(f"base_url must be an http or https URL, not {base_url!r}")
        self.base_url = base_url.rstrip("/")
        self._token = token
        self.cache_dir = None if cache_dir is None else pathlib.Path(cache_dir)
        self.timeout = timeout

    def __repr__(self) -> str:  # never shows the token
        return f"<goalsmith.Client {self.base_url}>"

    # -- plumbing ---------------------------------------------------------------------------

    def _request(
        self,
        method: str,
        path: str,
        body: Optional[bytes] = None,
        content_type: Optional[str] = None,
        headers: Optional[dict] = None,
    ):
        req = urllib.request.Request(self.base_url + path, data=body, method=method)
        req.add_header("Authorization", f"Bearer {self._token}")
        req.add_header("Accept", "application/json")
        if content_type:
            req.add_header("Content-Type", content_type)
        for k, v in (headers or {}).items():
            req.add_header(k, v)
        try:
            resp = urllib.request.urlopen(req, timeout=self.timeout)
            return resp.status, resp.headers, resp.read()
        except urllib.error.HTTPError as e:
            if e.code == 304:
                return 304, e.headers, b""
            raw = e.read()
            try:
                err = json.loads(raw)["error"]
                raise ApiError(e.code, err["code"], err["message"], err.get("field")) from None
            except (ValueError, KeyError, TypeError):
                text = raw.decode("utf-8", "replace")[:200]
                raise ApiError(e.code, "http_error", text or e.reason) from None

    def _json(self, method: str, path: str, payload: Any = None) -> Any:
        body = None if payload is None else json.dumps(payload, allow_nan=False).encode()
        _, _, raw = self._request(method, path, body, "application/json" if body else None)
        return json.loads(raw)

    @staticmethod
    def _q(part: str) -> str:
        return urllib.parse.quote(str(part), safe="")

    # -- goals ------------------------------------------------------------------------------

    def goals(self) -> List[dict]:
        """The team's goals, most recently changed first (``GET /api/goals`` items)."""
        return self._json("GET", "/api/goals")["items"]

    def goal(self, goal_id: str) -> dict:
        """The latest revision document of a goal."""
        return self._json("GET", f"/api/goals/{self._q(goal_id)}")

    def bundle(self, goal_id: str, revision: Optional[int] = None) -> Bundle:
        """The bundle of a revision (the latest when ``revision`` is None), verified.

        Bundles are kept in ``cache_dir`` under their ETag: a cached bundle is revalidated with
        ``If-None-Match`` and not downloaded again while it is current.
        """
        if revision is None:
            revision = int(self.goal(goal_id)["revision"])
        if isinstance(revision, bool) or not isinstance(revision, int) or revision < 1:
            raise ValueError(f"revision must be a whole number >= 1, not {revision!r}")
        path = f"/api/goals/{self._q(goal_id)}/revisions/{revision}/bundle.zip"
        key = hashlib.sha256(f"{self.base_url}{path}".encode()).hexdigest()[:32]
        cached = etag = None
        if self.cache_dir is not None:
            meta = self.cache_dir / f"{key}.etag"
            data = self.cache_dir / f"{key}.zip"
            if meta.is_file() and data.is_file():
                etag, cached = meta.read_text().strip(), data
        headers = {"If-None-Match": etag} if etag else {}
        status, resp_headers, raw = self._request("GET", path, headers=headers)
        if status == 304 and cached is not None:
            return Bundle(cached.read_bytes())
        bundle = Bundle(raw)  # verified before it is cached
        new_etag = resp_headers.get("ETag")
        if self.cache_dir is not None and new_etag:
            self.cache_dir.mkdir(parents=True, exist_ok=True)
            tmp = self.cache_dir / f"{key}.zip.tmp"
            tmp.write_bytes(raw)
            os.replace(tmp, self.cache_dir / f"{key}.zip")
            (self.cache_dir / f"{key}.etag").write_text(new_etag)
        return bundle

    def goal_set_bundles(self, set_id: str) -> List[Bundle]:
        """The bundles of a goal set's items, in the set's order (each pinned revision)."""
        goal_set = self._json("GET", f"/api/goal-sets/{self._q(set_id)}")
        return [self.bundle(i["goal_id"], int(i["revision"])) for i in goal_set["items"]]

    # -- reporting --------------------------------------------------------------------------

    def record_outcome(
        self,
        goal_id: str,
        revision: int,
        final_points: Sequence[Sequence[float]],
        note: Optional[str] = None,
    ) -> dict:
        """Reports where the source points ended up, (P, 2) pixels; returns the server's verdict
        (``success``, ``per_point`` residuals, ``cost``)."""
        pts = [[float(v) for v in xy] for xy in final_points]
        payload: dict = {"final_points": pts}
        if note is not None:
            payload["note"] = note
        path = f"/api/goals/{self._q(goal_id)}/revisions/{int(revision)}/outcomes"
        return self._json("POST", path, payload)

    def outcomes(self, goal_id: str) -> dict:
        """A goal's outcomes and their summary (``trials``, ``successes``, ...)."""
        return self._json("GET", f"/api/goals/{self._q(goal_id)}/outcomes")

    def upload_frame(self, camera_id: str, image_path: os.PathLike) -> dict:
        """Uploads a PNG or JPEG camera frame; returns ``{id, sha256, width, height}``."""
        p = pathlib.Path(image_path)
        data = p.read_bytes()
        if data[:8] == b"\x89PNG\r\n\x1a\n":
            ctype = "image/png"
        elif data[:3] == b"\xff\xd8\xff":
            ctype = "image/jpeg"
        else:
            raise ValueError(f"{p}: not a PNG or JPEG file")
        _, _, raw = self._request("POST", f"/api/cameras/{self._q(camera_id)}/frames", data, ctype)
        return json.loads(raw)

"""Static files under names that carry a digest of their content, compressed once, cached for a year.

``static_url("plots.js")`` (a template global) gives ``/static/h/plots.<digest>.js``: a new content is a
new name, so a browser may keep a file for good (``Cache-Control: immutable``) and still never runs an
old script beside a new page. The files are read from ``web/static`` (the plotting library's bundle
in ``web/static/vendor``, see its README) when first asked for; each is gzip-compressed once (level
9) and that copy sent to clients that take gzip. Brotli is left out: no well-kept library for it is
a dependency here, and gzip already brings the plotting bundle to about a third.

The plain names under ``/static/`` are still served (``StaticFiles``), with the ordinary caching.
The route is :mod:`server.pages.assets`; this module has no web dependency, so the templates'
environment can name files without importing the pages.
"""

from __future__ import annotations

import gzip
import hashlib
import threading
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath

from server.config import WEB_DIR
from server.services.errors import NotFound

__all__ = ["Asset", "static_url", "asset_for", "IMMUTABLE", "PLOTTING_BUNDLE", "STATIC_DIR"]

STATIC_DIR = WEB_DIR / "static"
PLOTTING_BUNDLE = "vendor/plotly-basic.min.js"
IMMUTABLE = "public, max-age=31536000, immutable"
_TYPES = {".js": "application/javascript", ".css": "text/css; charset=utf-8", ".svg": "image/svg+xml",
          ".json": "application/json", ".txt": "text/plain; charset=utf-8"}
_COMPRESSIBLE = (".js", ".css", ".svg", ".json", ".txt")


@dataclass
class Asset:
    """One static file: its content, digest and hashed name; its gzip copy made on first need."""

    path: str  # relative to web/static, with "/"
    content: bytes
    digest: str
    media_type: str
    _gzip: bytes | None = field(default=None, repr=False)
    _lock: threading.Lock = field(default_factory=threading.Lock, repr=False)

    @property
    def hashed_name(self) -> str:
        p = PurePosixPath(self.path)
        return str(p.with_name(f"{p.stem}.{self.digest}{p.suffix}"))

    @property
    def url(self) -> str:
        return f"/static/h/{self.hashed_name}"

    @property
    def etag(self) -> str:
        return f'"{self.digest}"'

    def gzipped(self) -> bytes | None:
        """The gzip copy (made once), or None when compressing does not pay (small or already compressed)."""
        if not self.path.endswith(_COMPRESSIBLE) or len(self.content) < 1000:
            return None
        with self._lock:
            if self._gzip is None:
                self._gzip = gzip.compress(self.content, compresslevel=9, mtime=0)
        return self._gzip


class _Manifest:
    def __init__(self, root: Path) -> None:
        self.root = root
        self._by_path: dict[str, Asset] = {}
        self._by_hashed: dict[str, Asset] = {}
        self._lock = threading.Lock()

    def asset(self, path: str) -> Asset:
        with self._lock:
            found = self._by_path.get(path)
            if found is not None:
                return found
            file = (self.root / path).resolve()
            if self.root.resolve() not in file.parents or not file.is_file():
                raise NotFound(f"no static file {path}")
            content = file.read_bytes()
            asset = Asset(path=path, content=content, digest=hashlib.sha256(content).hexdigest()[:16],
                          media_type=_TYPES.get(file.suffix, "application/octet-stream"))
            self._by_path[path] = asset
            self._by_hashed[asset.hashed_name] = asset
            return asset

    def by_hashed(self, hashed_name: str) -> Asset | None:
        with self._lock:
            found = self._by_hashed.get(hashed_name)
        if found is not None:
            return found
        p = PurePosixPath(hashed_name)  # a name not asked for by a page yet in this process: stem.DIGEST.ext
        stem, _, digest = p.stem.rpartition(".")
        if not stem or len(digest) != 16:
            return None
        try:
            asset = self.asset(str(p.with_name(stem + p.suffix)))
        except NotFound:
            return None
        return asset if asset.digest == digest else None


MANIFEST = _Manifest(STATIC_DIR)


def static_url(path: str) -> str:
    """The content-addressed URL of ``web/static/<path>``."""
    return MANIFEST.asset(path).url


def asset_for(hashed_name: str) -> Asset | None:
    return MANIFEST.by_hashed(hashed_name)

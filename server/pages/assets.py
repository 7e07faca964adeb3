"""The route of the content-addressed static files (:mod:`server.static_files` names and packs them)."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import Response

from server.services.errors import NotFound
from server.static_files import IMMUTABLE, PLOTTING_BUNDLE, STATIC_DIR, asset_for, static_url

__all__ = ["router", "static_url", "PLOTTING_BUNDLE", "STATIC_DIR"]

router = APIRouter(include_in_schema=False)


@router.get("/static/h/{name:path}")
def hashed_static(name: str, request: Request) -> Response:
    """A static file by its content-addressed name: cached for a year, gzip-compressed for clients that take it."""
    asset = asset_for(name)
    if asset is None:
        raise NotFound(f"no static file {name}")
    headers = {"Cache-Control": IMMUTABLE, "ETag": asset.etag, "Vary": "Accept-Encoding"}
    if asset.etag in request.headers.get("if-none-match", ""):
        return Response(status_code=304, headers=headers)
    packed = asset.gzipped() if "gzip" in request.headers.get("accept-encoding", "") else None
    if packed is not None:
        return Response(packed, media_type=asset.media_type, headers={**headers, "Content-Encoding": "gzip"})
    return Response(asset.content, media_type=asset.media_type, headers=headers)

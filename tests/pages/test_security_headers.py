"""Security headers on every page route (taken from the app's own route table), the API and errors;
pages carry no inline script, so the content security policy needs neither inline script nor eval."""

from __future__ import annotations

import hashlib
import re

import pytest

from server.app import CONTENT_SECURITY_POLICY
from server.pages.assets import PLOTTING_BUNDLE, STATIC_DIR, static_url
from tests.conftest import make_settings
from tests.test_route_matrix import all_routes
from tests.pages.helpers import log_in, seed_board

INLINE_SCRIPT = re.compile(r"<script(?![^>]*\bsrc=)(?![^>]*type=\"application/json\")[^>]*>", re.I)


def _headers_ok(response, *, policy: str | None = CONTENT_SECURITY_POLICY) -> None:
    h = response.headers
    assert h["x-frame-options"] == "DENY" and h["x-content-type-options"] == "nosniff"
    assert h["referrer-policy"] == "same-origin"
    csp = h["content-security-policy"]
    if policy is not None:
        assert csp == policy
    assert "frame-ancestors 'none'" in csp and "unsafe-eval" not in csp
    assert "'unsafe-inline'" not in csp.split("script-src", 1)[1].split(";", 1)[0]


def _filled(path: str, ids: dict) -> str:
    values = {"product_id": ids["product_id"], "board_id": ids["board_id"], "rail_id": ids["rail_ids"][0],
              "part_id": ids["part_id"]}
    return re.sub(r"\{(\w+)\}", lambda m: str(values.get(m.group(1), 1)), path)


def test_every_page_route_sends_the_security_headers_and_no_inline_script(app, client, people, session_factory):
    ids = seed_board(session_factory, analysed=1, unanalysed=0)
    log_in(client, app, people.ids["admin"])
    pages = sorted({path for method, path in all_routes(app) if method == "GET"
                    and not path.startswith(("/api/", "/static", "/docs", "/openapi"))})
    assert len(pages) > 15
    for path in pages:
        r = client.get(_filled(path, ids), follow_redirects=False)
        assert r.status_code < 500, (path, r.status_code)
        _headers_ok(r)
        if r.headers.get("content-type", "").startswith("text/html"):
            assert not INLINE_SCRIPT.search(r.text), f"{path} has an inline script"
            assert not re.search(r"\son[a-z]+=\"", r.text), f"{path} has an inline event handler"


def test_errors_the_api_static_files_and_the_login_page_send_them_too(client, people):
    for r in (client.get("/login"), client.get("/no-such-page"), client.get("/healthz"),
              client.get("/static/plots.js"), client.get("/api/v1/products", headers=people.headers("viewer")),
              client.get("/api/v1/products")):
        _headers_ok(r)
    assert "strict-transport-security" not in client.get("/login").headers


def test_the_api_docs_allow_their_own_inline_script_by_hash_only(client):
    r = client.get("/docs")
    _headers_ok(r, policy=None)
    assert re.search(r"script-src 'self' 'sha256-[A-Za-z0-9+/=]+'", r.headers["content-security-policy"])


@pytest.fixture
def secure_client(database_url):
    from fastapi.testclient import TestClient

    from server.app import create_app
    with TestClient(create_app(make_settings(database_url, cookie_secure=True))) as c:
        yield c


def test_secure_cookies_bring_strict_transport_security(secure_client):
    assert secure_client.get("/login").headers["strict-transport-security"].startswith("max-age=31536000")


def test_every_get_route_answers_head_as_its_get_without_a_body(app, client, people, session_factory):
    ids = seed_board(session_factory, analysed=1, unanalysed=0)
    log_in(client, app, people.ids["admin"])
    paths = sorted({path for method, path in all_routes(app) if method == "GET"})
    samples = {"/static": "/static/railsign.css", "/static/docs": "/static/docs/swagger-ui.css",
               "/static/h/{name}": static_url("plots.js")}
    for path in paths:
        url = samples.get(path) or _filled(path, ids)
        got, head = client.get(url, follow_redirects=False), client.head(url, follow_redirects=False)
        assert head.status_code == got.status_code, (path, head.status_code, got.status_code)
        assert head.content == b"", path
        assert head.headers.get("content-type") == got.headers.get("content-type"), path


def test_pages_come_compressed_with_a_csrf_token_masked_anew_in_each(app, client, people, session_factory):
    """A secret repeated unchanged in compressed bodies could be read off their sizes: the token differs
    in every response, never appears itself, and each masked copy is accepted back."""
    from server.csrf import unmasked

    csrf = log_in(client, app, people.ids["designer"])
    first, second = client.get("/account"), client.get("/account")
    assert first.headers["content-encoding"] == "gzip" and "accept-encoding" in first.headers["vary"].lower()
    tokens = [re.search(r'name="csrf_token" value="([^"]+)"', r.text).group(1) for r in (first, second)]
    assert tokens[0] != tokens[1] and csrf not in first.text and csrf not in second.text
    assert [unmasked(t) for t in tokens] == [csrf, csrf]
    made = client.post("/account/tokens", data={"name": "masked", "csrf_token": tokens[0]})
    assert made.status_code == 201
    forged = tokens[0][:-4] + ("AAAA" if not tokens[0].endswith("AAAA") else "BBBB")
    assert client.post("/account/tokens", data={"name": "forged", "csrf_token": forged}).status_code == 403


def test_the_plotting_script_comes_compressed_under_a_content_hashed_name(client):
    url = static_url(PLOTTING_BUNDLE)
    digest = hashlib.sha256((STATIC_DIR / PLOTTING_BUNDLE).read_bytes()).hexdigest()[:16]
    assert url == f"/static/h/vendor/plotly-basic.min.{digest}.js"
    plain = client.get(url, headers={"accept-encoding": "identity"})
    packed = client.get(url, headers={"accept-encoding": "gzip"})
    assert packed.headers["content-encoding"] == "gzip" and "content-encoding" not in plain.headers
    assert packed.headers["cache-control"] == "public, max-age=31536000, immutable"
    assert packed.headers["content-type"].startswith("application/javascript")
    assert "accept-encoding" in packed.headers["vary"].lower()
    assert client.get(url.replace(digest, "0" * 16)).status_code == 404  # another content: not this name
    assert int(packed.headers["content-length"]) < int(plain.headers["content-length"]) / 3
    assert packed.content == plain.content  # the client decodes it to the same script

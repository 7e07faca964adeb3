"""Cross-site request forgery protection, checked in one place for every route.

:func:`csrf_guard` is an app-wide dependency (``FastAPI(dependencies=[...])``), so a route
added later is covered without doing anything. A request that changes state (any method but
GET, HEAD, OPTIONS) must carry the CSRF token, as the ``csrf_token`` form field or the
``X-CSRF-Token`` header, when it is a form (every page form, the login form included) or when
it comes with a valid session cookie (cookie-authenticated API calls). API calls with
``Authorization: Bearer`` are exempt: a browser never adds that header on its own. The token
is the one inside the signed session cookie, or before login the one in the signed login
cookie set by the login page.

Pages and answers never show the token itself but a masked copy, new in every response
(:func:`masked`): a random pad followed by the token XOR the pad. Responses are compressed, and a
secret repeated unchanged in compressed bodies beside text an attacker can inject could be read
off their sizes; a masked copy differs every time. Both forms are accepted back.
"""

from __future__ import annotations

import base64
import hmac
import secrets

from fastapi import Request

from server.auth import LOGIN_CSRF_COOKIE, SESSION_COOKIE
from server.services.errors import CsrfFailed

__all__ = ["CSRF_FIELD", "CSRF_HEADER", "SAFE_METHODS", "expected_tokens", "csrf_guard", "masked", "unmasked"]

CSRF_FIELD = "csrf_token"
CSRF_HEADER = "X-CSRF-Token"
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
FORM_TYPES = ("application/x-www-form-urlencoded", "multipart/form-data")


def masked(token: str) -> str:
    """A copy of ``token`` for one response: pad + (token XOR pad), URL-safe base64; '' stays ''."""
    if not token:
        return ""
    raw = token.encode()
    pad = secrets.token_bytes(len(raw))
    return base64.urlsafe_b64encode(pad + bytes(a ^ b for a, b in zip(raw, pad))).decode()


def unmasked(sent: str) -> str | None:
    """The token inside a masked copy, or None when ``sent`` is not one."""
    try:
        data = base64.urlsafe_b64decode(sent.encode())
    except (ValueError, UnicodeError):
        return None
    if not data or len(data) % 2:
        return None
    half = len(data) // 2
    try:
        return bytes(a ^ b for a, b in zip(data[half:], data[:half])).decode()
    except UnicodeDecodeError:
        return None


def _session_token(request: Request) -> str | None:
    data = request.app.state.session_cookie.load(request.cookies.get(SESSION_COOKIE))
    token = data.get("csrf") if data else None
    return token if isinstance(token, str) and token else None


def expected_tokens(request: Request) -> list[str]:
    """The tokens this client was given: its session's and, before login, its login form's."""
    tokens = [_session_token(request),
              request.app.state.session_cookie.load_login_csrf(request.cookies.get(LOGIN_CSRF_COOKIE))]
    return [t for t in tokens if t]


async def _sent_token(request: Request, is_form: bool) -> str | None:
    sent = request.headers.get(CSRF_HEADER)
    if sent or not is_form:
        return sent
    try:
        value = (await request.form()).get(CSRF_FIELD)
    except Exception:  # a body that does not parse as a form carries no token
        return None
    return value if isinstance(value, str) else None


async def csrf_guard(request: Request) -> None:
    """Refuse a state-changing form or cookie-authenticated request without the right CSRF token (403)."""
    if request.method in SAFE_METHODS:
        return
    if request.headers.get("authorization", "").lower().startswith("bearer "):
        return
    content_type = request.headers.get("content-type", "").split(";")[0].strip().lower()
    is_form = content_type in FORM_TYPES
    if not is_form and _session_token(request) is None:
        return  # no form and no session: nothing a forged request could ride on; login is checked later
    sent = await _sent_token(request, is_form)
    expected = expected_tokens(request)
    candidates = [sent, unmasked(sent) or ""] if sent else []
    if not any(hmac.compare_digest(c.encode(), e.encode()) for c in candidates for e in expected):
        raise CsrfFailed("the request carries no valid CSRF token: reload the page and try again "
                         f"(API clients: send the {CSRF_HEADER} header, or use an API token)")

"""Logging in and out, session cookies, CSRF, throttling, and secrets kept out of the database and the logs."""

from __future__ import annotations

import hashlib
import logging
import time
from datetime import timedelta

import pytest
from fastapi.testclient import TestClient
from itsdangerous import TimestampSigner, URLSafeTimedSerializer
from sqlalchemy import select

from server.app import create_app
from server.credentials import password_fingerprint, verify_password
from server.models import ApiToken, AuditEntry, LoginThrottle, User, utcnow
from server.services import logins
from server.services import users as user_service
from server.services.access import Actor
from server.services.errors import TooManyRequests, Unauthenticated
from tests.conftest import TEST_SECRET, make_settings
from tests.signoff_support import csrf_from, log_in

PASSWORD = "tantalum-cap-417"


def _user(session_factory, name="dana", role="designer", password=PASSWORD, team="alpha"):
    with session_factory() as session:
        user = user_service.create_user(session=session, actor=Actor.system("test-setup"), username=name, role=role,
                                        password=password, teams=[team])
        return user.id


def _actions(session_factory, since_id=0) -> list[str]:
    with session_factory() as session:
        return list(session.scalars(select(AuditEntry.action).where(AuditEntry.id > since_id).order_by(AuditEntry.id)))


def _last_audit_id(session_factory) -> int:
    with session_factory() as session:
        return session.scalar(select(AuditEntry.id).order_by(AuditEntry.id.desc()).limit(1)) or 0


def test_the_login_page_is_plain_and_labelled(client):
    page = client.get("/login", params={"next": "/account"})
    assert page.status_code == 200
    html = page.text
    assert '<label for="username">' in html and 'id="username"' in html
    assert '<label for="password">' in html and 'type="password"' in html
    assert 'name="next" value="/account"' in html
    assert "<h1>" in html and "does not certify hardware" in html
    cookie = page.headers["set-cookie"]
    assert cookie.startswith("railsign_login_csrf=") and "HttpOnly" in cookie and "SameSite=lax" in cookie
    assert csrf_from(html)


def test_login_sets_a_signed_session_cookie_with_its_flags(client, session_factory):
    _user(session_factory)
    since = _last_audit_id(session_factory)
    r = log_in(client, "dana", PASSWORD, next_path="/account")
    assert r.status_code == 303 and r.headers["location"] == "/account"
    session_cookie = next(c for c in r.headers.get_list("set-cookie") if c.startswith("railsign_session="))
    flags = [part.strip() for part in session_cookie.split(";")]
    assert "HttpOnly" in flags and "SameSite=lax" in flags and "Path=/" in flags and "Max-Age=28800" in flags
    assert "Secure" not in flags
    me = client.get("/api/v1/me")
    assert me.status_code == 200 and me.json()["username"] == "dana" and me.json()["auth"] == "cookie"
    assert client.get("/account").status_code == 200
    again = client.get("/login", params={"next": "/account"}, follow_redirects=False)
    assert again.status_code == 303 and again.headers["location"] == "/account"
    assert _actions(session_factory, since) == ["login"]


def test_the_session_cookie_is_secure_when_configured(database_url, session_factory):
    _user(session_factory)
    app = create_app(make_settings(database_url, cookie_secure=True))
    with TestClient(app, base_url="https://testserver") as secure_client:  # Secure cookies travel over HTTPS only
        r = log_in(secure_client, "dana", PASSWORD)
    assert r.status_code == 303
    cookies = r.headers.get_list("set-cookie")
    assert any(c.startswith("railsign_session=") and "Secure" in c for c in cookies)


def test_a_session_expires(client, session_factory):
    """A cookie signed (with the app's own key) nine hours ago is past the eight-hour session."""
    user_id = _user(session_factory)
    with session_factory() as session:
        fingerprint = password_fingerprint(session.get(User, user_id).password_hash)

    class SignedLongAgo(TimestampSigner):
        def get_timestamp(self) -> int:
            return int(time.time()) - 9 * 3600

    payload = {"uid": user_id, "csrf": "t" * 32, "pw": fingerprint, "gen": 0}
    old = URLSafeTimedSerializer(TEST_SECRET, salt="railsign-session", signer=SignedLongAgo).dumps(payload)
    fresh = URLSafeTimedSerializer(TEST_SECRET, salt="railsign-session").dumps(payload)
    client.cookies.set("railsign_session", fresh)
    assert client.get("/api/v1/me").status_code == 200
    client.cookies.set("railsign_session", old)
    assert client.get("/api/v1/me").status_code == 401


def test_without_login_pages_redirect_and_the_api_answers_401(client):
    page = client.get("/account?tab=tokens", follow_redirects=False)
    assert page.status_code == 303 and page.headers["location"] == "/login?next=/account%3Ftab%3Dtokens"
    api = client.get("/api/v1/me")
    assert api.status_code == 401 and api.json()["error"]["code"] == "not_logged_in"
    assert api.headers["www-authenticate"] == "Bearer"
    client.cookies.set("railsign_session", "eyJ1aWQiOjF9.forged.signature")
    assert client.get("/api/v1/me").status_code == 401


def test_login_only_goes_on_to_a_local_path(client, session_factory):
    _user(session_factory)
    r = log_in(client, "dana", PASSWORD, next_path="//elsewhere.example/x")
    assert r.status_code == 303 and r.headers["location"] == "/"


def test_forms_without_a_valid_csrf_token_are_refused(client, session_factory):
    _user(session_factory)
    fresh = client.post("/login", data={"username": "dana", "password": PASSWORD}, follow_redirects=False)
    assert fresh.status_code == 403 and "CSRF" in fresh.text
    assert "railsign_session" not in fresh.headers.get("set-cookie", "")
    assert log_in(client, "dana", PASSWORD).status_code == 303
    token = csrf_from(client.get("/account").text)
    for data in ({"name": "ci"}, {"name": "ci", "csrf_token": "x" * 32}):
        refused = client.post("/account/tokens", data=data)
        assert refused.status_code == 403, refused.text
    multipart = client.post("/account/tokens", files={"name": (None, "ci")})
    assert multipart.status_code == 403
    assert client.post("/logout", data={}, follow_redirects=False).status_code == 403
    with session_factory() as session:
        assert session.scalars(select(ApiToken).where(ApiToken.name == "ci")).all() == []
    made = client.post("/account/tokens", data={"name": "ci", "csrf_token": token})
    assert made.status_code == 201 and "rsk_" in made.text
    out = client.post("/logout", data={"csrf_token": token}, follow_redirects=False)
    assert out.status_code == 303 and out.headers["location"] == "/login"
    assert client.get("/account", follow_redirects=False).status_code == 303


def test_cookie_authenticated_api_writes_need_the_csrf_header(client, session_factory):
    _user(session_factory)
    assert log_in(client, "dana", PASSWORD).status_code == 303
    body = {"name": "Cookie product"}
    refused = client.post("/api/v1/products", json=body)
    assert refused.status_code == 403 and refused.json()["error"]["code"] == "csrf_failed"
    plain_text = client.post("/api/v1/products", content='{"name": "x"}', headers={"content-type": "text/plain"})
    assert plain_text.status_code == 403
    token = client.get("/api/v1/me").json()["csrf_token"]
    assert client.post("/api/v1/products", json=body, headers={"X-CSRF-Token": "wrong"}).status_code == 403
    made = client.post("/api/v1/products", json=body, headers={"X-CSRF-Token": token})
    assert made.status_code == 201, made.text


def test_passwords_are_never_stored_or_logged_in_clear(database_url, session_factory, people, caplog):
    app = create_app(make_settings(database_url, sql_echo=True))
    wrong = "wrong-guess-mosfet-99"
    caplog.set_level(logging.DEBUG)
    with TestClient(app) as c:
        made = c.post("/api/v1/users", json={"username": "erin", "role": "reviewer", "password": PASSWORD,
                                             "teams": ["alpha"]}, headers=people.headers("admin"))
        assert made.status_code == 201, made.text
        assert log_in(c, "erin", wrong).status_code == 401
        assert log_in(c, "erin", PASSWORD).status_code == 303
        changed = c.patch(f"/api/v1/users/{made.json()['id']}", json={"password": wrong + "-new"},
                          headers=people.headers("admin"))
        assert changed.status_code == 200
    assert "INSERT INTO users" in caplog.text  # the SQL and its parameters were logged
    for secret in (PASSWORD, wrong, wrong + "-new"):
        assert secret not in caplog.text
    with session_factory() as session:
        stored = session.scalar(select(User.password_hash).where(User.username == "erin"))
        assert stored.startswith("$argon2id$") and PASSWORD not in stored
        assert verify_password(stored, wrong + "-new") and not verify_password(stored, PASSWORD)
        trail = " ".join(str(e.before) + str(e.after) + e.object_repr for e in session.scalars(select(AuditEntry)))
        for secret in (PASSWORD, wrong, wrong + "-new"):
            assert secret not in trail
        assert "'password': 'changed'" in trail


def test_a_new_password_ends_the_old_sessions(client, session_factory, people):
    user_id = _user(session_factory)
    assert log_in(client, "dana", PASSWORD).status_code == 303
    assert client.get("/api/v1/me").status_code == 200
    r = client.patch(f"/api/v1/users/{user_id}", json={"password": "another-pass-123"},
                     headers=people.headers("admin"))
    assert r.status_code == 200
    assert client.get("/api/v1/me").status_code == 401


def test_a_disabled_user_can_neither_log_in_nor_use_tokens(client, session_factory, people):
    user_id = _user(session_factory)
    since = _last_audit_id(session_factory)
    off = client.patch(f"/api/v1/users/{user_id}", json={"active": False}, headers=people.headers("admin"))
    assert off.status_code == 200 and off.json()["active"] is False
    assert log_in(client, "dana", PASSWORD).status_code == 401
    assert client.get("/api/v1/me", headers=people.headers("designer")).status_code == 200
    client.patch(f"/api/v1/users/{people.ids['designer']}", json={"active": False}, headers=people.headers("admin"))
    assert client.get("/api/v1/me", headers=people.headers("designer")).status_code == 401
    assert _actions(session_factory, since) == ["update", "login_failed", "update"]


def test_tokens_are_stored_hashed_shown_once_and_revoked_by_owner_or_admin(client, session_factory, people):
    since = _last_audit_id(session_factory)
    made = client.post("/api/v1/tokens", json={"name": "bench script"}, headers=people.headers("viewer"))
    assert made.status_code == 201, made.text
    clear = made.json()["token"]
    assert clear.startswith("rsk_") and made.headers["cache-control"] == "no-store"
    listed = client.get("/api/v1/tokens", headers=people.headers("viewer")).json()["items"]
    assert [t["name"] for t in listed] == ["tests", "bench script"]
    assert all("token" not in t for t in listed) and clear not in str(listed)
    with session_factory() as session:
        row = session.get(ApiToken, made.json()["id"])
        assert row.token_sha256 == hashlib.sha256(clear.encode()).hexdigest()
        everything = " ".join(str(v) for t in session.scalars(select(ApiToken)) for v in vars(t).values())
        everything += " ".join(str(e.after) for e in session.scalars(select(AuditEntry)))
        assert clear not in everything
    mine = {"Authorization": f"Bearer {clear}"}
    assert client.get("/api/v1/me", headers=mine).json()["username"] == "viewer"
    token_id = made.json()["id"]
    assert client.delete(f"/api/v1/tokens/{token_id}", headers=people.headers("designer")).status_code == 404
    assert client.post("/api/v1/tokens", json={"name": "x", "user_id": people.ids["viewer"]},
                       headers=people.headers("designer")).status_code == 403
    assert client.get("/api/v1/me", headers=mine).status_code == 200
    revoked = client.delete(f"/api/v1/tokens/{token_id}", headers=people.headers("viewer"))
    assert revoked.status_code == 200 and revoked.json()["revoked"] is True
    assert client.get("/api/v1/me", headers=mine).status_code == 401
    for_other = client.post("/api/v1/tokens", json={"name": "ops", "user_id": people.ids["viewer"]},
                            headers=people.headers("admin"))
    assert for_other.status_code == 201 and for_other.json()["user_id"] == people.ids["viewer"]
    assert client.delete(f"/api/v1/tokens/{for_other.json()['id']}", headers=people.headers("admin")).status_code == 200
    assert _actions(session_factory, since) == ["create", "revoke", "create", "revoke"]


# --- throttling ---------------------------------------------------------------------------


def test_the_slowdown_doubles_with_each_failure_up_to_sixteen_times():
    assert [logins.delay_s(n, 0.5) for n in range(7)] == [0.0, 0.5, 1.0, 2.0, 4.0, 8.0, 8.0]
    assert logins.delay_s(3, 0.0) == 0.0


def _attempt(session_factory, settings, username, password, address, now, waits):
    with session_factory() as session:
        return logins.log_in(session=session, settings=settings, username=username, password=password,
                             address=address, now=now, sleep=waits.append)


def test_failed_logins_on_one_account_are_slowed_then_refused_at_that_address_then_forgotten(
        database_url, session_factory):
    _user(session_factory)
    settings = make_settings(database_url, login_max_failures=3, login_lockout_s=60, login_slowdown_s=0.5)
    since = _last_audit_id(session_factory)
    now, waits = utcnow(), []
    for k in range(3):
        with pytest.raises(Unauthenticated) as failed:
            _attempt(session_factory, settings, "dana", "not-it", "10.0.0.1", now + timedelta(seconds=k), waits)
    assert "refused for 60 seconds" in failed.value.message
    assert waits == [0.5, 1.0]  # nothing before the first attempt, then doubling
    with pytest.raises(TooManyRequests) as refused:
        _attempt(session_factory, settings, "dana", PASSWORD, "10.0.0.1", now + timedelta(seconds=5), waits)
    assert 50 <= refused.value.extra["retry_after_s"] <= 60
    assert waits == [0.5, 1.0]  # a refused attempt is not even checked
    # the same account from another address is slowed (its account counter) but not refused
    user = _attempt(session_factory, settings, "dana", PASSWORD, "10.0.0.9", now + timedelta(seconds=6), waits)
    assert user.username == "dana" and waits == [0.5, 1.0, 2.0]
    user = _attempt(session_factory, settings, "dana", PASSWORD, "10.0.0.1", now + timedelta(seconds=70), waits)
    assert user.username == "dana"
    assert _actions(session_factory, since) == ["login_failed", "login_failed", "login_failed", "login_locked",
                                                "login_refused", "login", "login"]
    with session_factory() as session:
        account = session.scalar(select(LoginThrottle).where(LoginThrottle.key == "account:dana"))
        assert account.failures == 0 and account.last_failure_at is None


def test_failures_elsewhere_never_lock_a_named_account_out(database_url, session_factory):
    """Guesses at dana's password from many addresses slow her logins down but never refuse them."""
    _user(session_factory)
    settings = make_settings(database_url, login_max_failures=3, login_lockout_s=60)
    now, waits = utcnow(), []
    for k in range(9):
        with pytest.raises(Unauthenticated) as failed:
            _attempt(session_factory, settings, "dana", "guess", f"198.51.100.{k}", now, waits)
        assert "refused" not in failed.value.message
    assert _attempt(session_factory, settings, "dana", PASSWORD, "192.0.2.1", now, waits).username == "dana"


def test_failed_logins_from_one_address_lock_out_no_other_account(database_url, session_factory):
    _user(session_factory)
    settings = make_settings(database_url, login_max_failures=3, login_lockout_s=60, login_slowdown_s=0.5)
    now, waits = utcnow(), []
    for name in ("alice", "bob", "carol"):
        with pytest.raises(Unauthenticated):
            _attempt(session_factory, settings, name, "guess", "192.0.2.7", now, waits)
    assert waits == [0.5, 1.0]  # spraying over accounts from one address is slowed all the same
    assert _attempt(session_factory, settings, "dana", PASSWORD, "192.0.2.7", now, waits).username == "dana"
    for _ in range(2):
        with pytest.raises(Unauthenticated) as failed:
            _attempt(session_factory, settings, "alice", "guess", "192.0.2.7", now, waits)
    assert "refused for 60 seconds" in failed.value.message  # alice's third failure at this address
    with pytest.raises(TooManyRequests):
        _attempt(session_factory, settings, "alice", "guess", "192.0.2.7", now, waits)
    with session_factory() as session:
        entries = session.scalars(select(AuditEntry).where(AuditEntry.action.in_(
            ["login_failed", "login_locked", "login_refused"])).order_by(AuditEntry.id)).all()
        assert [e.action for e in entries] == ["login_failed"] * 5 + ["login_locked", "login_refused"]
        assert entries[0].after["reason"] == "unknown user" and entries[0].after["address"] == "192.0.2.7"
        assert entries[5].object_repr == "pair:alice@192.0.2.7"


def test_the_login_page_refuses_after_the_limit_and_every_process_agrees(database_url, session_factory):
    _user(session_factory)
    settings = make_settings(database_url, login_max_failures=2, login_lockout_s=120)
    with TestClient(create_app(settings)) as first:
        assert log_in(first, "dana", "nope-1").status_code == 401
        second_try = log_in(first, "dana", "nope-2")
        assert second_try.status_code == 401 and "refused for 2 minutes" in second_try.text
        locked = log_in(first, "dana", PASSWORD)
        assert locked.status_code == 429 and int(locked.headers["retry-after"]) > 100
        assert "Too many failed logins" in locked.text or "too many failed logins" in locked.text
    with TestClient(create_app(settings)) as other_process:  # a second web process reads the same counters
        assert log_in(other_process, "dana", PASSWORD).status_code == 429


def test_logout_ends_the_session_on_the_server(client, session_factory):
    """A copy of the cookie kept from before logout no longer opens a session; a new login does."""
    _user(session_factory)
    assert log_in(client, "dana", PASSWORD).status_code == 303
    kept = client.cookies.get("railsign_session")
    assert client.get("/api/v1/me").status_code == 200
    token = csrf_from(client.get("/account").text)
    assert client.post("/logout", data={"csrf_token": token}, follow_redirects=False).status_code == 303
    client.cookies.set("railsign_session", kept)
    assert client.get("/api/v1/me").status_code == 401
    assert client.get("/account", follow_redirects=False).status_code == 303
    client.cookies.clear()
    assert log_in(client, "dana", PASSWORD).status_code == 303
    assert client.get("/api/v1/me").json()["username"] == "dana"

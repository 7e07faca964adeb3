"""Schemathesis passes over the typed API, on the analysed demo data, as an admin and as a designer.

Schemathesis generates requests from the app's own OpenAPI description (valid ones and invalid
ones) for every operation. Every answer must keep the schema its operation declares for its
status, with the declared content type; every status must be one the operation declares; and
no request may end in a server error (an exception in the app, or a 5xx answer). The counts of
cases, operations, server errors and schema violations are printed, and both must be zero.

- ``test_no_answer_breaks_its_declared_schema``: a short pass in process (the app's own exceptions
  are raised, not turned into 500), part of the default run;
- ``test_a_long_pass_against_a_served_app``: at least 20,000 generated requests against the app
  served by uvicorn on a local port, marked stress: ``.venv/bin/python -m pytest -m stress
  tests/test_api_fuzz.py -s``.
"""

from __future__ import annotations

import socket
import sys
import threading
import time
from collections import Counter
from dataclasses import dataclass, field

import httpx
import pytest
import schemathesis
import uvicorn
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, Phase, given, settings
from schemathesis import GenerationMode
from schemathesis.checks import content_type_conformance, response_schema_conformance
from sqlalchemy import select

from server import migrate
from server.app import create_app
from server.demo import seed
from server.models import User
from server.services import rails, results, users
from server.services.access import Actor
from server.worker import run_analysis
from tests.conftest import make_settings

FUZZ_USERS = {"admin": "fuzz-admin", "designer": "fuzz-designer"}
SHORT_EXAMPLES = 2  # per operation, mode and role: about 450 requests, under a minute
LONG_EXAMPLES = 100  # per operation, mode and role: over 20,000 requests
OPERATIONS = 81
ANALYSED = 6  # demo rails given a stored result before the pass


@pytest.fixture(scope="module")
def demo_app(tmp_path_factory):
    """The demo scenario on a SQLite file, the head revisions of some rails analysed, and the users of the pass."""
    settings = make_settings(f"sqlite:///{tmp_path_factory.mktemp('fuzz') / 'railsign.db'}")
    migrate.upgrade(settings)
    app = create_app(settings)
    with app.state.sessionmaker() as s:
        seed(s)
        system = Actor.system("test")
        heads, _ = rails.list_rails(session=s, actor=system, limit=1000)
        options = results.normalize_options(results.NOMINAL_OPTIONS)
        for _, head in heads[:ANALYSED]:  # the others answer "no result yet"
            results.store_result(s, sha256=head.sha256, options=options, result=run_analysis(head.document, options),
                                 duration_s=0.1)
        for role, username in FUZZ_USERS.items():
            users.create_user(session=s, actor=system, username=username, role=role, password=None,
                              teams=["gateway-power"])
    yield app
    app.state.engine.dispose()


_TOKENS: dict[tuple[int, str], dict[str, str]] = {}


def _headers(app, role: str) -> dict[str, str]:
    """A token of the role's user, kept until a request may have revoked it or changed its user."""
    key = (id(app), role)
    if key not in _TOKENS:
        _TOKENS[key] = _fresh_headers(app, role)
    return _TOKENS[key]


def _after(app, role: str, method: str, status: int) -> None:
    """Forget the role's token after a change that succeeded (it may have revoked the token, demoted or
    deactivated its user) or an answer refusing the token."""
    if status == 401 or (method != "GET" and 200 <= status < 300):
        _TOKENS.pop((id(app), role), None)


def _fresh_headers(app, role: str) -> dict[str, str]:
    """A fresh token of the role's user, active again in its role."""
    with app.state.sessionmaker() as s:
        user = s.scalar(select(User).where(User.username == FUZZ_USERS[role]))
        user.role, user.active = role, True
        s.commit()
        _, token = users.create_token(session=s, actor=Actor.system("test"), username=FUZZ_USERS[role], name="fuzz")
    return {"Authorization": f"Bearer {token}"}


@dataclass
class Tally:
    cases: int = 0
    operations: set[str] = field(default_factory=set)
    by_status: Counter = field(default_factory=Counter)
    server_errors: list[str] = field(default_factory=list)
    violations: list[str] = field(default_factory=list)

    def summary(self) -> str:
        return (f"schemathesis: {self.cases} cases over {len(self.operations)} operations; "
                f"{len(self.server_errors)} server errors, {len(self.violations)} schema violations; "
                f"answers by status {dict(sorted(self.by_status.items()))}")


def _send(client: httpx.Client, case, headers: dict[str, str]) -> httpx.Response:
    kwargs = case.as_transport_kwargs(base_url=str(client.base_url), headers=headers)
    if "data" in kwargs:
        kwargs["content"] = kwargs.pop("data")
    kwargs.pop("cookies", None)
    return client.request(**kwargs)


def _judge(operation, case, response, tally: Tally) -> None:
    label = operation.label
    tally.by_status[response.status_code] += 1
    if response.status_code >= 500:
        tally.server_errors.append(f"{label}: {response.status_code} {response.text[:300]}")
    try:
        case.validate_response(response, checks=[response_schema_conformance, content_type_conformance])
    except Exception as exc:  # a schemathesis failure: the answer breaks its declared schema
        tally.violations.append(f"{label} {response.status_code}: {' '.join(str(exc).split())[:400]}")
    if str(response.status_code) not in operation.definition.raw["responses"]:
        tally.violations.append(f"{label} answered {response.status_code}, which it does not declare")


def _exercise(operation, mode: GenerationMode, client: httpx.Client, app, role: str, examples: int,
              tally: Tally) -> None:
    """Send generated requests of one operation as one role and judge each answer."""

    @given(case=operation.as_strategy(generation_mode=mode))
    @settings(max_examples=examples, deadline=None, derandomize=True, database=None, phases=[Phase.generate],
              suppress_health_check=list(HealthCheck))
    def run(case) -> None:
        tally.cases += 1
        if tally.cases % 1000 == 0:  # a long pass says how far it is
            print(f"{tally.cases} cases ({operation.label})", file=sys.stderr, flush=True)
        tally.operations.add(operation.label)
        try:
            response = _send(client, case, _headers(app, role))
        except Exception as exc:  # in process: the app's own exception while answering
            tally.server_errors.append(f"{operation.label}: {type(exc).__name__}: {exc}"[:400])
            return
        _after(app, role, case.method.upper(), response.status_code)
        _judge(operation, case, response, tally)

    run()


def _fuzz(app, client: httpx.Client, examples: int) -> Tally:
    schema = schemathesis.openapi.from_dict(app.openapi())
    operations = [result.ok() for result in schema.get_all_operations()]
    assert len(operations) == OPERATIONS
    tally = Tally()
    for operation in operations:
        raw = operation.definition.raw
        modes = [GenerationMode.POSITIVE]
        if raw.get("parameters") or raw.get("requestBody"):  # invalid requests: parameters or a body to spoil
            modes.append(GenerationMode.NEGATIVE)
        for role in FUZZ_USERS:
            for mode in modes:
                _exercise(operation, mode, client, app, role, examples, tally)
    print(tally.summary())
    return tally


def _assert_clean(tally: Tally, least_cases: int) -> None:
    assert tally.server_errors == [], "\n".join(tally.server_errors[:20])
    assert tally.violations == [], "\n".join(tally.violations[:20])
    assert tally.cases >= least_cases and len(tally.operations) == OPERATIONS, tally.summary()
    assert {200, 201, 204, 403, 404, 422} <= set(tally.by_status), tally.summary()


def test_no_answer_breaks_its_declared_schema(demo_app):
    with TestClient(demo_app) as client:
        tally = _fuzz(demo_app, client, SHORT_EXAMPLES)
    _assert_clean(tally, least_cases=400)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.stress
def test_a_long_pass_against_a_served_app(demo_app):
    port = _free_port()
    server = uvicorn.Server(uvicorn.Config(demo_app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started:
        assert time.monotonic() < deadline, "the server did not start"
        time.sleep(0.05)
    try:
        with httpx.Client(base_url=f"http://127.0.0.1:{port}", timeout=60) as client:
            tally = _fuzz(demo_app, client, LONG_EXAMPLES)
    finally:
        server.should_exit = True
        thread.join(timeout=30)
    _assert_clean(tally, least_cases=20_000)

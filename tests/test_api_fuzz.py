"""A short schemathesis pass over the typed API, in process, on the analysed demo data.

Schemathesis generates requests from the app's own OpenAPI description (valid ones and
invalid ones) for every operation, as an admin; every answer must keep the schema its
operation declares for its status, with the declared content type, and every status must be
one the operation declares. An answer that fails its response model is an exception in the
app and fails here; the one known server error (an id too large for the database's
integers, left to the hardening of the inputs) is counted, not judged. A longer run
against ``railsign serve`` is described in DEVELOPERS.md.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

import pytest
import schemathesis
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

FUZZ_ADMIN = "fuzz-admin"
EXAMPLES = 4  # per operation and mode: about 470 requests, well under a minute


@pytest.fixture(scope="module")
def demo_app(tmp_path_factory):
    """The demo scenario on a SQLite file, every rail's head revision analysed."""
    settings = make_settings(f"sqlite:///{tmp_path_factory.mktemp('fuzz') / 'railsign.db'}")
    migrate.upgrade(settings)
    app = create_app(settings)
    with app.state.sessionmaker() as s:
        seed(s)
        system = Actor.system("test")
        heads, _ = rails.list_rails(session=s, actor=system, limit=1000)
        options = results.normalize_options(results.NOMINAL_OPTIONS)
        for _, head in heads:
            results.store_result(s, sha256=head.sha256, options=options, result=run_analysis(head.document, options),
                                 duration_s=0.1)
        users.create_user(session=s, actor=system, username=FUZZ_ADMIN, role="admin", password=None,
                          teams=["gateway-power"])
    yield app
    app.state.engine.dispose()


def _admin_headers(app) -> dict[str, str]:
    """A fresh token of an active admin (a generated request may have revoked the last one, or demoted its user)."""
    with app.state.sessionmaker() as s:
        user = s.scalar(select(User).where(User.username == FUZZ_ADMIN))
        user.role, user.active = "admin", True
        s.commit()
        _, token = users.create_token(session=s, actor=Actor.system("test"), username=FUZZ_ADMIN, name="fuzz")
    return {"Authorization": f"Bearer {token}"}


# A server error the hardening of inputs is to remove (an id beyond the database's integers); any other
# exception raised while answering, a response that fails its model included, fails the test.
KNOWN_SERVER_ERRORS = (OverflowError,)


@dataclass
class Tally:
    cases: int = 0
    by_status: Counter = field(default_factory=Counter)
    server_errors: set[str] = field(default_factory=set)


def _send(client: TestClient, case, headers: dict[str, str]):
    """Send a generated request in process (the app's own exceptions are raised, not turned into 500)."""
    kwargs = case.as_transport_kwargs(base_url=str(client.base_url), headers=headers)
    if "data" in kwargs:
        kwargs["content"] = kwargs.pop("data")
    kwargs.pop("cookies", None)
    return client.request(**kwargs)


def _exercise(operation, mode: GenerationMode, client: TestClient, tally: Tally) -> None:
    """Send a few generated requests of one operation and judge each answer."""

    @given(case=operation.as_strategy(generation_mode=mode))
    @settings(max_examples=EXAMPLES, deadline=None, derandomize=True, database=None, phases=[Phase.generate],
              suppress_health_check=list(HealthCheck))
    def run(case) -> None:
        tally.cases += 1
        try:
            response = _send(client, case, _admin_headers(client.app))
        except KNOWN_SERVER_ERRORS:
            tally.server_errors.add(operation.label)
            return
        tally.by_status[response.status_code] += 1
        case.validate_response(response, checks=[response_schema_conformance, content_type_conformance])
        declared = set(operation.definition.raw["responses"])
        assert str(response.status_code) in declared, (
            f"{operation.label} answered {response.status_code}, which it does not declare")

    run()


def test_no_answer_breaks_its_declared_schema(demo_app):
    schema = schemathesis.openapi.from_asgi("/openapi.json", demo_app)
    operations = [result.ok() for result in schema.get_all_operations()]
    assert len(operations) == 64
    tally = Tally()
    with TestClient(demo_app) as client:
        for operation in operations:
            _exercise(operation, GenerationMode.POSITIVE, client, tally)
            raw = operation.definition.raw
            if raw.get("parameters") or raw.get("requestBody"):  # invalid requests: parameters or a body to spoil
                _exercise(operation, GenerationMode.NEGATIVE, client, tally)
    print(f"schemathesis: {tally.cases} cases, answers by status {dict(sorted(tally.by_status.items()))}, "
          f"known server errors in {sorted(tally.server_errors)}")
    statuses = set(tally.by_status)
    assert tally.cases >= 300 and {200, 201, 404, 422} <= statuses, tally

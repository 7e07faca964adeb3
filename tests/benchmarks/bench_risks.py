"""Benchmark of the risk view: server time of ``/products/{id}/risks``, ``/risks`` and ``/risks.csv`` for a
product with 5,000 rails on 25 boards of 200 (goal: under 300 ms); and of a reviewer's queue over the same
rails (``/api/v1/reviews/queue`` and the home page that shows it; goal: under 300 ms).

Run: ``python tests/benchmarks/bench_risks.py [--rails N] [--repeat N] [--engines sqlite postgres]``.

Seeding as ``bench_pages.py`` (rails through the rail service, a stored result per distinct design
given to every rail of it); on top, the sign-off as a busy product has it: a third of the rails
awaiting review, every tenth approved and then edited (its approval stale), every seventh with
a waiver of its current revision's worst problem check, and 30 days of daily snapshots. A second
reviewer is assigned to five of the boards (the rest of the rails awaiting review are the team queue). The
timings are the app's Server-Timing header through the ASGI test client in this process; the
first view of a day (which takes the snapshot) is timed apart.
"""

from __future__ import annotations

import argparse
import sys
import time
from datetime import timedelta
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from fastapi.testclient import TestClient  # noqa: E402
from sqlalchemy import delete, insert, select  # noqa: E402

from server.app import create_app  # noqa: E402
from server.auth import SESSION_COOKIE  # noqa: E402
from server.models import (AnalysisResult, Approval, Rail, RailState, ReviewAssignment, RiskSnapshot,  # noqa: E402
                           Waiver, utcnow)
from server.services import result_parts, users  # noqa: E402
from server.services.access import Actor  # noqa: E402
from tests.benchmarks.bench_pages import seed  # noqa: E402
from tests.benchmarks.common import database, server_time_s, settings_for, summary_ms  # noqa: E402


def sign_off_state(app, ids: dict) -> tuple[int, int]:
    """Workflow states, approvals (some stale), waivers, board assignments and 30 days of snapshots; returns the
    ids of the manager and of the assigned reviewer."""
    factory = app.state.sessionmaker
    now = utcnow()
    with factory() as s:
        system = Actor.system("bench")
        manager = users.create_user(session=s, actor=system, username="bench-manager", role="manager",
                                    password=None, teams=["bench-team"])
        reviewer = users.create_user(session=s, actor=system, username="bench-reviewer", role="reviewer",
                                     password=None, teams=["bench-team"])
        queued = users.create_user(session=s, actor=system, username="bench-reviewer2", role="reviewer",
                                   password=None, teams=["bench-team"])
        rails = s.execute(select(Rail.id, Rail.head_sha256).order_by(Rail.id)).all()
        checks = dict(s.execute(select(AnalysisResult.sha256, AnalysisResult.result["checks"])
                                .where(AnalysisResult.options["monte_carlo"].as_integer() == 0)).all())
        s.execute(delete(RailState).where(RailState.rail_id.in_([r.id for r in rails[::3]])))
        states, approvals, waivers = [], [], []
        for k, (rail_id, sha) in enumerate(rails):
            if k % 3 == 0:
                states.append({"rail_id": rail_id, "state": "awaiting review", "revision_n": 1, "since": now,
                               "changed_by": "bench"})
            if k % 10 == 0:
                approvals.append({"rail_id": rail_id, "revision_n": 0, "sha256": "0" * 64,
                                  "reviewer_id": reviewer.id, "reviewer_name": "bench-reviewer", "comment": "ok",
                                  "created_at": now, "stale_at": now, "stale_reason": "the rail changed after it"})
            problem = next((c for c in checks.get(sha) or [] if c.get("verdict") in ("fail", "marginal")), None)
            if k % 7 == 0 and problem is not None:
                waivers.append({"rail_id": rail_id, "revision_n": 1, "sha256": sha, "check_id": problem["id"],
                                "check_title": problem["title"], "verdict": problem["verdict"],
                                "reason": "bench capture attached", "reviewer_id": reviewer.id,
                                "reviewer_name": "bench-reviewer", "created_at": now})
        for table, rows in ((RailState, states), (Approval, approvals), (Waiver, waivers)):
            for a in range(0, len(rows), 500):
                s.execute(insert(table), rows[a:a + 500])
        s.execute(insert(ReviewAssignment), [{"reviewer_id": queued.id, "board_id": b, "rail_id": None,
                                              "assigned_by": "bench", "created_at": now}
                                             for b in ids["board_ids"][:5]])
        product_id = ids["product_id"]
        s.execute(insert(RiskSnapshot), [{"product_id": product_id, "day": now.date() - timedelta(days=d),
                                          "taken_at": now, "counts": {"failing_check": 100 + d, "rails": 5000}}
                                         for d in range(1, 31)])
        s.commit()
        print(f"  sign-off state: {len(states)} awaiting review, {len(approvals)} stale approvals, "
              f"{len(waivers)} waivers, 30 days of snapshots")
        return manager.id, queued.id


def queue_times(app, reviewer_id: int, repeat: int) -> None:
    """Server time of the reviewer's queue: the API answer and the home page that shows it."""
    cookie, _ = app.state.session_cookie.dump(reviewer_id)
    with TestClient(app) as client:
        client.cookies.set(SESSION_COOKIE, cookie)
        answer = client.get("/api/v1/reviews/queue")
        assert answer.status_code == 200, answer.text[:300]
        body = answer.json()
        print(f"  review queue: {body['totals']['assigned']} assigned (boards), {body['totals']['team']} in the team "
              f"queue; {len(body['assigned'])} + {len(body['team'])} shown with their changes")
        for label, path in (("review queue (API)", "/api/v1/reviews/queue"), ("reviewer's home page", "/")):
            times = []
            for _ in range(repeat):
                r = client.get(path)
                assert r.status_code == 200, (path, r.status_code)
                times.append(server_time_s(r))
            print(f"  {label:<28} {summary_ms(times)}   goal < 300 ms")


def server_times(app, ids: dict, manager_id: int, repeat: int) -> None:
    cookie, _ = app.state.session_cookie.dump(manager_id)
    pid = ids["product_id"]
    with TestClient(app) as client:
        client.cookies.set(SESSION_COOKIE, cookie)
        result_parts.clear()
        t0 = time.perf_counter()
        first = client.get(f"/products/{pid}/risks")
        cold = time.perf_counter() - t0
        assert first.status_code == 200, first.text[:300]
        first_s = server_time_s(first)
        timed = {}
        for label, path in (("product risk page", f"/products/{pid}/risks"), ("all products (/risks)", "/risks"),
                            ("filtered by board", f"/risks?board={ids['board_ids'][-1]}"),
                            ("only failing checks", "/risks?kind=failing_check"),
                            ("CSV export (5,000 rows)", f"/risks.csv?product={pid}&kind=")):
            times = []
            for _ in range(repeat):
                r = client.get(path)
                assert r.status_code == 200, (path, r.status_code)
                times.append(server_time_s(r))
            timed[label] = times
    print(f"  first view of the day, checks not yet cached: {first_s * 1000:.0f} ms server time "
          f"({cold * 1000:.0f} ms wall), snapshot taken")
    for label, times in timed.items():
        print(f"  {label:<28} {summary_ms(times)}   goal < 300 ms")


def run(engine_name: str, args: argparse.Namespace) -> None:
    with database(engine_name) as url:
        app = create_app(settings_for(url))
        print(f"{engine_name}:")
        ids = seed(app, args.rails)
        manager_id, reviewer_id = sign_off_state(app, ids)
        server_times(app, ids, manager_id, args.repeat)
        queue_times(app, reviewer_id, args.repeat)
        app.state.engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rails", type=int, default=5_000)
    parser.add_argument("--repeat", type=int, default=20)
    parser.add_argument("--engines", nargs="+", default=["sqlite", "postgres"], choices=["sqlite", "postgres"])
    args = parser.parse_args()
    for engine_name in args.engines:
        run(engine_name, args)


if __name__ == "__main__":
    main()

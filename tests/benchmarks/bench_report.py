"""Benchmark of the board sign-off report: server time of the report page and of its PDF for a
board of 200 rails, each with a stored result (start-up waveforms included) and an approval.

Run: ``python tests/benchmarks/bench_report.py [--rails N] [--repeat N] [--pdf-rails N] [--engines sqlite postgres]``.

1. The report page (HTML, Plotly figures of every analysed rail embedded): the app's own
   time (Server-Timing header) through the ASGI test client; goal under 1 s.
2. The PDF made on the server (ReportLab, matplotlib Agg plots of the stored arrays): wall
   time of the request, and its size and page count, for the same board or (``--pdf-rails``)
   a smaller one. Both also as the process's CPU time, which a busy shared machine disturbs less.

Seeding: rails are created through the rail service; the analysis runs once for each of a few
distinct designs and that stored result is given to every rail of the design.
"""

from __future__ import annotations

import argparse
import io
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

from fastapi.testclient import TestClient  # noqa: E402
from pypdf import PdfReader  # noqa: E402
from sqlalchemy import insert, select  # noqa: E402

from server.app import create_app  # noqa: E402
from server.auth import SESSION_COOKIE  # noqa: E402
from server.models import AnalysisResult, Approval, RailRevision, utcnow  # noqa: E402
from server.services import catalog, parts, rail_edits, results, users  # noqa: E402
from server.services.access import Actor  # noqa: E402
from server.worker import run_analysis  # noqa: E402
from tests.benchmarks.bench_pages import DESIGNS, _design  # noqa: E402
from tests.benchmarks.common import database, server_time_s, settings_for, summary_ms  # noqa: E402
from tests.factories import fet_doc, rail_doc  # noqa: E402


def seed(app, n_rails: int, small: int) -> dict:
    system = Actor.system("bench")
    t0 = time.perf_counter()
    with app.state.sessionmaker() as s:
        user = users.create_user(session=s, actor=system, username="bench", role="designer", password=None,
                                 teams=["bench-team"])
        reviewer = users.create_user(session=s, actor=system, username="bench-reviewer", role="reviewer",
                                     password=None, teams=["bench-team"])
        product = catalog.create_product(session=s, actor=system, name="Bench product", team_id=user.teams[0].id)
        part = parts.create_part(session=s, actor=system, document=fet_doc("Bench N30"))
        board = catalog.create_board(session=s, actor=system, product_id=product.id, name="Report board")
        small_board = catalog.create_board(session=s, actor=system, product_id=product.id, name="Small board")
        by_design: dict[int, list[tuple[int, str]]] = {}
        for k in range(n_rails + (small if small < n_rails else 0)):
            doc = rail_doc(f"RAIL_{k:05d}", **_design(k % DESIGNS))
            doc.pop("fet")
            rail, rev = rail_edits.create_rail(session=s, actor=system,
                                               board_id=board.id if k < n_rails else small_board.id, document=doc,
                                               part=rail_edits.PartRef(part.part_id))
            by_design.setdefault(k % DESIGNS, []).append((rail.id, rev.sha256))
        nominal = results.normalize_options(results.NOMINAL_OPTIONS)
        rows, approvals, now = [], [], utcnow()
        for d, pairs in by_design.items():
            sample = s.scalar(select(RailRevision).where(RailRevision.sha256 == pairs[0][1]))
            result = run_analysis(sample.document, nominal)
            for rail_id, sha in pairs:
                rows.append({"sha256": sha, "engine_version": results.engine_version(),
                             "options_key": results.options_key(nominal), "options": nominal,
                             "verdict": result["verdict"], "result": result, "duration_s": 0.1, "created_at": now})
                approvals.append({"rail_id": rail_id, "revision_n": 1, "sha256": sha, "reviewer_id": reviewer.id,
                                  "reviewer_name": reviewer.username, "comment": "checked the margins",
                                  "created_at": now, "stale_reason": ""})
        for a in range(0, len(rows), 100):
            s.execute(insert(AnalysisResult), rows[a:a + 100])
        s.execute(insert(Approval), approvals)
        s.commit()
        ids = {"user_id": user.id, "board_id": board.id, "small_board_id": small_board.id}
    print(f"  seeded {n_rails} rails with results in {time.perf_counter() - t0:.0f} s")
    return ids


def run(engine: str, n_rails: int, repeat: int, pdf_rails: int) -> None:
    print(f"{engine}:")
    with database(engine) as url:
        app = create_app(settings_for(url))
        ids = seed(app, n_rails, pdf_rails)
        cookie, _ = app.state.session_cookie.dump(ids["user_id"])
        with TestClient(app) as client:
            client.cookies.set(SESSION_COOKIE, cookie)
            page = f"/boards/{ids['board_id']}/report"
            first = client.get(page)
            assert first.status_code == 200, first.text[:300]
            times, cpu = [], []
            for _ in range(repeat):
                c0 = time.process_time()
                r = client.get(page)
                cpu.append(time.process_time() - c0)
                assert r.status_code == 200
                times.append(server_time_s(r))
            print(f"  report page, {n_rails} rails   {summary_ms(times)}   {len(first.content) / 1e6:.1f} MB   "
                  "goal < 1000 ms")
            print(f"    CPU time of the process   {summary_ms(cpu)}   (on a shared machine the wall time waits)")
            pdf_board = ids["board_id"] if pdf_rails >= n_rails else ids["small_board_id"]
            pdf_times, pdf_cpu = [], []
            for _ in range(max(1, repeat // 5)):
                t0, c0 = time.perf_counter(), time.process_time()
                r = client.get(f"/boards/{pdf_board}/report.pdf")
                pdf_times.append(time.perf_counter() - t0)
                pdf_cpu.append(time.process_time() - c0)
                assert r.status_code == 200
            pages = len(PdfReader(io.BytesIO(r.content)).pages)
            rails = min(pdf_rails, n_rails)
            print(f"  report PDF, {rails} rails    {summary_ms(pdf_times)}   {len(r.content) / 1e6:.1f} MB, "
                  f"{pages} pages")
            print(f"    CPU time of the process   {summary_ms(pdf_cpu)}   "
                  f"({1000 * min(pdf_cpu) / rails:.0f} ms per rail)")
        app.state.engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rails", type=int, default=200)
    parser.add_argument("--repeat", type=int, default=10)
    parser.add_argument("--pdf-rails", type=int, default=200, help="rails of the board whose PDF is timed")
    parser.add_argument("--engines", nargs="+", default=["sqlite"], choices=["sqlite", "postgres"])
    args = parser.parse_args()
    for engine in args.engines:
        run(engine, args.rails, args.repeat, args.pdf_rails)


if __name__ == "__main__":
    main()

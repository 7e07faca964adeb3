"""Benchmark of the pages: server time with 5,000 rails stored (and results for them), and
20 concurrent clients browsing a real uvicorn server.

Run: ``python tests/benchmarks/bench_pages.py [--rails N] [--clients N] [--seconds S]
[--engines sqlite postgres]``.

1. Server time (the app's Server-Timing header, through the ASGI test client in this
   process) of the rail page with all its plots (goal p95 under 100 ms) and of the board
   page (goal p95 under 300 ms), and of the other pages for comparison.
2. ``--clients`` clients (threads with their own HTTP connection) browsing a mix of pages
   for ``--seconds`` against ``railsign``'s app served by uvicorn in a separate process:
   client-side latency p50, p95, p99 and requests per second.

Seeding: rails are created through the rail service (so revisions, jobs and audit entries
are real); the analysis runs once for each of a few distinct designs and that stored result
is given to every rail of the design (same size and shape as a computed one), with a Monte
Carlo result on every fifth rail. Boards hold 200 rails each.
"""

from __future__ import annotations

import argparse
import os
import random
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))

import httpx  # noqa: E402
from fastapi.testclient import TestClient  # noqa: E402
from sqlalchemy import insert, select, update  # noqa: E402

from server.app import create_app  # noqa: E402
from server.auth import SESSION_COOKIE  # noqa: E402
from server.models import AnalysisResult, Job, RailRevision, utcnow  # noqa: E402
from server.services import catalog, parts, rail_edits, results, users  # noqa: E402
from server.services.access import Actor  # noqa: E402
from server.worker import run_analysis  # noqa: E402
from tests.benchmarks.common import SECRET, database, percentile, server_time_s, settings_for, summary_ms  # noqa: E402
from tests.factories import fet_doc, rail_doc  # noqa: E402

RAILS_PER_BOARD = 200
DESIGNS = 8
MC_EVERY = 5
MC_SAMPLES = 2000


def _design(k: int) -> dict:
    """One of a few distinct rail designs (a rail's own name and capacitance vary on top)."""
    variants = [
        {},
        {"load": {"c_nom": "1.5 mF", "c_tol": 0.2, "esr": "10 mOhm", "model": "constant_power", "i_nom": 2.0,
                  "v_on": 9.0}},
        {"switch": {"mode": "slew", "dvdt": "5 V/ms"}},
        {"switch": {"mode": "hard", "t_on": "50 us"}},
        {"switch": {"mode": "power_limit", "p_limit": 20.0, "i_limit": 6.0, "i_limit_tol": 0.1,
                    "timer": {"c": "47 nF", "c_tol": 0.1, "i_charge": "10 uA", "i_charge_tol": 0.1,
                              "v_trip": 1.2, "v_trip_tol": 0.05, "after_fault": "retry", "retry_off": 0.5}}},
        {"load": {"c_nom": "220uF", "c_tol": 0.1, "esr": "20 mOhm", "model": "constant_current", "i_nom": 1.0,
                  "v_on": 3.0}},
        {"environment": {"t_ambient": 70.0}},
        {"supply": {"v_min": 22.0, "v_nom": 24.0, "v_max": 26.0, "r_source": "50 mOhm", "l_source": "1 uH",
                    "i_max": 20.0, "uvlo": 18.0}},
    ]
    return variants[k % len(variants)]


def seed(app, n_rails: int) -> dict:
    system = Actor.system("bench")
    factory = app.state.sessionmaker
    t0 = time.perf_counter()
    with factory() as s:
        user = users.create_user(session=s, actor=system, username="bench", role="designer", password=None,
                                 teams=["bench-team"])
        team_id = user.teams[0].id
        product = catalog.create_product(session=s, actor=system, name="Bench product", team_id=team_id)
        part = parts.create_part(session=s, actor=system, document=fet_doc("Bench N30"))
        boards = [catalog.create_board(session=s, actor=system, product_id=product.id, name=f"Board {k:02d}").id
                  for k in range(max(1, n_rails // RAILS_PER_BOARD))]
        by_design: dict[int, list[str]] = {}
        rail_ids = []
        for k in range(n_rails):
            d = k % DESIGNS
            doc = rail_doc(f"RAIL_{k:05d}", **_design(d))
            doc.pop("fet")
            rail, rev = rail_edits.create_rail(session=s, actor=system, board_id=boards[k // RAILS_PER_BOARD % len(boards)],
                                          document=doc, part=rail_edits.PartRef(part.part_id))
            by_design.setdefault(d, []).append(rev.sha256)
            rail_ids.append(rail.id)
        created = time.perf_counter() - t0
        nominal = results.normalize_options(results.NOMINAL_OPTIONS)
        mc_options = results.normalize_options({"monte_carlo": MC_SAMPLES})
        version = results.engine_version()
        rows, now = [], utcnow()
        for d, shas in by_design.items():
            sample = s.scalar(select(RailRevision).where(RailRevision.sha256 == shas[0]))
            nominal_result = run_analysis(sample.document, nominal)
            mc_result = run_analysis(sample.document, mc_options)
            for j, sha in enumerate(shas):
                rows.append({"sha256": sha, "engine_version": version, "options_key": results.options_key(nominal),
                             "options": nominal, "verdict": nominal_result["verdict"], "result": nominal_result,
                             "duration_s": 0.1, "created_at": now})
                if j % MC_EVERY == 0:
                    rows.append({"sha256": sha, "engine_version": version,
                                 "options_key": results.options_key(mc_options), "options": mc_options,
                                 "verdict": mc_result["verdict"], "result": mc_result, "duration_s": 0.5,
                                 "created_at": now})
        for a in range(0, len(rows), 500):
            s.execute(insert(AnalysisResult), rows[a:a + 500])
        s.execute(update(Job).values(state="done", progress=1.0, finished_at=now))
        s.commit()
    print(f"  seeded {n_rails} rails on {len(boards)} boards in {created:.0f} s, results in "
          f"{time.perf_counter() - t0 - created:.0f} s")
    return {"user_id": user.id, "product_id": product.id, "board_ids": boards, "rail_ids": rail_ids,
            "part_id": part.part_id}


def _get(client, path: str) -> float:
    r = client.get(path)
    assert r.status_code == 200, (path, r.status_code, r.text[:300])
    return server_time_s(r)


def server_times(app, ids: dict, repeat: int) -> None:
    cookie, _ = app.state.session_cookie.dump(ids["user_id"])
    rng = random.Random(1)
    with TestClient(app) as client:
        client.cookies.set(SESSION_COOKIE, cookie)
        for path in ("/", f"/rails/{ids['rail_ids'][0]}", f"/boards/{ids['board_ids'][0]}"):
            _get(client, path)  # warm up: templates compiled, connections open
        rail = [_get(client, f"/rails/{rng.choice(ids['rail_ids'])}") for _ in range(repeat)]
        board = [_get(client, f"/boards/{ids['board_ids'][k % len(ids['board_ids'])]}") for k in range(repeat // 2)]
        product = [_get(client, f"/products/{ids['product_id']}") for _ in range(20)]
        history = [_get(client, f"/rails/{rng.choice(ids['rail_ids'])}/history") for _ in range(repeat // 4)]
        part = [_get(client, f"/parts/{ids['part_id']}") for _ in range(20)]
        home = [_get(client, "/") for _ in range(20)]
    print(f"  rail page with plots      {summary_ms(rail)}   goal p95 < 100 ms")
    print(f"  board page ({RAILS_PER_BOARD} rails)    {summary_ms(board)}   goal p95 < 300 ms")
    print(f"  product overview          {summary_ms(product)}")
    print(f"  rail history              {summary_ms(history)}")
    print(f"  part page (all users)     {summary_ms(part)}")
    print(f"  home                      {summary_ms(home)}")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _pick(rng: random.Random, ids: dict) -> str:
    x = rng.random()
    if x < 0.5:
        return f"/rails/{rng.choice(ids['rail_ids'])}"
    if x < 0.7:
        return f"/boards/{rng.choice(ids['board_ids'])}"
    if x < 0.8:
        return f"/rails/{rng.choice(ids['rail_ids'])}/history"
    if x < 0.9:
        return f"/products/{ids['product_id']}"
    if x < 0.95:
        return f"/parts/{ids['part_id']}"
    return "/"


def concurrent(url: str, app, ids: dict, clients: int, seconds: float, web_workers: int) -> None:
    port = _free_port()
    env = {**os.environ, "RAILSIGN_DATABASE_URL": url, "RAILSIGN_SECRET_KEY": SECRET, "RAILSIGN_WORKER_THREADS": "0"}
    server = subprocess.Popen([sys.executable, "-m", "uvicorn", "server.app:create_app", "--factory", "--host",
                               "127.0.0.1", "--port", str(port), "--workers", str(web_workers), "--log-level",
                               "warning", "--no-access-log"], cwd=REPO, env=env)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 30
        while True:
            try:
                if httpx.get(base + "/healthz", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            assert time.monotonic() < deadline, "the server did not start"
            time.sleep(0.2)
        cookie, _ = app.state.session_cookie.dump(ids["user_id"])
        latencies: list[float] = []
        server_ms: list[float] = []
        errors: list[str] = []
        lock = threading.Lock()
        start = threading.Event()

        def browse(k: int) -> None:
            rng = random.Random(100 + k)
            mine: list[float] = []
            theirs: list[float] = []
            with httpx.Client(base_url=base, cookies={SESSION_COOKIE: cookie}, timeout=30) as c:
                c.get(f"/rails/{ids['rail_ids'][k]}")  # its connection is open before the clock starts
                start.wait()
                end = time.monotonic() + seconds
                while time.monotonic() < end:
                    path = _pick(rng, ids)
                    t0 = time.perf_counter()
                    r = c.get(path)
                    mine.append(time.perf_counter() - t0)
                    theirs.append(server_time_s(r) * 1000)
                    if r.status_code != 200:
                        with lock:
                            errors.append(f"{path}: {r.status_code}")
            with lock:
                latencies.extend(mine)
                server_ms.extend(theirs)

        threads = [threading.Thread(target=browse, args=(k,)) for k in range(clients)]
        for t in threads:
            t.start()
        time.sleep(1.0)
        t0 = time.perf_counter()
        start.set()
        for t in threads:
            t.join()
        wall = time.perf_counter() - t0
        ms = [v * 1000 for v in latencies]
        print(f"  {clients} clients, {web_workers} web process{'es' if web_workers > 1 else ''}, {seconds:.0f} s: "
              f"p50 {percentile(ms, 50):.1f} ms  p95 {percentile(ms, 95):.1f} ms  p99 {percentile(ms, 99):.1f} ms  "
              f"{len(ms) / wall:.1f} requests/s  (n={len(ms)}, errors={len(errors)})")
        print(f"    server time under that load: p50 {percentile(server_ms, 50):.1f} ms  "
              f"p95 {percentile(server_ms, 95):.1f} ms  p99 {percentile(server_ms, 99):.1f} ms "
              "(inside the app: the requests in flight share the processes' CPU time, and the clients run on "
              "the same cores)")
        if errors:
            print("   first errors:", errors[:5])
    finally:
        server.terminate()
        server.wait(timeout=30)


def run(engine_name: str, args: argparse.Namespace) -> None:
    with database(engine_name) as url:
        app = create_app(settings_for(url))
        print(f"{engine_name}:")
        ids = seed(app, args.rails)
        server_times(app, ids, args.repeat)
        for workers in args.web_workers:
            concurrent(url, app, ids, args.clients, args.seconds, workers)
        app.state.engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rails", type=int, default=5_000)
    parser.add_argument("--repeat", type=int, default=200)
    parser.add_argument("--clients", type=int, default=20)
    parser.add_argument("--seconds", type=float, default=20.0)
    parser.add_argument("--web-workers", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--engines", nargs="+", default=["sqlite", "postgres"], choices=["sqlite", "postgres"])
    args = parser.parse_args()
    for engine_name in args.engines:
        run(engine_name, args)


if __name__ == "__main__":
    main()

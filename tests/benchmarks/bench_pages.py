"""Benchmark of the pages: server time with 5,000 rails stored (and results for them), and a native HTTP
load generator (wrk, from Debian's packages) against real served processes.

Run: ``python tests/benchmarks/bench_pages.py [--rails N] [--seconds S] [--connections N]
[--engines sqlite postgres] [--before PATH]``.

1. In this process (the ASGI test client; the app's own Server-Timing header): the product overview
   with all the rails (goal under 50 ms), the rail and board pages, each drawn afresh (the page cache
   emptied before each request) and as kept; the session check alone (``current_actor``, goal under
   1 ms) and ``/api/v1/me``.
2. wrk with ``--connections`` connections for ``--seconds`` per target (the issue's final figures: 60 s)
   against ``railsign``'s app served by uvicorn: SQLite with one web process, PostgreSQL with two.
   Targets: the rail page (the rails of the first board in turn, each page drawn once before the
   clock starts, so kept pages are measured; and all the rails in turn, mostly drawn afresh), the
   board page, the product overview, ``/api/v1/me`` (all with a session cookie), ``/login`` without
   one and ``/healthz``. Printed: requests/s, p50/p95/p99 latency, errors and non-2xx answers.
3. The previous method in the same run: ``--connections`` Python threads with their own HTTP
   connection against the same server and targets (for ``--thread-seconds``), and the ratio of the
   two. Threads share the two cores with the server, so they measure much of their own cost.
4. With ``--before PATH`` (a source tree of an earlier version, e.g. ``git archive REV | tar -x -C
   PATH``), the same wrk targets against that version served on the same database, side by side.

Without wrk the load part is skipped with a message saying how to install it (``scripts/test-setup``).

Seeding: rails are created through the rail service (so revisions, jobs and audit entries
are real); the analysis runs once for each of a few distinct designs and that stored result
is given to every rail of the design (same size and shape as a computed one), with a Monte
Carlo result on every fifth rail. Boards hold 200 rails each.
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
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
from tests.benchmarks.common import (SECRET, database, percentile, server_time_s, settings_for,  # noqa: E402
                                     summary_ms, timed)
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


def _session_check_s(app, user_id: int, repeat: int = 2000) -> list[float]:
    """The session dependency alone (cookie to Actor), called in this process."""
    from starlette.requests import Request

    from server.auth import current_actor

    cookie, _ = app.state.session_cookie.dump(user_id)
    header = [(b"cookie", f"{SESSION_COOKIE}={cookie}".encode())]

    def once() -> None:
        current_actor(Request({"type": "http", "method": "GET", "path": "/", "query_string": b"", "app": app,
                               "state": {}, "headers": header}))
    for _ in range(200):
        once()
    return timed(once, repeat)


def server_times(app, ids: dict, repeat: int) -> dict[str, list[float]]:
    """Server time in this process: pages drawn afresh (caches emptied first) and as kept, the session check."""
    from server.pages import rails as rail_pages

    cookie, _ = app.state.session_cookie.dump(ids["user_id"])
    rng = random.Random(1)
    out: dict[str, list[float]] = {}

    def fresh(client, path: str) -> float:
        app.state.page_cache.pages.clear()
        rail_pages.RENDERED.clear()
        return _get(client, path)

    with TestClient(app) as client:
        client.cookies.set(SESSION_COOKIE, cookie)
        for path in ("/", f"/rails/{ids['rail_ids'][0]}", f"/boards/{ids['board_ids'][0]}"):
            _get(client, path)  # warm up: templates compiled, connections open
        product = f"/products/{ids['product_id']}"
        out["product overview, drawn afresh"] = [fresh(client, product) for _ in range(20)]
        out["product overview, kept"] = [_get(client, product) for _ in range(repeat)]
        out["rail page, drawn afresh"] = [fresh(client, f"/rails/{rng.choice(ids['rail_ids'])}")
                                          for _ in range(repeat // 4)]
        first_board = ids["rail_ids"][:RAILS_PER_BOARD]
        for r in first_board[:50]:
            _get(client, f"/rails/{r}")
        out["rail page, kept"] = [_get(client, f"/rails/{rng.choice(first_board[:50])}") for _ in range(repeat)]
        out["board page, drawn afresh"] = [fresh(client, f"/boards/{ids['board_ids'][k % len(ids['board_ids'])]}")
                                           for k in range(10)]
        out["board page, kept"] = [_get(client, f"/boards/{ids['board_ids'][0]}") for _ in range(repeat)]
        out["/api/v1/me"] = [_get(client, "/api/v1/me") for _ in range(repeat)]
    out["session check (current_actor)"] = _session_check_s(app, ids["user_id"])
    goals = {"product overview, drawn afresh": "goal < 50 ms", "session check (current_actor)": "goal < 1 ms"}
    print("  server time in this process (Server-Timing; 'drawn afresh': page and result caches emptied first)")
    for name, values in out.items():
        print(f"    {name:<32} {summary_ms(values)}   {goals.get(name, '')}")
    return out


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def targets(ids: dict) -> list[tuple[str, list[str], bool]]:
    """(name, paths taken in turn, with the session cookie) of the load targets."""
    first_board = ids["rail_ids"][:RAILS_PER_BOARD]
    return [
        ("rail page (200 rails of a board)", [f"/rails/{r}" for r in first_board], True),
        (f"rail page (all {len(ids['rail_ids'])} rails)",
         [f"/rails/{r}" for r in random.Random(7).sample(ids["rail_ids"], len(ids["rail_ids"]))], True),
        ("board page", [f"/boards/{b}" for b in ids["board_ids"]], True),
        ("product overview", [f"/products/{ids['product_id']}"], True),
        ("/api/v1/me", ["/api/v1/me"], True),
        ("/login (no session)", ["/login"], False),
        ("/healthz", ["/healthz"], False),
    ]


WRK_SCRIPT = """
local paths = {%s}
local n = 0
local offset = 0
setup = function(thread) thread:set("offset", math.random(#paths)) end
init = function(args) offset = tonumber(wrk.thread:get("offset") or 0) or 0 end
request = function()
  n = n + 1
  return wrk.format("GET", paths[((n + offset) %% #paths) + 1])
end
done = function(summary, latency, requests)
  local e = summary.errors
  io.write(string.format("RESULT %%d %%d %%d %%d %%d %%d %%d\\n", summary.requests, summary.duration,
    latency:percentile(50), latency:percentile(95), latency:percentile(99),
    e.connect + e.read + e.write + e.timeout, e.status))
end
"""


def wrk(base: str, paths: list[str], cookie: str | None, connections: int, seconds: float) -> dict[str, float]:
    """One wrk run (2 threads, ``connections`` connections, gzip accepted as browsers do)."""
    with tempfile.NamedTemporaryFile("w", suffix=".lua", delete=False) as f:
        f.write(WRK_SCRIPT % ", ".join(f'"{p}"' for p in paths))
        script = f.name
    cmd = ["wrk", "-t2", f"-c{connections}", f"-d{max(1, round(seconds))}s", "--timeout", "10s", "-s", script,
           "-H", "Accept-Encoding: gzip", "-H", "Accept: text/html,application/json"]
    if cookie:
        cmd += ["-H", f"Cookie: {SESSION_COOKIE}={cookie}"]
    try:
        out = subprocess.run(cmd + [base + paths[0]], capture_output=True, text=True, check=True).stdout
    finally:
        os.unlink(script)
    line = next(x for x in out.splitlines() if x.startswith("RESULT "))
    n, duration_us, p50, p95, p99, errors, non2xx = (int(v) for v in line.split()[1:])
    return {"rps": n / (duration_us / 1e6), "p50": p50 / 1000, "p95": p95 / 1000, "p99": p99 / 1000,
            "errors": errors, "non2xx": non2xx, "n": n}


def threads_method(base: str, paths: list[str], cookie: str | None, clients: int, seconds: float) -> dict[str, float]:
    """The previous method: ``clients`` Python threads, each with its own HTTP connection, on the same cores."""
    latencies: list[float] = []
    lock, start = threading.Lock(), threading.Event()

    def browse(k: int) -> None:
        mine = []
        with httpx.Client(base_url=base, cookies={SESSION_COOKIE: cookie} if cookie else None, timeout=30) as c:
            c.get(paths[k % len(paths)])
            start.wait()
            end, i = time.monotonic() + seconds, k
            while time.monotonic() < end:
                i += 1
                t0 = time.perf_counter()
                c.get(paths[i % len(paths)])
                mine.append(time.perf_counter() - t0)
        with lock:
            latencies.extend(mine)

    threads = [threading.Thread(target=browse, args=(k,)) for k in range(clients)]
    for t in threads:
        t.start()
    time.sleep(0.5)
    t0 = time.perf_counter()
    start.set()
    for t in threads:
        t.join()
    wall = time.perf_counter() - t0
    ms = [v * 1000 for v in latencies]
    return {"rps": len(ms) / wall, "p50": percentile(ms, 50), "p95": percentile(ms, 95), "p99": percentile(ms, 99)}


def serve(tree: Path, url: str, workers: int) -> tuple[subprocess.Popen, str]:
    """The app of source tree ``tree`` served by uvicorn (no analysis workers), once it answers."""
    port = _free_port()
    env = {**os.environ, "RAILSIGN_DATABASE_URL": url, "RAILSIGN_SECRET_KEY": SECRET, "RAILSIGN_WORKER_THREADS": "0",
           "PYTHONPATH": str(tree), "RAILSIGN_LOG_LEVEL": "WARNING"}
    server = subprocess.Popen([sys.executable, "-m", "uvicorn", "server.app:create_app", "--factory", "--host",
                               "127.0.0.1", "--port", str(port), "--workers", str(workers), "--log-level",
                               "warning", "--no-access-log"], cwd=tree, env=env)
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    while True:
        try:
            if httpx.get(base + "/healthz", timeout=1).status_code == 200:
                return server, base
        except httpx.HTTPError:
            pass
        if time.monotonic() > deadline:
            server.terminate()
            raise RuntimeError("the server did not start")
        time.sleep(0.2)


def _warm(base: str, paths: list[str], cookie: str | None, workers: int) -> None:
    """Every path asked for a few times over fresh connections (so each web process draws it once)."""
    for _ in range(2 * workers):
        with httpx.Client(base_url=base, cookies={SESSION_COOKIE: cookie} if cookie else None, timeout=60) as c:
            for path in paths:
                c.get(path, headers={"Connection": "close"})


def load(url: str, ids: dict, cookie: str, trees: dict[str, Path], workers: int,
         args: argparse.Namespace) -> dict[str, dict[str, dict]]:
    """wrk on every target against the app of each source tree, taken in turn target by target (so that
    both versions meet the same load of the machine), and the Python-thread method on the current one."""
    served = {label: serve(tree, url, workers) for label, tree in trees.items()}
    out: dict[str, dict[str, dict]] = {label: {} for label in trees}
    try:
        for name, paths, with_cookie in targets(ids):
            if args.targets and not any(name.startswith(t) for t in args.targets):
                continue
            c = cookie if with_cookie else None
            for label, (_, base) in served.items():
                if label == "now" and len(paths) <= RAILS_PER_BOARD:  # each page drawn once before the clock starts
                    _warm(base, paths, c, workers)
                wrk(base, paths, c, args.connections, 2)  # warm-up, not counted: templates, connections, caches
                out[label][name] = {"wrk": wrk(base, paths, c, args.connections, args.seconds)}
            if not args.no_threads and name.startswith(("rail page (200", "board page", "product overview")):
                out["now"][name]["threads"] = threads_method(served["now"][1], paths, c, args.connections,
                                                             args.thread_seconds)
    finally:
        for server, _ in served.values():
            server.terminate()
            server.wait(timeout=30)
    return out


def _row(name: str, now: dict, before: dict | None) -> str:
    w = now["wrk"]
    text = (f"    {name:<34} {w['rps']:8.1f}/s  p50 {w['p50']:7.1f}  p95 {w['p95']:7.1f}  p99 {w['p99']:7.1f} ms"
            f"  errors {w['errors']}, non-2xx {w['non2xx']}")
    if before is not None:
        b = before["wrk"]
        text += (f"  | before {b['rps']:7.1f}/s p50 {b['p50']:7.1f} p95 {b['p95']:7.1f} p99 {b['p99']:7.1f} ms"
                 f" non-2xx {b['non2xx']}  (x{w['rps'] / b['rps']:.1f})")
    if "threads" in now:
        t = now["threads"]
        text += (f"\n      Python threads (previous method): {t['rps']:7.1f}/s  p50 {t['p50']:7.1f}  p95 {t['p95']:7.1f}"
                 f" ms; wrk/threads requests/s ratio {w['rps'] / t['rps']:.2f}")
    return text


def run(engine_name: str, args: argparse.Namespace) -> None:
    with database(engine_name) as url:
        app = create_app(settings_for(url))
        print(f"{engine_name}:")
        ids = seed(app, args.rails)
        server_times(app, ids, args.repeat)
        cookie, _ = app.state.session_cookie.dump(ids["user_id"])
        app.state.engine.dispose()
        if shutil.which("wrk") is None:
            print("  load part skipped: wrk is not installed (Debian package 'wrk': scripts/test-setup installs it, "
                  "or apt-get install wrk)")
            return
        workers = 1 if engine_name == "sqlite" else 2
        print(f"  wrk, {args.connections} connections, {args.seconds:.0f} s per target, {workers} web "
              f"process{'es' if workers > 1 else ''} (2 cores shared by server and load generator)")
        trees = {"now": REPO, **({"before": Path(args.before)} if args.before else {})}
        measured = load(url, ids, cookie, trees, workers, args)
        for name, now in measured["now"].items():
            print(_row(name, now, measured.get("before", {}).get(name)))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rails", type=int, default=5_000)
    parser.add_argument("--repeat", type=int, default=200)
    parser.add_argument("--connections", type=int, default=20)
    parser.add_argument("--seconds", type=float, default=60.0, help="wrk duration per target")
    parser.add_argument("--thread-seconds", type=float, default=10.0,
                        help="duration of the Python-thread method per page")
    parser.add_argument("--no-threads", action="store_true", help="leave out the Python-thread method")
    parser.add_argument("--targets", nargs="+", help="only the load targets whose names start so ('rail page', ...)")
    parser.add_argument("--before", help="source tree of an earlier version, served on the same database")
    parser.add_argument("--engines", nargs="+", default=["sqlite", "postgres"], choices=["sqlite", "postgres"])
    args = parser.parse_args()
    for engine_name in args.engines:
        run(engine_name, args)


if __name__ == "__main__":
    main()

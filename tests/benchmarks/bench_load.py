"""Load test: a served railsign (``railsign serve``, a real process) under a team's mixed traffic for
minutes on end; latency percentiles, errors and the web process's memory growth.

Run: ``python tests/benchmarks/bench_load.py [--minutes 5] [--clients 20] [--engine sqlite|postgres]
[--rails 200]``.

Seeding as ``bench_pages.py``. Each client is a person working through the pages and the API with
its own session: rail pages, board pages, the product overview, rail histories, rail documents by the
API, and now and then a save of a rail (from the revision it read; a 409 is merged and saved again,
a 503 honours Retry-After). Resident memory (VmRSS of the server and its children) is read every
10 s; growth is the last minute's mean over the first minute's. Clients run as threads of this
process, on the same two cores as the server: their own cost is part of the latency measured.
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

from server.app import create_app  # noqa: E402
from tests.benchmarks.bench_pages import seed  # noqa: E402
from tests.benchmarks.common import SECRET, database, percentile, settings_for  # noqa: E402


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _rss_kib(pid: int) -> int:
    """Resident memory of a process and its children, KiB."""
    total = 0
    pids = [pid]
    try:
        pids += [int(p) for p in Path(f"/proc/{pid}/task/{pid}/children").read_text().split()]
    except OSError:
        pass
    for p in pids:
        try:
            for line in Path(f"/proc/{p}/status").read_text().splitlines():
                if line.startswith("VmRSS:"):
                    total += int(line.split()[1])
        except OSError:
            pass
    return total


def _client(base: str, cookie: str, token: str, ids: dict, stop: threading.Event, seed_: int,
            out: list, lock: threading.Lock) -> None:
    rng = random.Random(seed_)
    rails, boards, product = ids["rail_ids"], ids["board_ids"], ids["product_id"]
    api = {"Authorization": f"Bearer {token}"}
    with httpx.Client(base_url=base, cookies={"railsign_session": cookie}, timeout=60) as c:
        while not stop.is_set():
            roll = rng.random()
            rail = rng.choice(rails)
            t0 = time.perf_counter()
            if roll < 0.35:
                kind, r = "rail page", c.get(f"/rails/{rail}")
            elif roll < 0.55:
                kind, r = "board page", c.get(f"/boards/{rng.choice(boards)}")
            elif roll < 0.65:
                kind, r = "product page", c.get(f"/products/{product}")
            elif roll < 0.72:
                kind, r = "rail history", c.get(f"/rails/{rail}/history")
            elif roll < 0.95:
                kind, r = "API rail", c.get(f"/api/v1/rails/{rail}", headers=api)
            else:
                kind = "API save"
                read = c.get(f"/api/v1/rails/{rail}", headers=api)
                if read.status_code != 200:  # busy: the read before the save is counted as an API read
                    with lock:
                        out.append(("API rail", read.status_code, time.perf_counter() - t0))
                    time.sleep(float(read.headers.get("retry-after", "1")))
                    continue
                current = read.json()
                doc = current["document"]
                doc["load"]["c_nom"] = rng.randint(100, 2000) * 1e-6
                t0 = time.perf_counter()
                r = c.put(f"/api/v1/rails/{rail}", json={"document": doc, "base_revision": current["head"]["n"]},
                          headers=api)
            elapsed = time.perf_counter() - t0
            with lock:
                out.append((kind, r.status_code, elapsed))
            if r.status_code == 503:
                time.sleep(float(r.headers.get("retry-after", "1")))


def run(engine: str, minutes: float, clients: int, n_rails: int) -> None:
    with database(engine) as url:
        app = create_app(settings_for(url))
        ids = seed(app, n_rails)
        cookie, _ = app.state.session_cookie.dump(ids["user_id"])
        from server.services import users
        from server.services.access import Actor
        with app.state.sessionmaker() as s:
            _, token = users.create_token(session=s, actor=Actor.system("bench"), username="bench", name="load")
        app.state.engine.dispose()
        port = _free_port()
        env = {**os.environ, "RAILSIGN_DATABASE_URL": url, "RAILSIGN_SECRET_KEY": SECRET,
               "RAILSIGN_WORKER_THREADS": "1", "RAILSIGN_LOG_LEVEL": "WARNING"}
        processes = 1 if engine == "sqlite" else 2
        server = subprocess.Popen([sys.executable, "-m", "server", "serve", "--port", str(port), "--workers",
                                   str(processes)], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        base = f"http://127.0.0.1:{port}"
        try:
            for _ in range(300):
                try:
                    if httpx.get(base + "/healthz", timeout=2).status_code == 200:
                        break
                except httpx.HTTPError:
                    time.sleep(0.2)
            results: list = []
            lock, stop = threading.Lock(), threading.Event()
            threads = [threading.Thread(target=_client, args=(base, cookie, token, ids, stop, k, results, lock))
                       for k in range(clients)]
            memory: list[tuple[float, int]] = []
            started = time.monotonic()
            for t in threads:
                t.start()
            while time.monotonic() - started < minutes * 60:
                memory.append((time.monotonic() - started, _rss_kib(server.pid)))
                time.sleep(10)
            stop.set()
            for t in threads:
                t.join(120)
            wall_s = time.monotonic() - started
        finally:
            server.terminate()
            server.wait(30)
    print(f"\n{engine}, {processes} web process(es), {clients} clients, {wall_s / 60:.1f} min, {n_rails} rails: "
          f"{len(results)} requests, {len(results) / wall_s:.1f} per second")
    kinds = sorted({k for k, _, _ in results})
    print(f"  {'request':<14} {'n':>6} {'p50 ms':>8} {'p95 ms':>8} {'p99 ms':>8}  answers")
    for kind in kinds + ["all"]:
        rows = [(s, t) for k, s, t in results if kind in (k, "all")]
        ms = [t * 1000 for _, t in rows]
        statuses = sorted({s for s, _ in rows})
        counts = ", ".join(f"{s} x {sum(1 for x, _ in rows if x == s)}" for s in statuses)
        print(f"  {kind:<14} {len(rows):>6} {percentile(ms, 50):>8.1f} {percentile(ms, 95):>8.1f} "
              f"{percentile(ms, 99):>8.1f}  {counts}")
    errors = sum(1 for _, s, _ in results if s >= 500 and s != 503)
    print(f"  errors (5xx other than 503): {errors}")
    first = [kib for t, kib in memory if t < 60] or [memory[0][1]]
    last = [kib for t, kib in memory if t >= memory[-1][0] - 60] or [memory[-1][1]]
    print(f"  server memory: first minute {sum(first) / len(first) / 1024:.0f} MiB, last minute "
          f"{sum(last) / len(last) / 1024:.0f} MiB, growth {100 * (sum(last) / len(last)) / (sum(first) / len(first)) - 100:+.1f} %")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=5.0)
    parser.add_argument("--clients", type=int, default=20)
    parser.add_argument("--rails", type=int, default=200)
    parser.add_argument("--engine", choices=["sqlite", "postgres"], default="sqlite")
    args = parser.parse_args()
    run(args.engine, args.minutes, args.clients, args.rails)


if __name__ == "__main__":
    main()

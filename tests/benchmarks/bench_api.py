"""Benchmark of the foundation: server time of list, read and save with 10,000 rails stored.

Run: ``python tests/benchmarks/bench_api.py [--rails N] [--engines sqlite postgres]``.
Server time is the app's own time per request (its Server-Timing header), measured through
the ASGI test client in this process, on SQLite and on PostgreSQL in the same run.
Goals on a 2-core machine: list page of 100 rails under 50 ms, save under 20 ms.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from fastapi.testclient import TestClient  # noqa: E402

from server.app import create_app  # noqa: E402
from server.services import catalog, rail_edits, users  # noqa: E402
from server.services.access import Actor  # noqa: E402
from tests.benchmarks.common import database, server_time_s, settings_for, summary_ms  # noqa: E402
from tests.factories import rail_doc  # noqa: E402


def seed(app, n_rails: int) -> tuple[dict, list[int]]:
    system = Actor.system("bench")
    with app.state.sessionmaker() as s:
        users.create_user(session=s, actor=system, username="bench", role="designer", password=None,
                          teams=["bench-team"])
        _, token = users.create_token(session=s, actor=system, username="bench", name="bench")
        product = catalog.create_product(session=s, actor=system, name="Bench product",
                                         team_id=users.get_user_by_name(session=s, username="bench").teams[0].id)
        boards = [catalog.create_board(session=s, actor=system, product_id=product.id, name=f"Board {k:02d}")
                  for k in range(max(1, n_rails // 200))]
        ids = []
        t0 = time.perf_counter()
        for k in range(n_rails):
            doc = rail_doc(f"RAIL_{k:05d}", load={"c_nom": 100e-6 + k * 1e-7})
            rail, _ = rail_edits.create_rail(session=s, actor=system, board_id=boards[k % len(boards)].id, document=doc)
            ids.append(rail.id)
        print(f"  seeded {n_rails} rails in {time.perf_counter() - t0:.1f} s")
    return {"Authorization": f"Bearer {token}"}, ids


def run(engine_name: str, n_rails: int, repeat: int) -> None:
    with database(engine_name) as url:
        app = create_app(settings_for(url))
        with TestClient(app) as client:
            print(f"{engine_name}:")
            headers, ids = seed(app, n_rails)
            step = max(1, len(ids) // repeat)
            list_times, read_times, save_times = [], [], []
            for k in range(repeat):
                r = client.get("/api/v1/rails", params={"limit": 100, "offset": (k * 100) % max(1, n_rails - 100)},
                               headers=headers)
                assert r.status_code == 200 and len(r.json()["items"]) == 100
                list_times.append(server_time_s(r))
            for k in range(repeat):
                rail_id = ids[(k * step) % len(ids)]
                a = client.get(f"/api/v1/rails/{rail_id}", headers=headers)
                b = client.get(f"/api/v1/rails/{rail_id}/revisions", headers=headers)
                assert a.status_code == 200 and b.status_code == 200
                read_times.append(server_time_s(a) + server_time_s(b))
            for k in range(repeat):
                rail_id = ids[(k * step + 1) % len(ids)]
                doc = rail_doc(f"RAIL_{ids.index(rail_id):05d}", load={"c_nom": 2e-3 + k * 1e-6})
                r = client.put(f"/api/v1/rails/{rail_id}", json={"document": doc}, headers={
                    **headers, "If-Match": client.get(f"/api/v1/rails/{rail_id}", headers=headers).headers["etag"]})
                assert r.status_code == 200, r.text
                save_times.append(server_time_s(r))
            print(f"  list page of 100 rails   {summary_ms(list_times)}   goal < 50 ms")
            print(f"  one rail + its revisions {summary_ms(read_times)}")
            print(f"  save (new revision)      {summary_ms(save_times)}   goal < 20 ms")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rails", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=200)
    parser.add_argument("--engines", nargs="+", default=["sqlite", "postgres"], choices=["sqlite", "postgres"])
    args = parser.parse_args()
    for engine_name in args.engines:
        run(engine_name, args.rails, args.repeat)


if __name__ == "__main__":
    main()

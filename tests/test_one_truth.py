"""One truth per check: every check of every demo rail reads the same everywhere.

The API's stored result is the record; the rail page, the board table, the product
overview, the managers' risk view and the `railsign analyze` report must show the same
value, limit (with its direction), margin, verdict and worst-case point for each check,
because every one of them renders the record with the same formatters and none recomputes.
"""

from __future__ import annotations

import html
import json
import re

import pytest

from server.__main__ import main
from server.analysis.report import limit_text, margin_text, value_text
from server.demo import seed
from server.services import rails as rail_service
from server.services import users as user_service
from server.services.access import Actor
from tests.pages.helpers import actor_of, analyse_now


def _text(fragment: str) -> str:
    return html.unescape(re.sub(r"<[^>]+>", "", fragment)).strip()


def _cells(row_html: str) -> dict[str, str]:
    return {m.group(1): _text(m.group(2))
            for m in re.finditer(r'data-field="([a-z]+)"[^>]*>(.*?)</(?:td|span)>', row_html, re.S)}


def _expected(check: dict) -> dict[str, str]:
    return {"value": value_text(check["value"], check["unit"]), "limit": limit_text(check),
            "margin": margin_text(check["margin"]), "corner": check["corner"] or "-"}


@pytest.fixture
def demo(app, session_factory):
    """The demo scenario, every rail analysed at its head revision."""
    with session_factory() as s:
        seed(s)
        system = Actor.system("test")
        rails, _ = rail_service.list_rails(session=s, actor=system, limit=1000)
        for rail, head in rails:
            analyse_now(s, head)
        manager = actor_of(s, "mona")
        password_hash = user_service.get_user_by_name(session=s, username="mona").password_hash
        ids = [rail.id for rail, _ in rails]
        _, token = user_service.create_token(session=s, actor=system, username="mona", name="one truth")
        return {"rail_ids": ids, "manager_id": manager.user_id, "token": token, "password_hash": password_hash}


def test_every_check_of_every_demo_rail_reads_the_same_everywhere(app, client, session_factory, demo, tmp_path,
                                                                    capsys):
    value, _ = app.state.session_cookie.dump(demo["manager_id"], demo["password_hash"])
    client.cookies.set("railsign_session", value)
    for rail_id in demo["rail_ids"]:
        resp = client.get(f"/api/v1/rails/{rail_id}/results/latest",
                          headers={"Authorization": f"Bearer {demo['token']}"})
        assert resp.status_code == 200, resp.text
        api = resp.json()
        result = api["result"]
        checks = {c["id"]: c for c in result["checks"]}
        assert result["basis"] == "worst case"

        # the rail page: every check's row
        page = client.get(f"/rails/{rail_id}").text
        assert "checks-table" in page, page[:3000]
        for cid, check in checks.items():
            row = re.search(rf'<tr id="check-{cid}"[^>]*>(.*?)</tr>', page, re.S).group(1)
            cells = _cells(row)
            want = _expected(check)
            assert cells["value"] == want["value"], (rail_id, cid)
            assert cells["limit"] == want["limit"], (rail_id, cid)
            assert cells["margin"] == want["margin"], (rail_id, cid)
            assert cells["corner"].startswith(want["corner"]), (rail_id, cid)
            verdict = re.search(r'class="verdict [^"]*">([^<]+)<', row).group(1)
            assert verdict == check["verdict"], (rail_id, cid)

        # the `railsign analyze` report of the same document: the same texts on the check's line
        with session_factory() as s:
            system = Actor.system("test")
            rail = rail_service.get_rail(session=s, actor=system, rail_id=rail_id)
            board_id, product_id = rail.board_id, rail.board.product_id
            doc = rail_service.get_revision(session=s, actor=system, rail_id=rail_id).document
        path = tmp_path / f"rail{rail_id}.json"
        path.write_text(json.dumps(doc))
        main(["analyze", str(path)])
        report = capsys.readouterr().out
        for cid, check in checks.items():
            line = next(ln for ln in report.splitlines() if check["title"] in ln and ln.split()[0].isupper())
            want = _expected(check)
            assert line.split()[0] == check["verdict"].upper(), (rail_id, cid)
            for key in ("value", "limit", "margin"):
                if want[key] != "-":
                    assert f"  {want[key]}  " in f"{line}  ", (rail_id, cid, key, line)
            if check["corner"]:
                assert check["corner"] in line, (rail_id, cid)

        # the managers' risk view lists every failing and marginal check with its record's texts
        risk_page = client.get(f"/products/{product_id}/risks").text
        rail_row = re.search(rf'<a href="/rails/{rail_id}">.*?</tr>', risk_page, re.S)
        for cid, check in checks.items():
            if check["verdict"] not in ("fail", "marginal"):
                continue
            item = re.search(rf'<li data-check="{cid}">(.*?)</li>', rail_row.group(0), re.S)
            assert item is not None, (rail_id, cid)
            cells = _cells(item.group(1))
            want = _expected(check)
            assert (cells["value"], cells["limit"], cells["margin"], cells["corner"]) == (
                want["value"], want["limit"], want["margin"], want["corner"]), (rail_id, cid)
            assert f'>{check["verdict"]}<' in item.group(1)

        # the board table and the product overview show each rail's worst check from the record
        worst = _worst(result["checks"])
        board_page = client.get(f"/boards/{board_id}").text
        row = re.search(rf'<a href="/rails/{rail_id}">.*?</tr>', board_page, re.S).group(0)
        if worst is not None:
            cell = re.search(r'<td data-check="([a-z_]+)">(.*?)</td>', row, re.S)
            assert cell.group(1) == worst["id"]
            cells = _cells(cell.group(2))
            want = _expected(worst)
            assert (cells["value"], cells["limit"], cells["margin"]) == (want["value"], want["limit"],
                                                                         want["margin"])
        product_page = client.get(f"/products/{product_id}").text
        attention = re.search(rf'<a href="/rails/{rail_id}">[^<]*</a>.*?</tr>', product_page, re.S)
        if attention is not None and worst is not None and result["verdict"] in ("fail", "marginal"):
            cell = re.search(r'<td data-check="([a-z_]+)">(.*?)</td>', attention.group(0), re.S)
            assert cell.group(1) == worst["id"]
            cells = _cells(cell.group(2))
            want = _expected(worst)
            assert (cells["value"], cells["limit"], cells["margin"]) == (want["value"], want["limit"],
                                                                         want["margin"])
            assert cells["corner"] == f"worst case at {want['corner']}"


def _worst(checks: list[dict]) -> dict | None:
    order = {"fail": 4, "marginal": 3, "pass": 1}
    live = [c for c in checks if c["verdict"] != "n/a"]
    if not live:
        return None
    return min(live, key=lambda c: (-order[c["verdict"]], c["margin"] if c["margin"] is not None else float("inf")))

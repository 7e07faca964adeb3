"""Page routes over HTTP: forms that create and save rails and parts, errors, conflicts, permissions."""

from __future__ import annotations

import re

import pytest
from sqlalchemy import select

from server.models import Job, Rail, RailRevision
from server.pages.forms import form_from_document
from server.services.rails import normalize_document
from tests.factories import rail_doc
from tests.pages.helpers import Page, log_in, seed_board


@pytest.fixture
def seeded(people, session_factory) -> dict:
    return seed_board(session_factory, analysed=1, unanalysed=1)


def _as(client, app, people, name: str) -> str:
    return log_in(client, app, people.ids[name])


def _field_error(html: str, field_id: str) -> str:
    m = re.search(rf'<span class="field-error" id="{field_id}-error">([^<]*)</span>', html)
    return m.group(1) if m else ""


def _input_value(html: str, name: str) -> str:
    m = re.search(rf'name="{re.escape(name)}" type="text" value="([^"]*)"', html)
    return m.group(1) if m else ""


def _rail_form(seeded, name="VOUT_5V", **changes) -> dict:
    values = form_from_document(normalize_document(rail_doc(name)))
    values["part"] = f"part:{seeded['part_id']}"
    values.update(changes)
    return values


def test_pages_need_a_login(client, seeded):
    r = client.get(f"/boards/{seeded['board_id']}", follow_redirects=False)
    assert r.status_code in (303, 401)


def test_a_rail_is_created_through_the_form(client, app, people, seeded, session_factory):
    csrf = _as(client, app, people, "designer")
    r = client.post(f"/boards/{seeded['board_id']}/rails/new",
                    data={**_rail_form(seeded), "csrf_token": csrf, "message": "from the form"},
                    follow_redirects=False)
    assert r.status_code == 303, r.text[:2000]
    rail_id = int(r.headers["location"].rsplit("/", 1)[1])
    with session_factory() as s:
        rev = s.scalar(select(RailRevision).where(RailRevision.rail_id == rail_id))
        assert rev.document["load"]["c_nom"] == pytest.approx(680e-6)
        assert rev.message == "from the form" and rev.part_revision_id is not None
        assert s.scalar(select(Job).where(Job.rail_id == rail_id)).state == "queued"
    page = client.get(f"/rails/{rail_id}")
    assert page.status_code == 200 and "VOUT_5V" in page.text
    assert "Analysing revision 1" in page.text  # its queued analysis, with live progress


def test_a_bad_value_is_refused_beside_its_field_and_the_typed_values_stay(client, app, people, seeded,
                                                                          session_factory):
    csrf = _as(client, app, people, "designer")
    form = _rail_form(seeded, **{"load.c_nom": "680 uQ", "supply.v_nom": "12.0 V", "name": "TYPED_NAME"})
    r = client.post(f"/boards/{seeded['board_id']}/rails/new", data={**form, "csrf_token": csrf})
    assert r.status_code == 422
    assert "unknown or wrong unit" in _field_error(r.text, "f-load-c-nom")
    assert _input_value(r.text, "load.c_nom") == "680 uQ"
    assert _input_value(r.text, "name") == "TYPED_NAME" and _input_value(r.text, "supply.v_nom") == "12.0 V"
    assert 'aria-invalid="true" aria-describedby="f-load-c-nom-error"' in r.text
    assert 'id="error-summary"' in r.text
    with session_factory() as s:
        assert s.scalar(select(Rail).where(Rail.name == "TYPED_NAME")) is None


def test_a_missing_part_and_a_taken_name_are_refused_at_their_fields(client, app, people, seeded):
    csrf = _as(client, app, people, "designer")
    r = client.post(f"/boards/{seeded['board_id']}/rails/new",
                    data={**_rail_form(seeded, part=""), "csrf_token": csrf})
    assert r.status_code == 422 and "choose a MOSFET" in _field_error(r.text, "f-part")
    r = client.post(f"/boards/{seeded['board_id']}/rails/new",
                    data={**_rail_form(seeded, name="RAIL_0"), "csrf_token": csrf})
    assert r.status_code == 422 and "RAIL_0" in _field_error(r.text, "f-name")


def test_a_rail_starts_from_a_copy_of_another(client, app, people, seeded):
    _as(client, app, people, "designer")
    r = client.get(f"/boards/{seeded['board_id']}/rails/new?copy_from={seeded['rail_ids'][0]}")
    assert r.status_code == 200
    assert _input_value(r.text, "name") == "RAIL_0_COPY"
    assert _input_value(r.text, "load.c_nom") == "330 µF"
    assert f'value="part:{seeded["part_id"]}:1" selected' in r.text


def test_a_conflicting_save_shows_both_versions_and_keeps_the_input(client, app, people, seeded, session_factory):
    rail_id = seeded["rail_ids"][0]
    csrf = _as(client, app, people, "designer")
    edit = client.get(f"/rails/{rail_id}/edit")
    assert 'name="base_revision" value="1"' in edit.text
    base = {"csrf_token": csrf, "base_revision": "1", **_rail_form(seeded, name="RAIL_0"),
            "part": f"part:{seeded['part_id']}:1"}
    first = client.post(f"/rails/{rail_id}/edit", data={**base, "load.c_nom": "470uF", "message": "first"},
                        follow_redirects=False)
    assert first.status_code == 303
    second = client.post(f"/rails/{rail_id}/edit", data={**base, "load.c_nom": "1.5 mF", "message": "mine"})
    assert second.status_code == 409
    page = Page(second.text)
    assert ("2", "Someone saved first") in [(str(level), text) for level, text in page.headings]
    row = re.search(r'<tr class="differs"><td>Load capacitance</td><td class="mono">([^<]*)</td>'
                    r'<td class="mono">([^<]*)</td>', second.text)
    assert row and row.groups() == ("1.5 mF", "470 µF")
    assert _input_value(second.text, "load.c_nom") == "1.5 mF"
    assert 'name="base_revision" value="2"' in second.text  # saving again is a deliberate save on top
    third = client.post(f"/rails/{rail_id}/edit", data={**base, "base_revision": "2", "load.c_nom": "1.5 mF"},
                        follow_redirects=False)
    assert third.status_code == 303
    with session_factory() as s:
        revs = list(s.scalars(select(RailRevision).where(RailRevision.rail_id == rail_id).order_by(RailRevision.n)))
    assert [r.document["load"]["c_nom"] for r in revs] == pytest.approx([330e-6, 470e-6, 1.5e-3])


def test_history_page_shows_the_field_diff(client, app, people, seeded):
    rail_id = seeded["rail_ids"][0]
    csrf = _as(client, app, people, "designer")
    client.post(f"/rails/{rail_id}/edit", data={"csrf_token": csrf, "base_revision": "1",
                                                **_rail_form(seeded, name="RAIL_0", **{"load.c_nom": "1 mF"}),
                                                "part": f"part:{seeded['part_id']}:1"})
    r = client.get(f"/rails/{rail_id}/history?from_n=1&to_n=2")
    assert r.status_code == 200
    m = re.search(r'<tr data-field="load.c_nom">.*?<td class="mono">([^<]*)</td><td class="mono">([^<]*)</td>',
                  r.text, re.S)
    assert m and m.groups() == ("330 µF", "1 mF")


def test_a_part_is_entered_with_pasted_csv_curves(client, app, people, seeded):
    csrf = _as(client, app, people, "designer")
    form = {"csrf_token": csrf, "name": "Pasted N40", "vds_max": "40 V", "rds_on": "3 mOhm", "tj_max": "175",
            "rth_ja": "35 K/W", "zth": "r,tau\n0.5, 50us\n3, 5ms\n30, 2",
            "soa.curves[0].t_pulse": "1 ms", "soa.curves[0].points": "V_DS,I_D\n1, 200\n10, 60\n40, 8",
            "soa.curves[1].t_pulse": "DC", "soa.curves[1].points": "1, 30\n40, 0.9"}
    r = client.post("/parts/new", data=form, follow_redirects=False)
    assert r.status_code == 303, r.text[:3000]
    page = client.get(r.headers["location"])
    assert "Pasted N40" in page.text and "plot-part-soa" in page.text
    bad = client.post("/parts/new", data={**form, "name": "Pasted N41", "soa.curves[0].points": "1, 200\n0.5, 60"})
    assert bad.status_code == 422
    assert "line 2" in _field_error(bad.text, "f-curve-0-points")
    assert "0.5, 60" in bad.text  # the pasted text stays


def test_viewers_get_no_edit_forms_and_cannot_post(client, app, people, seeded):
    csrf = _as(client, app, people, "viewer")
    assert client.get(f"/rails/{seeded['rail_ids'][0]}/edit").status_code == 403
    r = client.post(f"/boards/{seeded['board_id']}/analyses", data={"csrf_token": csrf})
    assert r.status_code == 403
    page = client.get(f"/rails/{seeded['rail_ids'][0]}")
    assert "Run Monte Carlo" not in page.text and ">Edit<" not in page.text


def test_analysis_buttons_queue_jobs(client, app, people, seeded, session_factory):
    csrf = _as(client, app, people, "reviewer")
    r = client.post(f"/boards/{seeded['board_id']}/analyses", data={"csrf_token": csrf}, follow_redirects=False)
    assert r.status_code == 303
    rail_id = seeded["rail_ids"][0]
    r = client.post(f"/rails/{rail_id}/monte-carlo", data={"csrf_token": csrf, "samples": "1000", "seed": "7",
                                                          "distribution_c": "normal"}, follow_redirects=False)
    assert r.status_code == 303
    with session_factory() as s:
        kinds = {(j.kind, j.state) for j in s.scalars(select(Job).where(Job.parent_id.is_(None)))}
        mc = s.scalar(select(Job).where(Job.kind == "monte_carlo"))
    assert ("board", "running") in kinds
    assert mc.options == {"corners": True, "monte_carlo": 1000, "seed": 7,
                          "distribution": {"c": "normal", "i_charge": "uniform", "i_limit": "uniform",
                                           "timer_c": "uniform", "v_s": "uniform", "v_trip": "uniform"}}
    board = client.get(f"/boards/{seeded['board_id']}")
    assert 'class="job-progress"' in board.text
    rail = client.get(f"/rails/{rail_id}")
    assert "Monte Carlo run" in rail.text and f'data-job-id="{mc.id}"' in rail.text
    bad = client.post(f"/rails/{rail_id}/monte-carlo", data={"csrf_token": csrf, "samples": "3"})
    assert bad.status_code == 422

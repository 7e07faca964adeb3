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


# --- Foster stages fitted to a Zth curve on the part form; the SOA envelope said on the part page ---------

# Known junction-to-case stages (r K/W, tau s); the points are their closed form Zth(t) = sum r_i (1 - exp(-t /
# tau_i)) (Foster network, JEDEC JESD51-14; from memory)
_FIT_STAGES = [(0.05, 1e-5), (0.3, 3e-4), (0.6, 5e-3), (0.35, 8e-2)]


def _zth_text() -> str:
    import math

    lines = ["t, Zth"]
    for k in range(31):
        t = 10 ** (-6 + k / 5)
        lines.append(f"{t!r}, {sum(r * (1 - math.exp(-t / tau)) for r, tau in _FIT_STAGES)!r}")
    return "\n".join(lines)


def _part_form(csrf: str, **extra) -> dict:
    return {"csrf_token": csrf, "name": "Fitted N40", "vds_max": "40 V", "rds_on": "3 mOhm", "tj_max": "175",
            "rth_ja": "35 K/W", "zth": "", "zth_points": _zth_text(), "fit_stages": "4", "fit_board_tau": "",
            "soa.curves[0].t_pulse": "1 ms", "soa.curves[0].points": "1, 200\n10, 60\n40, 8",
            "soa.curves[1].t_pulse": "DC", "soa.curves[1].points": "1, 30\n40, 0.9", **extra}


def _parts(session_factory) -> list:
    """Every part with its head revision, and the number of part revisions: what a save would change."""
    from sqlalchemy import func

    from server.models import Part, PartRevision

    with session_factory() as s:
        return [(p.name, p.head_n) for p in s.scalars(select(Part))] + [
            ("revisions", s.scalar(select(func.count()).select_from(PartRevision)))]


def _textarea(html: str, name: str) -> str:
    import html as html_lib

    m = re.search(rf'<textarea id="[^"]*" name="{re.escape(name)}"[^>]*>([^<]*)</textarea>', html)
    return html_lib.unescape(m.group(1)) if m else ""


def test_the_part_form_fits_stages_to_pasted_zth_points_then_saves_them_with_the_points(client, app, people, seeded,
                                                                                        session_factory):
    csrf = _as(client, app, people, "designer")
    before = _parts(session_factory)
    r = client.post("/parts/new", data={**_part_form(csrf), "action": "fit"})
    assert r.status_code == 200, r.text[:2000]
    assert _parts(session_factory) == before  # a fit saves nothing
    assert 'id="fit-result"' in r.text and "plot-zth-fit" in r.text
    assert 'id="fit-largest-error">0.00%</strong>' in r.text
    assert "common practice, no source" in r.text  # the board stage's default time constant, said
    stages = [tuple(float(x) for x in line.split(",")) for line in _textarea(r.text, "zth").splitlines()]
    assert len(stages) == 5  # four fitted and the board stage
    for (r_fit, tau_fit), (r0, tau0) in zip(stages, _FIT_STAGES):
        assert r_fit == pytest.approx(r0, rel=0.01) and tau_fit == pytest.approx(tau0, rel=0.01)
    assert stages[-1][1] == 10.0 and sum(s[0] for s in stages) == pytest.approx(35.0, rel=1e-12)
    # saving the form as the fit left it stores the stages with the points
    form = {**_part_form(csrf), "zth": _textarea(r.text, "zth")}
    saved = client.post("/parts/new", data=form, follow_redirects=False)
    assert saved.status_code == 303, saved.text[:2000]
    from server.models import Part, PartRevision

    with session_factory() as s:
        part = s.scalar(select(Part).where(Part.name == "Fitted N40"))
        doc = s.scalar(select(PartRevision).where(PartRevision.part_id == part.id)).document
    assert len(doc["zth_points"]) == 31 and doc["zth_points"][0][0] == pytest.approx(1e-6)
    assert [s["r"] for s in doc["zth"]] == [s[0] for s in stages]
    page = client.get(saved.headers["location"]).text
    assert 'id="zth-points"' in page and "31 points of the datasheet" in page
    assert "Zth points (datasheet, junction to case)" in page  # the points drawn with the stages' curve
    # editing the part: a fit with a given board time constant, saved as a new revision with the points
    edit = client.get(f"/parts/{part.id}/edit").text
    assert _textarea(edit, "zth_points").count("\n") == 30
    form = {**_part_form(csrf), "base_revision": "1", "fit_board_tau": "30 s", "action": "fit"}
    refit = client.post(f"/parts/{part.id}/edit", data=form)
    assert refit.status_code == 200 and _textarea(refit.text, "zth").splitlines()[-1].endswith(", 30")
    form = {**form, "zth": _textarea(refit.text, "zth"), "message": "board stage 30 s"}
    form.pop("action")
    assert client.post(f"/parts/{part.id}/edit", data=form, follow_redirects=False).status_code == 303
    with session_factory() as s:
        head = s.scalar(select(PartRevision).where(PartRevision.part_id == part.id, PartRevision.n == 2))
        assert head.document["zth"][-1]["tau"] == 30.0 and len(head.document["zth_points"]) == 31


@pytest.mark.parametrize("changes, field_id, words", [
    ({"zth_points": "1 ms, 0.5\n100 us, 0.6\n10 ms, 0.7\n0.1, 0.8\n1, 0.9\n2, 1.0\n3, 1.1\n4, 1.2"},
     "f-zth-points", "line 2: t must increase"),
    ({"zth_points": "1 ms, 0.5\n10 ms, 0.4\n0.1, 0.8\n1, 0.9\n2, 1.0\n3, 1.1\n4, 1.2\n5, 1.3"},
     "f-zth-points", "line 2: Zth must not fall"),
    ({"zth_points": "1 ms, 0.5\n10ms"}, "f-zth-points", "line 2: expected two values"),
    ({"zth_points": "1 ms, 0.5\n10 ms, 0.7"}, "f-zth-points", "needs at least 8 points"),
    ({"rth_ja": "1 K/W"}, "f-rth-ja", "must be above the fitted junction-to-case total"),
    ({"rth_ja": ""}, "f-rth-ja", "is needed to add the board stage"),
    ({"fit_board_tau": "-1 s"}, "f-fit-board-tau", "above 0 s"),
    ({"fit_stages": "9"}, "f-fit-stages", "choose 2 to 6 stages"),
])
def test_a_bad_fit_request_names_the_field_and_stores_nothing(client, app, people, seeded, session_factory,
                                                              changes, field_id, words):
    csrf = _as(client, app, people, "designer")
    before = _parts(session_factory)
    r = client.post("/parts/new", data={**_part_form(csrf), **changes, "action": "fit"})
    assert r.status_code == 422
    assert words in _field_error(r.text, field_id), _field_error(r.text, field_id) or r.text[:3000]
    assert _parts(session_factory) == before


def test_a_bad_zth_points_paste_is_refused_on_save_naming_the_line_and_nothing_is_stored(client, app, people,
                                                                                        seeded, session_factory):
    csrf = _as(client, app, people, "designer")
    before = _parts(session_factory)
    form = {**_part_form(csrf), "zth": "0.5, 50us\n3, 5ms\n30, 2", "zth_points": "t, Zth\n1 ms, 0.5\n100 us, 0.6"}
    r = client.post("/parts/new", data=form, follow_redirects=False)
    assert r.status_code == 422
    assert "line 3: t must increase" in _field_error(r.text, "f-zth-points")
    assert _parts(session_factory) == before


def test_the_part_page_says_the_envelope_is_used_and_which_curve_is_capped_where(client, app, people, seeded):
    csrf = _as(client, app, people, "designer")
    form = {**_part_form(csrf, name="Crossing N40"), "zth": "0.5, 50us\n3, 5ms\n30, 2", "zth_points": "",
            "soa.curves[1].t_pulse": "10 ms", "soa.curves[1].points": "1, 150\n10, 70\n40, 4",
            "soa.curves[2].t_pulse": "DC", "soa.curves[2].points": "1, 30\n5, 35\n40, 0.9"}
    r = client.post("/parts/new", data=form, follow_redirects=False)
    assert r.status_code == 303, r.text[:3000]  # crossing and rising curves are read, not refused
    page = client.get(r.headers["location"]).text
    assert "The analysis reads the conservative envelope of the curves" in page
    warnings = re.search(r'id="soa-warnings">(.*?)</div>', page, re.S).group(1)
    assert "the 10 ms curve allows more current than the shorter 1 ms curve from" in warnings
    assert "the DC curve&#39;s I_D rises with V_DS" in warnings  # HTML-escaped apostrophe
    assert "as the analysis reads it (envelope)" in page  # the dashed curves in the chart
    plain = client.get(f"/parts/{seeded['part_id']}").text
    assert 'id="soa-warnings"' not in plain and "These curves neither cross nor rise" in plain

"""Pages with an R_DS(on) maximum and table on the part and two parallel FETs on the rail."""

from __future__ import annotations

from sqlalchemy import select

from server.models import RailRevision
from server.pages.forms import form_from_document
from server.services import catalog, parts
from server.services.rails import normalize_document
from tests.factories import fet_doc, rail_doc
from tests.pages.helpers import actor_of, analyse_now, log_in


def _spread_part(session_factory) -> dict:
    with session_factory() as s:
        designer = actor_of(s, "designer")
        product = catalog.create_product(session=s, actor=designer, name="Tideline buoy")
        board = catalog.create_board(session=s, actor=designer, product_id=product.id, name="Power", revision="C")
        fet = {**fet_doc("Test N30 spread"), "rds_on_max": "6.5 mOhm",
               "rds_on_curve": [[-55, 0.6], [25, 1.0], [100, 1.4], [150, 1.72]]}
        part = parts.create_part(session=s, actor=designer, document=fet, message="entered")
        return {"board_id": board.id, "part_id": part.part_id}


def test_a_rail_with_two_parallel_fets_of_a_library_part(client, app, people, session_factory):
    ids = _spread_part(session_factory)
    csrf = log_in(client, app, people.ids["designer"])
    form = form_from_document(normalize_document(rail_doc("VOUT_TWO")))
    form.update({"part": f"part:{ids['part_id']}", "fet.count": "2", "csrf_token": csrf, "message": "two FETs"})
    r = client.post(f"/boards/{ids['board_id']}/rails/new", data=form, follow_redirects=False)
    assert r.status_code == 303, r.text[:2000]
    rail_id = int(r.headers["location"].rsplit("/", 1)[1])
    with session_factory() as s:
        rev = s.scalar(select(RailRevision).where(RailRevision.rail_id == rail_id))
        # the part stays linked: the count is the rail's own figure beside the part's data
        assert rev.part_revision_id is not None and rev.document["fet"]["count"] == 2
        assert rev.document["fet"]["rds_on_max"] == 6.5e-3
        result = analyse_now(s, rev)
    assert result["fet"]["count"] == 2
    page = client.get(f"/rails/{rail_id}").text
    assert "2 in parallel" in page and "R_DS(on) used:" in page and "Identical MOSFETs in parallel" in page
    assert "the R_DS(on) table covers -55 °C to 150 °C" in page


def test_the_part_page_and_form_show_the_table(client, app, people, session_factory):
    ids = _spread_part(session_factory)
    log_in(client, app, people.ids["designer"])
    page = client.get(f"/parts/{ids['part_id']}").text
    assert "R_DS(on) over temperature" in page and "1.72" in page and "6.5 mΩ" in page
    form = client.get(f"/parts/{ids['part_id']}/edit").text
    assert 'name="rds_on_curve"' in form and "150, 1.72" in form and 'name="rds_on_max"' in form

"""The rail page says where the analysis reads the part's SOA curves lower than drawn (crossing curves, a
current rising with V_DS: the conservative envelope), and lists computable but unusual input values."""

from __future__ import annotations

import copy
import re

from sqlalchemy import select

from server.demo import seed_if_empty
from server.models import Rail, RailRevision
from server.services.access import Actor
from server.services.rail_edits import save_rail
from server.services.users import get_user_by_name
from tests.pages.helpers import analyse_now
from tests.pages.test_bank_pages import _log_in_as

SYSTEM = Actor.system("rail-warning-tests")


def _crossing(fet: dict) -> dict:
    """The FET with its 10 ms curve above the 1 ms curve at high V_DS (as a chart can be misread)."""
    fet = copy.deepcopy(fet)
    curves = fet["soa"]["curves"]
    longer = next(c for c in curves if c["t_pulse"] is not None and c["t_pulse"] > 5e-3)
    shorter = max((c for c in curves if c["t_pulse"] is not None and c["t_pulse"] < longer["t_pulse"]),
                  key=lambda c: c["t_pulse"])
    v_end, i_end = shorter["points"][-1]
    longer["points"][-1] = [v_end, i_end * 1.5]
    return fet


def test_the_rail_page_names_the_capped_soa_curves(client, app, session_factory):
    with session_factory() as s:
        seed_if_empty(s)
        rail = s.scalar(select(Rail).where(Rail.name == "SOM_12V"))
        head = s.scalar(select(RailRevision).where(RailRevision.rail_id == rail.id, RailRevision.n == rail.head_n))
        dana = get_user_by_name(session=s, username="dana")
        who = (dana.id, dana.password_hash, dana.session_generation)
        plain_id = rail.id
        analyse_now(s, head)
    _log_in_as(client, app, who)
    page = client.get(f"/rails/{plain_id}").text
    assert 'id="rail-soa-warnings"' not in page
    with session_factory() as s:
        rail = s.get(Rail, plain_id)
        head = s.scalar(select(RailRevision).where(RailRevision.rail_id == rail.id, RailRevision.n == rail.head_n))
        doc = {**copy.deepcopy(head.document), "fet": _crossing(head.document["fet"])}
        _, new, created = save_rail(session=s, actor=SYSTEM, rail_id=rail.id, document=doc, base_sha256=head.sha256,
                                    part=None)
        assert created
        analyse_now(s, new)
    page = client.get(f"/rails/{plain_id}").text
    box = re.search(r'id="rail-soa-warnings">(.*?)</div>', page, re.S)
    assert box, "no SOA envelope warning on the rail page"
    assert "The analysis reads the conservative envelope of the curves" in box.group(1)
    assert "10 ms curve allows more current than the shorter" in box.group(1)

"""Page contexts built without HTTP: what each page shows, from the same services as the API."""

from __future__ import annotations

import pytest

from server.pages.boards import board_context
from server.pages.history import history_context
from server.pages.home import home_context, product_context
from server.pages.parts import part_context, parts_context
from server.pages.rails import rail_context
from server.schemas.result import AnalysisResult
from server.services import rail_edits, rails, results
from tests.factories import rail_doc
from tests.pages.helpers import actor_of, analyse_now, log_in, seed_board


@pytest.fixture
def seeded(people, session_factory) -> dict:
    return seed_board(session_factory, analysed=2, unanalysed=1, monte_carlo=True)


def test_home_lists_only_the_actors_products_with_verdict_counts(seeded, session_factory):
    with session_factory() as s:
        ctx = home_context(s, actor_of(s, "viewer"))
        (entry,) = ctx["products"]
        assert entry["product"].name == "Tideline buoy"
        assert entry["boards"] == 1 and entry["rails"] == 3
        assert sum(n for _, n in entry["counts"]) == 3
        assert (None, 1) in entry["counts"]  # the rail never analysed
        assert home_context(s, actor_of(s, "outsider"))["products"] == []


def test_product_overview_puts_failing_rails_first(seeded, session_factory):
    with session_factory() as s:
        ctx = product_context(s, actor_of(s, "manager"), seeded["product_id"])
    assert ctx["rails"] == 3
    order = {"fail": 0, "marginal": 1, None: 2}
    ranks = [order[a["verdict"]] for a in ctx["attention"]]
    assert ranks == sorted(ranks)
    analysed = [a for a in ctx["attention"] if a["verdict"] is not None]
    assert analysed and all(a["worst"] is not None and a["worst"]["verdict"] == a["verdict"] for a in analysed)
    assert ctx["attention"][-1]["verdict"] is None
    assert ctx["states"] == [("in design", 3)]  # the default workflow's initial state


def test_board_context_rows_filters_and_budget(seeded, session_factory):
    with session_factory() as s:
        actor = actor_of(s, "viewer")
        ctx = board_context(s, actor, seeded["board_id"])
        assert [r["name"] for r in ctx["rows"]] == ["RAIL_0", "RAIL_1", "RAIL_2"]
        first = ctx["rows"][0]
        assert first["c"] == "330 µF" and first["supply"] == "12 V (11.4 V to 12.6 V)"
        assert first["verdict"] in ("pass", "marginal", "fail") and first["worst"]["title"]
        assert ctx["rows"][2]["verdict"] is None and ctx["rows"][2]["analysed_at"] is None
        (supply,) = ctx["supplies"]
        assert supply["missing"] == ["RAIL_2"]
        assert "i_max 10 A" in supply["words"]
        names = [t["name"] for t in supply["figure"]["data"]]
        assert names == ["RAIL_0", "RAIL_1", "Sum of start-up currents"]
        only = board_context(s, actor, seeded["board_id"], q="rail_1")
        assert [r["name"] for r in only["rows"]] == ["RAIL_1"] and only["total"] == 3
        none = board_context(s, actor, seeded["board_id"], verdict="not analysed")
        assert [r["name"] for r in none["rows"]] == ["RAIL_2"]


def test_rail_context_has_checks_headroom_and_every_plot(seeded, session_factory):
    with session_factory() as s:
        ctx = rail_context(s, actor_of(s, "viewer"), seeded["rail_ids"][0])
    assert isinstance(ctx["result"], AnalysisResult)  # the page reads the typed result
    assert ctx["result"].verdict in ("pass", "marginal", "fail")
    assert len(ctx["checks"]) == len(ctx["result"].checks) > 5
    bases = {c["basis_text"] for c in ctx["checks"]}
    assert "common practice, not a standard" in bases
    assert any(h["title"].startswith("Largest load capacitance") and h["note"] for h in ctx["headroom"])
    # key figures: nominal and worst case side by side, the worst case's point in words
    assert all(f["nominal"] and f["worst"] for f in ctx["key_figures"][:3])
    assert any(f["corner"].startswith("supply") for f in ctx["key_figures"])
    startup = ctx["figures"]["startup"]
    assert {t["yaxis"] for t in startup["data"]} == {"y", "y2", "y3", "y4"}
    assert all(t["xaxis"] == "x" for t in startup["data"])  # one shared time axis
    soa = ctx["figures"]["soa"]
    assert soa["layout"]["xaxis"]["type"] == "log" and soa["layout"]["yaxis"]["type"] == "log"
    names = [t["name"] for t in soa["data"]]
    assert "Start-up trajectory (V_DS, I_D)" in names
    assert "Short circuit (nominal)" in names and "Short circuit (worst case)" in names
    assert "worst case" in soa["layout"]["annotations"][0]["text"]
    timer = ctx["figures"]["timer"]
    assert any(t["name"].startswith("Fault timer now") for t in timer["data"])
    mc = ctx["mc"]
    assert mc is not None and mc["n"] == 200 and mc["figure"]["data"]
    # histograms of the margin, with axis titles and the team limit drawn in
    assert mc["figure"]["layout"]["xaxis"]["title"]["text"] == "Margin (1 = team limit)"
    assert mc["figure"]["layout"]["yaxis"]["title"]["text"] == "Samples"
    assert any("fails in" in a["text"] and "marginal in" in a["text"] for a in mc["figure"]["layout"]["annotations"])
    assert mc["rows"] and all("fail" in r and "marginal" in r for r in mc["rows"])


def test_rail_context_without_a_result_shows_its_queued_job(seeded, session_factory):
    with session_factory() as s:
        ctx = rail_context(s, actor_of(s, "viewer"), seeded["rail_ids"][2])
    assert ctx["result"] is None and ctx["figures"] == {}
    assert ctx["job"] is not None and ctx["job"].state == "queued"


def test_history_context_diffs_two_revisions_and_overlays_their_plots(seeded, session_factory):
    rail_id = seeded["rail_ids"][0]
    with session_factory() as s:
        designer = actor_of(s, "designer")
        doc = rail_doc("RAIL_0", load={"c_nom": "470uF"})
        doc.pop("fet")
        _, rev, created = rail_edits.save_rail(session=s, actor=designer, rail_id=rail_id, document=doc, base_n=1,
                                          message="bigger bulk capacitor")
        assert created
        analyse_now(s, rev)
        ctx = history_context(s, actor_of(s, "viewer"), rail_id)
    assert (ctx["from_n"], ctx["to_n"]) == (1, 2)
    change = next(c for c in ctx["changes"] if c["field"] == "load.c_nom")
    assert (change["old"], change["new"]) == ("330 µF", "470 µF")
    assert change["label"] == "Load capacitance"
    names = [t["name"] for t in ctx["figures"]["startup"]["data"]]
    assert "Output voltage (revision 1)" in names and "Output voltage (revision 2)" in names
    trajectories = [t["name"] for t in ctx["figures"]["soa"]["data"] if t["name"].startswith("Start-up")]
    assert trajectories == ["Start-up trajectory (revision 1)", "Start-up trajectory (revision 2)"]
    assert [r["rev"].n for r in ctx["revisions"]] == [2, 1]


def test_part_contexts_show_curves_stages_and_users(seeded, session_factory):
    with session_factory() as s:
        actor = actor_of(s, "viewer")
        listing = parts_context(s, actor)
        assert [i["part"].name for i in listing["items"]] == ["Test N30 library"]
        ctx = part_context(s, actor, seeded["part_id"])
    assert [c["label"] for c in ctx["curves"]] == ["100 µs", "1 ms", "10 ms", "DC"]
    assert len(ctx["stages"]) == 4 and ctx["stages"][1]["tau"] == "2 ms"
    assert sorted(u["rail_name"] for u in ctx["usage"]) == ["RAIL_0", "RAIL_1", "RAIL_2"]
    assert all(u["newest"] and u["board"] == "Tideline buoy / Power rev C" for u in ctx["usage"])
    assert len(ctx["figures"]["soa"]["data"]) == 4 and ctx["figures"]["zth"]["data"][0]["y"]


def test_rail_page_keeps_results_of_an_older_engine_as_outdated_dicts(seeded, session_factory, client, app, people):
    """A result of another engine version is never read as the typed result: the page shows it as outdated,
    its Monte Carlo run too."""
    rail_id = seeded["rail_ids"][2]
    # the shape of an older engine's result (invented): not what AnalysisResult reads
    old = {"engine_version": "1.1.0", "verdict": "marginal", "checks": [{"id": "startup_soa", "verdict": "marginal"}]}
    with session_factory() as s:
        head = rails.get_revision(session=s, actor=actor_of(s, "viewer"), rail_id=rail_id)
        results.store_result(s, sha256=head.sha256, options=results.NOMINAL_OPTIONS, result=old, duration_s=0.1,
                             version="1.1.0")
        results.store_result(s, sha256=head.sha256, options={**results.NOMINAL_OPTIONS, "monte_carlo": 1000},
                             result={**old, "monte_carlo": {"n": 1000, "yield": 0.97}}, duration_s=0.1,
                             version="1.1.0")
        s.commit()
        ctx = rail_context(s, actor_of(s, "viewer"), rail_id)
    assert ctx["result"] is None and ctx["figures"] == {} and ctx["checks"] == []
    assert ctx["signoff"]["outdated"]["engine_version"] == "1.1.0"
    assert ctx["mc"]["outdated"] is True and (ctx["mc"]["n"], ctx["mc"]["engine_version"]) == (1000, "1.1.0")
    log_in(client, app, people.ids["viewer"])
    html = client.get(f"/rails/{rail_id}").text
    assert 'id="outdated-result"' in html and "checks-table" not in html
    assert "The newest Monte Carlo run (1000 samples) was computed by engine 1.1.0" in html


def test_rail_page_shows_the_onset_the_turn_off_retries_and_starting_temperatures(people, session_factory, client,
                                                                                 app):
    with session_factory() as s:
        designer = actor_of(s, "designer")
        from server.services import catalog, parts
        from tests.factories import fet_doc
        product = catalog.create_product(session=s, actor=designer, name="Tideline buoy")
        board = catalog.create_board(session=s, actor=designer, product_id=product.id, name="Power", revision="C")
        part = parts.create_part(session=s, actor=designer, document={**fet_doc("Rated N30"), "e_avalanche": "80 mJ"},
                                 message="entered")
        doc = rail_doc("TOOL_PORT", supply={"v_clamp": "20 V"},
                       switch={"loop_response": "2 us", "fast_trip": "15 A", "fast_trip_delay": "300 ns",
                               "timer": {"c": "100 nF", "i_charge": "10 uA", "v_trip": 1.2, "after_fault": "retry",
                                         "retry_off": "0.5 s", "retries": 2}})
        doc.pop("fet")
        rail, rev = rail_edits.create_rail(session=s, actor=designer, board_id=board.id, document=doc,
                                           part=rail_edits.PartRef(part.part_id), message="first entry")
        analyse_now(s, rev)
        ctx = rail_context(s, actor_of(s, "viewer"), rail.id)
    by_id = {c["id"]: c for c in ctx["checks"]}
    assert by_id["short_circuit_time"]["t_start"].endswith("°C")
    assert by_id["onset_peak"]["value"] != "-" and by_id["turnoff_vds"]["value"] == "20 V"
    names = [t["name"] for t in ctx["figures"]["soa"]["data"]]
    assert "Short-circuit onset peak (nominal)" in names
    titles = [title for title, _ in next(x for x in ctx["inputs"] if x["title"] == "Switch")["items"]]
    assert "Fast-trip threshold" in titles and "Current loop response time" in titles
    log_in(client, app, people.ids["viewer"])
    html = client.get(f"/rails/{rail.id}").text
    assert 'id="fault-figures"' in html and "Junction starts at" in html
    assert "2 before latching (3 pulses)" in html and "cool-down ratio" in html
    assert "held by the input clamp" in html

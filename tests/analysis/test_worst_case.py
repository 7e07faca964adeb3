"""The sign-off worst case: corners plus a deterministic search inside the tolerance box.

References: a dense grid over the tolerance box on the engine's own model (exhaustive
search), and Monte Carlo samples drawn with seeds other than the search's, which must never
read worse than the reported worst case (beyond the stated flag tolerance).
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from server.analysis import analyze_rail
from server.analysis.document import read_rail
from server.analysis.evaluation import RowParams, evaluate_rows
from server.analysis.montecarlo import FLAG_TOLERANCE
from server.analysis.worstcase import SEARCH_SEED
from server.demo import BOARDS, FETS
from server.schemas.rail import RailDocument, normalize

from .rail_documents import FET_30V, FET_40V, FET_60V, efuse_12v, hotswap_48v, load_switch_5v, slew_12v_demo, slew_24v

ORDER = {"n/a": 0, "pass": 1, "marginal": 2, "fail": 3}


def _ramped_hard_start() -> dict:
    """A hard start ramped over 200 us into a widely toleranced capacitor: its start-up SOA
    ratio is not monotone in the capacitance (the pulse's shape moves along the chart)."""
    d = load_switch_5v()
    d["fet"] = copy.deepcopy(FET_30V)
    d["switch"]["t_on"] = 2e-4
    d["supply"].update(v_min=10.0, v_nom=12.0, v_max=14.0, uvlo=None, i_max=None)
    d["load"].update(c_nom=1e-3, c_tol=0.5)
    return d


def test_search_finds_a_worse_point_than_every_corner():
    doc = _ramped_hard_start()
    rail = read_rail(doc)
    # exhaustive reference: a 9 x 41 grid over the supply and the capacitance (no other spread)
    vs, cs = np.meshgrid(np.linspace(10, 14, 9), np.linspace(0.5e-3, 1.5e-3, 41))
    n = vs.size
    grid = RowParams(v_s=vs.ravel(), c=cs.ravel(), i_lim=np.full(n, 1e30), t_fault=np.full(n, np.inf))
    _, checks, _ = evaluate_rows(rail, rail.rules, grid)
    m = checks["startup_soa"]["margin"].reshape(vs.shape)
    corner_min = min(m[0, 0], m[0, -1], m[-1, 0], m[-1, -1])
    assert m.min() < corner_min * 0.99  # the case really is not monotone
    r = analyze_rail(doc, headroom=False, waveforms=False)
    soa = next(c for c in r["checks"] if c["id"] == "startup_soa")
    assert soa["found_by"] == "search"
    assert soa["margin"] < corner_min * 0.99
    assert soa["margin"] <= m.min() * (1 + FLAG_TOLERANCE)
    assert "startup_soa" in r["worst_case"]["found_by_search"]
    assert any("found inside the tolerance box" in note for note in r["notes"])


def test_the_worst_case_is_deterministic():
    doc = _ramped_hard_start()
    a = analyze_rail(doc, headroom=False, waveforms=False)
    b = analyze_rail(doc, headroom=False, waveforms=False)
    assert a["checks"] == b["checks"] and a["worst_case"] == b["worst_case"]
    assert a["worst_case"]["budget"]["seed"] == SEARCH_SEED


def _demo_documents() -> list[dict]:
    docs = []
    for _, _, rails in BOARDS:
        for doc, part in rails:
            d = dict(doc)
            d["fet"] = FETS[part]
            docs.append(normalize(RailDocument.model_validate(d)))
    return docs


def _generated_documents() -> list[dict]:
    """Rails drawn from a fixed generator: every switch mode, timers and tolerances varied."""
    rng = np.random.default_rng(2026)
    makers = [efuse_12v, hotswap_48v, load_switch_5v, slew_24v, slew_12v_demo]
    fets = [FET_30V, FET_40V, FET_60V]
    docs = []
    for k in range(10):
        d = makers[k % len(makers)]()
        d["name"] = f"generated {k}"
        d["load"]["c_nom"] *= float(rng.uniform(0.3, 2.0))
        d["load"]["c_tol"] = float(rng.choice([0.1, 0.2, 0.35]))
        if d["switch"].get("i_limit"):
            d["switch"]["i_limit"] *= float(rng.uniform(0.7, 1.5))
            d["switch"]["i_limit_tol"] = float(rng.choice([0.05, 0.15]))
        if d["switch"].get("timer"):
            d["switch"]["timer"]["c"] *= float(rng.uniform(0.5, 3.0))
        if d["switch"]["mode"] == "hard":
            d["switch"]["t_on"] = float(rng.choice([1e-4, 2e-4, 1e-3]))
            fet = copy.deepcopy(fets[k % 3])
            if fet["vds_max"] >= d["supply"]["v_max"]:
                d["fet"] = fet
        docs.append(d)
    return docs


@pytest.mark.parametrize("doc", _demo_documents() + _generated_documents() + [_ramped_hard_start()],
                         ids=lambda d: d["name"])
def test_no_monte_carlo_sample_beats_the_reported_worst_case(doc):
    seed = SEARCH_SEED + 17  # another seed than the search's
    r = analyze_rail(doc, monte_carlo=300, seed=seed, headroom=False, waveforms=False)
    mc = r["monte_carlo"]
    assert mc["flags"] == [], mc["flags"]
    # the same statement checked here directly against the samples' margins
    for c in r["checks"]:
        m = mc["checks"][c["id"]]
        if c["verdict"] == "n/a" or not m["applies"]:
            continue
        assert m["fail_share"] == 0.0 or c["verdict"] == "fail"
        if m["marginal_share"] > 0.0:
            assert ORDER[c["verdict"]] >= ORDER["marginal"]
        if c["margin"] is not None and m["margin"] is not None:
            assert m["margin"]["min"] >= c["margin"] * (1 - FLAG_TOLERANCE)


def test_a_sample_worse_than_the_worst_case_is_flagged_not_folded_in():
    from server.analysis.document import read_rail as read
    from server.analysis.montecarlo import run_monte_carlo

    doc = efuse_12v()
    rail = read(doc)
    records = analyze_rail(doc, headroom=False, waveforms=False)["checks"]
    # pretend the worst case of the start-up Tj check read 20 % better than it did
    doctored = [dict(c, margin=c["margin"] * 1.2) if c["id"] == "startup_tj" else c for c in records]
    mc = run_monte_carlo(rail, rail.rules, 300, seed=5, worst=doctored)
    flagged = {f["check"] for f in mc["flags"]}
    assert "startup_tj" in flagged
    flag = next(f for f in mc["flags"] if f["check"] == "startup_tj")
    assert flag["samples"] >= 1 and flag["point"].startswith("supply")
    assert mc["checks"]["startup_tj"]["beaten"]["margin"] < doctored[3]["margin"]


def test_halton_points_are_the_radical_inverses():
    # Source: J. H. Halton, Numer. Math. 2 (1960) 84-90: the k-th point's coordinate in base b
    # mirrors k's base-b digits about the point (van der Corput): 1, 2, 3 -> 1/2, 1/4, 3/4 in
    # base 2 and 1/3, 2/3, 1/9 in base 3.
    from server.analysis.worstcase import _radical_inverse, halton_points

    k = np.array([1, 2, 3, 4])
    np.testing.assert_allclose(_radical_inverse(k, 2), [0.5, 0.25, 0.75, 0.125], rtol=1e-15)
    np.testing.assert_allclose(_radical_inverse(k, 3), [1 / 3, 2 / 3, 1 / 9, 4 / 9], rtol=1e-15)
    u = halton_points(3, 64)
    assert u.shape == (64, 3) and (u >= 0).all() and (u < 1).all()
    # low discrepancy: every eighth of each axis holds 8 of the 64 points, give or take two
    for j in range(3):
        counts = np.histogram(u[:, j], bins=8, range=(0, 1))[0]
        assert counts.min() >= 6 and counts.max() <= 10

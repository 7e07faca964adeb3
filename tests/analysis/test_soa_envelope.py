"""SOA curves read off a chart that cross or rise: the conservative envelope the analysis reads.

The reference is the envelope's definition, computed here apart from the code under test: each
curve by itself is log-log interpolated between its points (the chart's log axes), its current
never rises with V_DS (running minimum), and the current a pulse is allowed at a V_DS is the
least of the curves of equal or shorter pulse there (a longer pulse heats the junction more;
the lower of crossing curves). Crossing voltages of two straight lines on log-log axes are
solved in closed form.
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest

from server.analysis.document import read_fet
from server.analysis.soa import (allowed_current, envelope_curves, soa_allowed_time, soa_curve_warnings,
                                 soa_envelope_notes)
from server.demo import FETS

from server.schemas.rail import part_document
from server.schemas.validation import parse_fet

from ..factories import fet_doc

T_CASE = 25.0  # derating factor 1 at the chart's own case temperature


def _fet(curves: list[dict]) -> dict:
    doc = part_document(parse_fet(fet_doc()))
    doc["soa"]["curves"] = copy.deepcopy(curves)
    return doc


# 100 µs: 100 A at 1 V falling to 50 A at 10 V; 1 ms: 80 A at 1 V to 60 A at 10 V (crosses above the
# 100 µs curve); DC: 20 A, 25 A at 5 V (rises), 1 A at 30 V.
CROSSING = [
    {"t_pulse": 1e-4, "points": [[1.0, 100.0], [10.0, 50.0], [30.0, 10.0]]},
    {"t_pulse": 1e-3, "points": [[1.0, 80.0], [10.0, 60.0], [30.0, 5.0]]},
    {"t_pulse": None, "points": [[1.0, 20.0], [5.0, 25.0], [30.0, 1.0]]},
]


def _curve(points, v):
    """One curve by itself: log-log interpolation of its running minimum; its first current below
    its first point, nothing above its last."""
    p = np.asarray(points, dtype=float)
    i = np.minimum.accumulate(p[:, 1])
    out = np.exp(np.interp(np.log(v), np.log(p[:, 0]), np.log(i)))
    return np.where(v > p[-1, 0], 0.0, out)


def _reference(curves, k, v):
    """The envelope for curve k (curves by increasing pulse width, DC last): the least of curves 0..k."""
    return np.min([_curve(c["points"], v) for c in curves[:k + 1]], axis=0)


V = np.geomspace(0.5, 30.0, 400)


@pytest.mark.parametrize("k, t_pulse", [(0, 1e-4), (1, 1e-3), (2, math.inf)])
def test_each_pulse_is_allowed_the_least_of_the_curves_of_equal_or_shorter_pulse(k, t_pulse):
    fet = read_fet(_fet(CROSSING))
    got = allowed_current(fet, V, t_pulse, T_CASE)
    np.testing.assert_allclose(got, _reference(CROSSING, k, V), rtol=1e-12)


def test_the_crossing_voltage_is_the_closed_form_one_and_the_warning_names_both_curves():
    # Source: two straight lines on log-log axes, I = a V^m: 100 V^m1 with m1 = log(0.5)/log(10) and
    # 80 V^m2 with m2 = log(0.75)/log(10) cross where (100/80) = V^(m2 - m1).
    m1, m2 = math.log(0.5) / math.log(10), math.log(0.75) / math.log(10)
    v_cross = math.exp(math.log(100 / 80) / (m2 - m1))
    caps, rises = soa_envelope_notes(_fet(CROSSING))
    above = [c for c in caps if c.curve == 1e-3]
    assert len(above) == 1 and above[0].by == 1e-4
    assert above[0].v_from == pytest.approx(v_cross, rel=1e-12)
    # above the 100 µs curve until the 1 ms curve falls below it again between 10 V and 30 V
    b1, b2 = math.log(10 / 50) / math.log(3), math.log(5 / 60) / math.log(3)  # slopes from 10 V to 30 V
    v_back = 10 * math.exp(math.log(60 / 50) / (b1 - b2))
    assert above[0].v_to == pytest.approx(v_back, rel=1e-12)
    warnings = dict(soa_curve_warnings(_fet(CROSSING)))
    text = warnings["fet.soa.curves[1]"]
    assert "the 1 ms curve allows more current than the shorter 100 µs curve" in text
    assert f"from {v_cross:.3g} V" in text and "caps it there at the 100 µs curve" in text
    assert [r.curve for r in rises] == [None] and rises[0].index == 1
    assert "the DC curve's I_D rises with V_DS" in warnings["fet.soa.curves[2].points[1]"]
    assert "25 A read as 20 A" in warnings["fet.soa.curves[2].points[1]"]


def test_warnings_index_the_curves_as_given_in_the_document():
    given = [CROSSING[2], CROSSING[1], CROSSING[0]]  # DC first, as a user may paste them
    paths = {p for p, _ in soa_curve_warnings(_fet(given))}
    assert paths == {"fet.soa.curves[1]", "fet.soa.curves[0].points[1]"}


def test_the_allowed_time_reads_the_envelope():
    fet = read_fet(_fet(CROSSING))
    # at 5 V the 100 µs curve allows 100 * 5^m1 = 61.6 A; the 1 ms curve as drawn would allow
    # 80 * 5^m2 = 65.4 A, more than the shorter pulse: it is capped at 61.6 A
    m1, m2 = math.log(0.5) / math.log(10), math.log(0.75) / math.log(10)
    i_100us, i_1ms_drawn = 100 * 5**m1, 80 * 5**m2
    assert i_100us < 63.0 < i_1ms_drawn
    t = soa_allowed_time(fet, np.full(4, 5.0), np.array([30.0, 0.99 * i_100us, 63.0, 90.0]), T_CASE)
    assert t[0] == pytest.approx(1e-3) and t[1] == pytest.approx(1e-3)  # up to the 1 ms curve, not DC (20 A)
    assert t[2] == 0.0 and t[3] == 0.0  # above the envelope at every pulse width


def test_the_analysis_of_crossing_curves_equals_the_chart_redrawn_as_its_envelope():
    # the envelope is log-log linear between the union of the points and the crossing voltages, so it
    # can be written as points: a chart drawn that way is read exactly as the crossing one
    fet = _fet(CROSSING)
    caps, _ = soa_envelope_notes(fet)
    knots = sorted({p[0] for c in CROSSING for p in c["points"]} | {c.v_from for c in caps} | {c.v_to for c in caps})
    redrawn = []
    for k, c in enumerate(CROSSING):
        v = np.array([x for x in knots if x <= c["points"][-1][0]])
        redrawn.append({"t_pulse": c["t_pulse"], "points": [[float(a), float(b)]
                                                            for a, b in zip(v, _reference(CROSSING, k, v))]})
    plain = _fet(redrawn)
    assert soa_envelope_notes(plain) == ([], [])  # neither crosses nor rises
    v = np.geomspace(0.5, 30.0, 97)
    i = np.geomspace(0.5, 120.0, 97)
    vv, ii = np.meshgrid(v, i)
    a, b = read_fet(fet), read_fet(plain)
    np.testing.assert_allclose(soa_allowed_time(a, vv.ravel(), ii.ravel(), 60.0),
                               soa_allowed_time(b, vv.ravel(), ii.ravel(), 60.0), rtol=1e-9)
    for t in (5e-5, 1e-4, 3e-4, 1e-3, 2e-2, math.inf):
        np.testing.assert_allclose(allowed_current(a, v, t, 60.0), allowed_current(b, v, t, 60.0), rtol=1e-9)


@pytest.mark.parametrize("fet", [*FETS, fet_doc()], ids=[f["name"] for f in [*FETS, fet_doc()]])
def test_curves_that_neither_cross_nor_rise_have_no_note_and_read_as_drawn(fet):
    fet = part_document(parse_fet(fet))
    assert soa_envelope_notes(fet) == ([], [])
    assert soa_curve_warnings(fet) == []
    assert not any(c["capped"] for c in envelope_curves(fet))
    read = read_fet(fet)
    for k, c in enumerate(read.curves):
        v = np.array([p[0] for p in c.points])
        t = math.inf if c.t_pulse is None else c.t_pulse
        got = allowed_current(read, v, t, read.t_case)
        drawn = np.array([p[1] for p in c.points])
        # as drawn, except where a shorter pulse's curve is not drawn (nothing longer allowed there)
        shorter_end = min([s.points[-1][0] for s in read.curves[:k]] or [math.inf])
        np.testing.assert_allclose(got[v <= shorter_end], drawn[v <= shorter_end], rtol=1e-12)


def test_the_envelope_chart_shows_the_capped_curves_below_the_drawn_ones():
    curves = envelope_curves(_fet(CROSSING))
    assert [c["capped"] for c in curves] == [False, True, True]
    one_ms = np.array(curves[1]["points"])
    np.testing.assert_allclose(one_ms[:, 1], _reference(CROSSING, 1, one_ms[:, 0]), rtol=1e-12)

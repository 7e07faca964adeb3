"""Foster stages fitted to transient thermal impedance points (`server.analysis.zth_fit`).

The synthetic curves are built from known stages with the closed form of a Foster network's
step response, Zth(t) = sum r_i (1 - exp(-t / tau_i)) (the Foster form of JEDEC JESD51-14;
from memory), and, for one set, independently as the step response of the network's transfer
function sum r_i / (1 + s tau_i) computed by scipy.signal (a general-purpose reference tool).
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from scipy import integrate

from server.analysis import DocumentError
from server.analysis.thermal import zth
from server.analysis.zth_fit import BOARD_TAU_DEFAULT, FIT_STAGES, fit_zth

# Known stages (r K/W, tau s): invented, spread as a power MOSFET's junction-to-case stages are
KNOWN = [
    [(0.3, 1e-4), (0.9, 1e-2)],
    [(0.1, 5e-5), (0.5, 2e-3), (0.9, 0.1)],
    [(0.05, 1e-5), (0.3, 3e-4), (0.6, 5e-3), (0.35, 8e-2)],
    [(0.02, 3e-6), (0.1, 4e-5), (0.3, 6e-4), (0.8, 8e-3), (0.4, 0.1)],
    [(0.02, 3e-6), (0.1, 4e-5), (0.3, 6e-4), (0.8, 8e-3), (0.4, 0.1), (0.2, 1.5)],
]


def _points(stages, t):
    # Source: Zth(t) = sum r_i (1 - exp(-t / tau_i)), the Foster network's response to a power step
    # (JEDEC JESD51-14, from memory), written out here apart from the code under test.
    z = sum(r * (1.0 - np.exp(-t / tau)) for r, tau in stages)
    return [[float(a), float(b)] for a, b in zip(t, z)]


def _times(stages, per_decade=6):
    taus = [tau for _, tau in stages]
    lo, hi = np.log10(min(taus)) - 1, np.log10(max(taus)) + 1
    return np.logspace(lo, hi, int(round((hi - lo) * per_decade)) + 1)


@pytest.mark.parametrize("stages", KNOWN, ids=[f"{len(k)} stages" for k in KNOWN])
def test_known_stages_are_recovered_within_1_percent(stages):
    fit = fit_zth(_points(stages, _times(stages)), len(stages))
    assert len(fit.stages) == len(stages)
    for (r, tau), (r0, tau0) in zip(fit.stages, stages):
        assert r == pytest.approx(r0, rel=0.01)
        assert tau == pytest.approx(tau0, rel=0.01)
    assert fit.largest_error < 0.01
    assert fit.fitted_total == pytest.approx(sum(r for r, _ in stages), rel=0.01)


def test_stages_are_recovered_from_scipys_integration_of_the_network():
    # Source: scipy.integrate.solve_ivp integrating each stage's equation tau dT/dt + T = r P for a
    # 1 W step from rest (an outside computation of the same curve, not its closed form).
    stages = KNOWN[2]
    t = _times(stages)
    r0, tau0 = np.array(stages).T
    sol = integrate.solve_ivp(lambda _, th: (r0 * 1.0 - th) / tau0, (0.0, t[-1]), np.zeros(len(stages)),
                              method="Radau", t_eval=t, rtol=1e-11, atol=1e-15)
    z = sol.y.sum(axis=0)
    fit = fit_zth([[float(a), float(b)] for a, b in zip(t, z)], 4)
    for (r, tau), (r0, tau0) in zip(fit.stages, stages):
        assert r == pytest.approx(r0, rel=0.01) and tau == pytest.approx(tau0, rel=0.01)


def test_points_read_off_a_chart_with_a_reading_error_are_fitted_within_it():
    # a 1 % reading error, alternating in sign (a chart read by eye): the fit stays within 2 %
    stages = KNOWN[2]
    t = _times(stages)
    pts = _points(stages, t)
    wobble = [1.0 + 0.01 * (-1) ** k for k in range(len(pts))]
    # a chart read by eye is still read rising: the running maximum
    noisy = [[a, float(b)] for (a, _), b in zip(pts, np.maximum.accumulate([b * w for (_, b), w in zip(pts, wobble)]))]
    fit = fit_zth(noisy, 4)
    assert fit.largest_error < 0.02
    truth = np.array([p[1] for p in pts])
    assert np.max(np.abs(fit.curve(t) / truth - 1)) < 0.01


@pytest.mark.parametrize("n", [5, 6])
def test_a_smooth_curve_is_fitted_within_3_percent_at_every_point(n):
    # A smooth single-pulse curve with no Foster form: rising as sqrt(t) at short times (the surface
    # temperature of a semi-infinite solid under a constant heat flux grows as sqrt(t); H. S. Carslaw and
    # J. C. Jaeger, "Conduction of Heat in Solids", from memory), saturating at R_th(j-c) = 1.2 K/W.
    t = np.logspace(-5, 1, 31)
    z = 1.2 * (1.0 - np.exp(-np.sqrt(t / 1e-2)))
    fit = fit_zth([[float(a), float(b)] for a, b in zip(t, z)], n)
    assert fit.largest_error < 0.03
    errors = np.abs(fit.curve(t) / z - 1)
    assert np.max(errors) == pytest.approx(fit.largest_error, rel=1e-9)
    assert fit.largest_error_at == t[int(np.argmax(errors))]


def test_a_pure_power_law_is_fitted_within_3_percent_at_every_point():
    # Zth = 0.5 K/W (t / 10 ms)^0.5 over four decades: no Foster network is exactly this
    t = np.logspace(-5, -1, 25)
    z = 0.5 * np.sqrt(t / 1e-2)
    fit = fit_zth([[float(a), float(b)] for a, b in zip(t, z)], 6)
    assert fit.largest_error < 0.03


def test_the_board_stage_makes_zth_at_long_times_r_th_junction_ambient():
    stages = KNOWN[2]
    fit = fit_zth(_points(stages, _times(stages)), 4, rth_ja=40.0)
    r_b, tau_b = fit.board
    assert r_b == pytest.approx(40.0 - fit.fitted_total, rel=1e-12)
    assert tau_b == BOARD_TAU_DEFAULT and fit.board_tau_default
    assert sum(r for r, _ in fit.all_stages) == pytest.approx(40.0, rel=1e-12)
    # Zth of every stage at a time long beside the slowest, through the analysis's own zth()
    assert float(zth(fit.all_stages, 1e4)) == pytest.approx(40.0, rel=1e-9)
    given = fit_zth(_points(stages, _times(stages)), 4, rth_ja=40.0, board_tau=30.0)
    assert given.board[1] == 30.0 and not given.board_tau_default
    assert given.all_stages[-1] == given.board and given.all_stages[:-1] == given.stages


def test_r_th_junction_ambient_not_above_the_fitted_total_is_refused_on_its_field():
    stages = KNOWN[2]  # they sum to 1.3 K/W
    with pytest.raises(DocumentError) as exc:
        fit_zth(_points(stages, _times(stages)), 4, rth_ja=1.0)
    assert exc.value.field == "fet.rth_ja" and "fitted junction-to-case total" in exc.value.reason
    with pytest.raises(DocumentError) as exc:
        fit_zth(_points(stages, _times(stages)), 4, rth_ja=40.0, board_tau=0.0)
    assert exc.value.field == "fit.board_tau"


@pytest.mark.parametrize("points, field", [
    ([[1e-3, 0.5]], "fet.zth_points"),
    ([[1e-3, 0.5], [1e-4, 0.6], [1e-2, 0.7], [1e-1, 0.8]], "fet.zth_points[1]"),   # t falls
    ([[1e-3, 0.5], [1e-2, 0.4], [1e-1, 0.8], [1.0, 0.9]], "fet.zth_points[1]"),     # Zth falls
    ([[0.0, 0.5], [1e-2, 0.6], [1e-1, 0.8], [1.0, 0.9]], "fet.zth_points[0]"),
    ([[1e-3, 0.5], [1e-2, 0.6], [1e-1, 0.8]], "fet.zth_points"),                    # 3 points for 2 stages
])
def test_bad_points_are_refused_naming_the_field(points, field):
    with pytest.raises(DocumentError) as exc:
        fit_zth(points, 2)
    assert exc.value.field == field


@pytest.mark.parametrize("n", [1, 7, 2.5, True])
def test_the_number_of_stages_is_2_to_6(n):
    assert FIT_STAGES == (2, 3, 4, 5, 6)
    with pytest.raises(DocumentError) as exc:
        fit_zth(_points(KNOWN[0], _times(KNOWN[0])), n)
    assert exc.value.field == "fit.stages"


def test_a_fit_takes_well_under_a_second():
    stages = KNOWN[4]
    pts = _points(stages, _times(stages, per_decade=10))
    start = time.perf_counter()
    fit_zth(pts, 6, rth_ja=40.0)
    assert time.perf_counter() - start < 1.0


def test_the_demo_part_holds_the_fit_of_its_points():
    from server.demo import FETS, FITTED_RTH_JA, FITTED_ZTH_POINTS
    from server.analysis.zth_fit import zth_deviation

    fet = next(f for f in FETS if f.get("zth_points"))
    fit = fit_zth(fet["zth_points"], 5, rth_ja=FITTED_RTH_JA)
    assert fet["zth_points"] == FITTED_ZTH_POINTS
    assert [(s["r"], s["tau"]) for s in fet["zth"]] == list(fit.all_stages)
    assert fit.largest_error < 0.03 and fet["rth_ja"] == FITTED_RTH_JA
    assert sum(s["r"] for s in fet["zth"]) == pytest.approx(FITTED_RTH_JA, rel=1e-12)
    # the stored stages (board stage included) lie below the junction-to-case points by no more than the fit's
    # error; above them by what the board stage adds: 36.9 K/W (1 - exp(-1 s / 10 s)) = 3.5 K/W at 1 s
    seen = zth_deviation(fet["zth"], fet["zth_points"])
    assert seen["below"] <= fit.largest_error + 1e-12
    r_b, tau_b = fit.board
    jc_at_1s = float(fit.curve(1.0))
    assert seen["above_at"] == 1.0
    assert seen["above"] == pytest.approx((jc_at_1s + r_b * -np.expm1(-1.0 / tau_b)) / 1.10 - 1, rel=1e-9)

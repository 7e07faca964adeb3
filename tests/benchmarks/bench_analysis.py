"""Benchmark of the analysis core: run as ``python tests/benchmarks/bench_analysis.py``.

Prints, measured side by side in the same run on this machine:

- the nominal analysis of each demo rail (median), with and without the headroom search,
  and the number of start-up transients the headroom search ran;
- the full tolerance-corner set (median);
- Monte Carlo of 10,000 samples (median of 3) and its peak memory (tracemalloc, in a
  separate run because tracing slows allocation; and the process's peak RSS);
- the headroom search's choice of back end: one candidate capacitance on the float back
  end against a batch of 16 candidates on the array back end;
- per-sample cost of the start-up transient on one circuit: our batch integrator over
  2,000 samples, our single-row path, a straightforward loop calling
  ``scipy.integrate.solve_ivp`` (Radau) once per sample, and ngspice in batch mode once
  per sample (process start included), with the speed ratios and the agreement of the
  figures;
- the cost of the R_DS(on) spread and parallel FETs: nominal, the sign-off worst case
  (corners and search) and Monte Carlo of 10,000 samples of a rail as it is, and with
  ``fet.rds_on_max`` (1.3 x typical) alone (the cost of the dimension: the physics is the
  same at the typical corner), with ``fet.count`` 2 (a cooler FET: different transients) and
  with an R_DS(on) table as well, with the ratios (goal: at most 2 x).

Not collected by pytest (the name does not start with ``test_``).
"""

from __future__ import annotations

import copy
import math
import resource
import statistics
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from scipy.integrate import solve_ivp  # noqa: E402

from server.analysis import analyze_rail  # noqa: E402
from server.analysis.circuit import R_OFF, circuit_rows  # noqa: E402
from server.analysis.document import read_rail  # noqa: E402
from server.analysis.corners import corner_params, corner_set  # noqa: E402
from server.analysis.evaluation import startup_rows  # noqa: E402
from server.analysis.worstcase import evaluate_unique  # noqa: E402
from server.analysis.montecarlo import sample_params  # noqa: E402
from server.analysis.startup import simulate_startup  # noqa: E402
from server.analysis.thermal import foster_arrays  # noqa: E402
from tests.analysis import rail_documents as rd  # noqa: E402
from tests.analysis.spice import NGSPICE, simulate_ngspice  # noqa: E402

RAILS = {
    "efuse_12v (current limit)": rd.efuse_12v,
    "hotswap_48v (power limit)": rd.hotswap_48v,
    "load_switch_5v (hard)": rd.load_switch_5v,
    "slew_24v (slew)": rd.slew_24v,
    "slew_12v_demo (slew, notch)": rd.slew_12v_demo,
}


def median_time(fn, repeat: int) -> float:
    fn()  # warm up
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def ms(x: float) -> str:
    return f"{x * 1e3:8.2f} ms"


def section_speed() -> None:
    print("Whole analyses (median)")
    print(f"  {'rail':28s} {'nominal':>11s} {'corners':>11s} {'worst case':>11s} {'+headroom':>11s} {'MC 10k':>10s}"
          f" {'MC peak':>10s}")
    for name, make in RAILS.items():
        doc = make()
        t_nom = median_time(lambda: analyze_rail(doc, corners=False, headroom=False), 30)
        rail = read_rail(doc)
        cp = corner_params(corner_set(rail))
        t_cor = median_time(lambda: evaluate_unique(rail, rail.rules, cp), 10)
        t_wc = median_time(lambda: analyze_rail(doc, headroom=False, waveforms=False), 5)
        t_head = median_time(lambda: analyze_rail(doc), 5)
        res = analyze_rail(doc, waveforms=False)
        trials, n_c, n_s = (res["headroom"]["c_max"]["trials"], res["worst_case"]["corners"],
                            res["worst_case"]["search_points"])
        t_mc = median_time(lambda: analyze_rail(doc, corners=False, monte_carlo=10000, headroom=False,
                                                waveforms=False), 3)
        tracemalloc.start()
        analyze_rail(doc, corners=False, monte_carlo=10000, headroom=False, waveforms=False)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        print(f"  {name:28s} {ms(t_nom):>11s} {ms(t_cor):>11s} {ms(t_wc):>11s} {ms(t_head):>11s} {t_mc:8.3f} s "
              f"{peak / 1e6:7.1f} MB   ({n_c} corners, {n_s} searched points, {trials} headroom transients)")
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"  process peak RSS so far: {rss:.0f} MB")
    print("  goals: nominal < 10 ms, corners < 100 ms, the sign-off worst case < 1 s, MC 10k < 1 s with peak "
          "memory < 300 MB")


def section_headroom_backends() -> None:
    """One candidate capacitance per float-path transient, or a batch of candidates."""
    print()
    print("Headroom candidates: one row on the float back end, or 16 rows in one array batch")
    for name, make in RAILS.items():
        rail = read_rail(make())
        c0 = rail.load.c_nom
        one = circuit_rows(rail, v_s=[rail.supply.v_nom], c=[1.3 * c0])
        batch = circuit_rows(rail, v_s=np.full(16, rail.supply.v_nom), c=c0 * np.geomspace(0.25, 4.0, 16))
        t1 = median_time(lambda: simulate_startup(one), 15)
        t16 = median_time(lambda: simulate_startup(batch), 5)
        print(f"  {name:28s} one row {ms(t1)}   16 rows {ms(t16)}   ({t16 / t1:4.1f} single rows)")


# --------------------------------------------------------------------------------------
# one circuit, three engines


def comparison_doc() -> dict:
    """The eFuse rail without series inductance (its start-up is then an ODE) and with a
    temperature-independent Rds(on) (the ngspice netlist has no thermal coupling)."""
    doc = rd.efuse_12v()
    doc["supply"]["l_source"] = 0.0
    doc["path"]["l"] = 0.0
    doc["fet"]["rds_on_alpha"] = 0.0
    return doc


def solve_ivp_sample(rail, v_s: float, c: float, i_lim: float, t_end: float) -> dict:
    """The same circuit as an explicit ODE in (v_c, Foster rises, energy, time limited)."""
    s, p, ld, fet = rail.supply, rail.path, rail.load, rail.fet
    r = s.r_source + p.r
    esr = ld.esr
    g = ld.i_nom / s.v_nom  # resistive load conductance
    r_th, tau = foster_arrays(fet.zth)
    t_on = rail.switch.t_on
    k = r_th.size

    def algebra(t, y):
        tj = rail.t_ambient + float(np.sum(y[1:1 + k]))
        r_on = fet.rds_on * max(1.0 + fet.rds_on_alpha * (tj - 25.0), 0.1)
        if t_on > 0 and t < t_on:
            r_sw = math.exp(math.log(R_OFF) + (t / t_on) * (math.log(r_on) - math.log(R_OFF)))
        else:
            r_sw = r_on
        den = 1.0 + g * esr
        i_free = (v_s - y[0] / den) / (r + r_sw + esr / den)
        i = min(i_free, i_lim)
        v_out = (y[0] + esr * i) / den
        v_ds = v_s - r * i - v_out
        return i, v_out, v_ds, i_free > i_lim

    def rhs(t, y):
        i, v_out, v_ds, lim = algebra(t, y)
        pw = v_ds * i
        return np.concatenate(([(i - g * v_out) / c], (r_th * pw - y[1:1 + k]) / tau, [pw, 1.0 if lim else 0.0]))

    y0 = np.zeros(k + 3)
    sol = solve_ivp(rhs, (0.0, t_end), y0, method="Radau", rtol=1e-6, atol=1e-9, max_step=t_end / 200)
    i_all = [algebra(t, y)[0] for t, y in zip(sol.t, sol.y.T)]
    return {"i_peak": max(i_all), "e_fet": float(sol.y[k + 1, -1]), "t_limit": float(sol.y[k + 2, -1]),
            "tj_peak": rail.t_ambient + float(np.max(np.sum(sol.y[1:1 + k], axis=0)))}


def section_engines() -> None:
    doc = comparison_doc()
    rail = read_rail(doc)
    n_batch = 2000
    params, _ = sample_params(rail, n_batch, seed=1, distribution="uniform")
    print()
    print("One circuit, three engines: eFuse start-up, no series inductance, constant Rds(on)")
    t_batch = median_time(lambda: startup_rows(rail, params), 3)
    per_batch = t_batch / n_batch
    ours = startup_rows(rail, params)
    assert np.all(ours.status == 0)

    def single(j):
        cz = circuit_rows(rail, v_s=[params.v_s[j]], c=[params.c[j]], i_limit=[params.i_lim[j]])
        return simulate_startup(cz)

    n_single = 200
    t0 = time.perf_counter()
    for j in range(n_single):
        single(j)
    per_single = (time.perf_counter() - t0) / n_single

    n_ivp = 40
    t0 = time.perf_counter()
    ivp = [solve_ivp_sample(rail, params.v_s[j], params.c[j], params.i_lim[j], float(ours.t_end[j]))
           for j in range(n_ivp)]
    per_ivp = (time.perf_counter() - t0) / n_ivp

    n_ng = 10
    per_ng = per_ng_coarse = None
    ng = []

    def run_ng(j, points):
        with tempfile.TemporaryDirectory() as d:
            return simulate_ngspice(
                Path(d), t_stop=float(ours.t_end[j]), v=params.v_s[j], r=rail.supply.r_source + rail.path.r,
                l=0.0, c=params.c[j], esr=rail.load.esr, r_load=rail.supply.v_nom / rail.load.i_nom,
                mode="current_limit", rds=rail.fet.rds_on, i_limit=params.i_lim[j], dvdt=None,
                t_on=rail.switch.t_on, r_off=R_OFF, points=points)

    if NGSPICE is not None:
        t0 = time.perf_counter()
        ng = [run_ng(j, 20000) for j in range(n_ng)]  # max step t_end / 20000: the reference
        per_ng = (time.perf_counter() - t0) / n_ng
        t0 = time.perf_counter()
        ng_coarse = [run_ng(j, 200) for j in range(n_ng)]  # max step t_end / 200
        per_ng_coarse = (time.perf_counter() - t0) / n_ng

    print(f"  ours, batch of {n_batch} rows     {per_batch * 1e6:9.1f} us per sample ({t_batch * 1e3:.1f} ms in all)")
    print(f"  ours, one row (float path)    {per_single * 1e6:9.1f} us per sample ({n_single} samples)")
    print(f"  solve_ivp Radau, one per call {per_ivp * 1e6:9.1f} us per sample ({n_ivp} samples)")
    if per_ng is not None:
        print(f"  ngspice -b, one per process   {per_ng * 1e6:9.1f} us per sample ({n_ng} samples, max step t/20000)")
        print(f"  ngspice -b, coarse max step   {per_ng_coarse * 1e6:9.1f} us per sample ({n_ng} samples, max step t/200)")
    else:
        print("  ngspice: not installed (install the Debian package ngspice)")
    print(f"  ratio solve_ivp / ours batch: {per_ivp / per_batch:8.1f} x")
    print(f"  ratio solve_ivp / ours row:   {per_ivp / per_single:8.1f} x")
    if per_ng is not None:
        print(f"  ratio ngspice / ours batch:   {per_ng / per_batch:8.1f} x")
        print(f"  ratio ngspice / ours row:     {per_ng / per_single:8.1f} x")
        print(f"  ratio ngspice coarse / batch: {per_ng_coarse / per_batch:8.1f} x")

    def worst(key, other, n):
        return max(abs(getattr(ours, key)[j] / other[j][key] - 1.0) for j in range(n) if other[j][key] > 0)

    print("  largest relative difference over the compared samples:")
    for key in ("i_peak", "e_fet", "t_limit"):
        line = f"    {key:8s} vs solve_ivp {worst(key, ivp, n_ivp):.2e}"
        if ng:
            line += f"   vs ngspice {worst(key, ng, n_ng):.2e}   vs ngspice coarse {worst(key, ng_coarse, n_ng):.2e}"
        print(line)
    print(f"    tj_peak  vs solve_ivp {max(abs(ours.tj_peak[j] - ivp[j]['tj_peak']) for j in range(n_ivp)):.2e} K")


def section_stiff() -> None:
    """A supercapacitor rail: 10 nH with 1 F, microseconds and seconds in one run."""
    fet = copy.deepcopy(rd.FET_40V)  # on an invented water-cooled block: the 72 J start stays below tj_max
    fet["zth"] = [{"r": 0.02 * st["r"], "tau": st["tau"]} for st in fet["zth"]]
    fet["rth_ja"] *= 0.02
    doc = rd.simple_doc(mode="current_limit", v=12.0, c=1.0, r=1e-3, l=10e-9, esr=1e-3, load="resistive",
                        i_nom=0.5, i_limit=10.0, rds_on=2e-3, fet=fet)
    rail = read_rail(doc)
    cz = circuit_rows(rail, v_s=[12.0], c=[1.0])
    t = median_time(lambda: simulate_startup(cz), 10)
    fig = simulate_startup(cz)
    print()
    print("Stiff case: 10 nH and 1 F, 10 A limit, 12 V")
    print(f"  start-up {fig.t_limit[0]:.3f} s of regulation in {int(fig.steps[0])} steps, {ms(t)}")


def _with_fet_data(doc: dict, table: bool, count: int = 2) -> dict:
    doc = copy.deepcopy(doc)
    doc["fet"].update(rds_on_max=doc["fet"]["rds_on"] * 1.3, count=count)
    if table:
        doc["fet"]["rds_on_curve"] = [[-55.0, 0.6], [25.0, 1.0], [100.0, 1.4], [175.0, 1.95]]
    return doc


def section_fet_data() -> None:
    print()
    print("R_DS(on) maximum and two parallel FETs (and an R_DS(on) table) against the rail as it is (median)")
    print(f"  {'rail':28s} {'variant':14s} {'nominal':>11s} {'worst case':>11s} {'MC 10k':>10s}  ratios to the rail")
    for name, make in list(RAILS.items())[:3]:
        base = None
        for variant, doc in (("as it is", make()), ("max only", _with_fet_data(make(), False, 1)),
                             ("max + 2 FETs", _with_fet_data(make(), False)),
                             ("+ table", _with_fet_data(make(), True))):
            t_nom = median_time(lambda: analyze_rail(doc, corners=False, headroom=False, waveforms=False), 10)
            t_wc = median_time(lambda: analyze_rail(doc, headroom=False, waveforms=False), 3)
            t_mc = median_time(lambda: analyze_rail(doc, corners=False, monte_carlo=10000, headroom=False,
                                                    waveforms=False), 3)
            base = base or (t_nom, t_wc, t_mc)
            ratios = " ".join(f"{a / b:4.2f}" for a, b in zip((t_nom, t_wc, t_mc), base))
            print(f"  {name:28s} {variant:14s} {ms(t_nom):>11s} {ms(t_wc):>11s} {t_mc:8.3f} s  {ratios}")


def main() -> None:
    print(f"railsign analysis benchmark (python {sys.version.split()[0]}, numpy {np.__version__})")
    section_speed()
    section_headroom_backends()
    section_engines()
    section_stiff()
    section_fet_data()


if __name__ == "__main__":
    main()

"""A readable text report of an analysis result.

Provides
--------
format_report(result, doc)
    The result of `analyze_rail` as plain text: the rail, the headline figures in
    engineering notation, a table of checks (verdict in words, value, limit, unit, basis),
    the timer window and headroom, corners and Monte Carlo summaries when present, and the
    caution line. Pure string formatting: no I/O.
"""

from __future__ import annotations

from .units import eng, temp

__all__ = ["format_report"]

_UNIT_FMT = {"V": "V", "A": "A", "ratio": "", "degC": "degC"}


def _val(x, unit: str) -> str:
    if x is None:
        return "-"
    if unit == "degC":
        return temp(x)
    if unit == "ratio":
        return f"{x:.3g}"
    return eng(x, unit)


def _row(cols, widths) -> str:
    return "  ".join(str(c).ljust(w) for c, w in zip(cols, widths)).rstrip()


def format_report(result: dict, doc: dict) -> str:
    """Format an analysis result as a text report.

    Parameters
    ----------
    result : dict
        Output of `analyze_rail`.
    doc : dict
        The rail document that was analysed (for its name and key parameters).

    Returns
    -------
    str
        The report, lines separated by newlines, ending with the caution line.
    """
    lines: list[str] = []
    name = result.get("name") or doc.get("name") or "(unnamed rail)"
    sup, load, sw, fet = doc.get("supply", {}), doc.get("load", {}), doc.get("switch", {}), doc.get("fet", {})
    lines.append(f"railsign analysis: {name}")
    lines.append(f"engine {result.get('engine_version')}   verdict: {result.get('verdict', 'n/a').upper()}")
    lines.append("")
    lines.append(
        f"Supply {eng(sup.get('v_min'), 'V')} .. {eng(sup.get('v_max'), 'V')} (nominal {eng(sup.get('v_nom'), 'V')}); "
        f"load {eng(load.get('c_nom'), 'F')} {load.get('model', 'none')}; switch {sw.get('mode')}; FET {fet.get('name')}"
    )
    lines.append("")
    s = result.get("startup") or {}
    lines.append("Start-up (nominal)")
    if s.get("status") == "stalled":
        lines.append(f"  does not complete: the output stalls near {eng(s.get('v_stall'), 'V')}")
    else:
        lines.append(f"  peak current {eng(s.get('i_peak'), 'A')}, regulating for {eng(s.get('t_limit'), 's')}, "
                     f"settled after {eng(s.get('t_settle'), 's')}")
        lines.append(f"  FET energy {eng(s.get('e_fet'), 'J')}, peak power {eng(s.get('p_fet_peak'), 'W')}, "
                     f"peak Tj {temp(s.get('tj_peak'))}, lowest switch input {eng(s.get('v_supply_min'), 'V')} "
                     f"through the UVLO filter (unfiltered {eng(s.get('v_supply_min_raw'), 'V')})")
        lines.append(f"  equivalent rectangle {eng(s.get('pulse_p_peak'), 'W')} for {eng(s.get('pulse_t_equiv'), 's')}")
    sc = result.get("short_circuit") or {}
    if sc.get("applies"):
        allow = "indefinitely" if sc.get("survives_indefinitely") else eng(sc.get("t_allow"), "s")
        lines.append("Short circuit")
        lines.append(f"  {eng(sc.get('p'), 'W')} at {eng(sc.get('v_ds'), 'V')} and {eng(sc.get('i'), 'A')}: "
                     f"SOA allows {eng(sc.get('t_soa'), 's')}, Foster network {eng(sc.get('t_thermal'), 's')}, "
                     f"survives {allow}")
    tm = result.get("timer")
    if tm:
        lines.append("Fault timer")
        lines.append(f"  trips after {eng(tm.get('t_fault_min'), 's')} .. {eng(tm.get('t_fault_max'), 's')} "
                     f"(nominal {eng(tm.get('t_fault_nom'), 's')})")
        win = tm.get("c_window")
        if win:
            hi = "no upper bound" if win[1] is None else eng(win[1], "F")
            lines.append(f"  capacitor window {eng(win[0], 'F')} .. {hi}; suggested {eng(tm.get('c_suggested'), 'F')} (E12)")
        if tm.get("window_note"):
            lines.append(f"  {tm['window_note']}")
    rt = result.get("retry")
    if rt:
        lines.append(f"Retry: duty {rt['duty']:.3g}, average {eng(rt.get('p_avg'), 'W')}, peak Tj {temp(rt.get('tj_peak'))}")
    st = result.get("steady") or {}
    lines.append(f"Steady conduction: {eng(st.get('p_fet'), 'W')} in the FET, Tj {temp(st.get('tj'))}, "
                 f"drop {eng(st.get('v_drop'), 'V')}{'' if st.get('stable') else ', THERMAL RUNAWAY'}")
    hd = result.get("headroom") or {}
    c_max = eng(hd.get("c_max"), "F") if hd.get("c_max") is not None else (hd.get("c_max_note") or "n/a")
    i_max = eng(hd.get("i_limit_max"), "A") if hd.get("i_limit_max") is not None else (hd.get("i_limit_max_note") or "n/a")
    lines.append(f"Headroom: largest load capacitance {c_max}; highest current limit {i_max}")
    lines.append("")

    checks = result.get("checks") or []
    corners = any(c.get("corner") for c in checks)
    head = ["check", "verdict", "value", "limit", "unit", "basis"] + (["worst corner"] if corners else [])
    rows = []
    for c in checks:
        unit = c.get("unit", "")
        r = [c["id"], c["verdict"].upper(), _val(c.get("value"), unit), _val(c.get("limit"), unit), unit, c.get("basis", "")]
        if corners:
            r.append(c.get("corner") or "")
        rows.append(r)
    widths = [max(len(str(x)) for x in col) for col in zip(head, *rows)]
    lines.append("Checks" + (" (worst case over the tolerance corners)" if corners else " (nominal)"))
    lines.append(_row(head, widths))
    lines.append(_row(["-" * w for w in widths], widths))
    for r in rows:
        lines.append(_row(r, widths))
    lines.append("")
    for c in checks:
        if c["verdict"] in ("fail", "marginal"):
            lines.append(f"  {c['id']}: {c.get('detail', '')}")
    lines.append("Team limits (soa_margin, fault_margin, timer_margin, tj_headroom, vds_derating) are common practice, not a standard.")

    mc = result.get("monte_carlo")
    if mc:
        lo, hi = mc["yield_ci95"]
        lines.append("")
        lines.append(f"Monte Carlo: {mc['n']} samples ({mc['distribution']}, seed {mc['seed']}): "
                     f"yield {100 * mc['yield']:.2f} % (95 % interval {100 * lo:.2f} .. {100 * hi:.2f} %), "
                     f"no failing check {100 * mc['yield_no_fail']:.2f} %")
        for cid, m in mc.get("margins", {}).items():
            u = m.get("unit", "")
            lines.append(f"  {cid}: p01 {_val(m.get('p01'), u)}  p50 {_val(m.get('p50'), u)}  "
                         f"p99 {_val(m.get('p99'), u)}  limit {_val(m.get('limit'), u)}")
    cl = result.get("corners")
    if cl:
        lines.append("")
        lines.append(f"Corners evaluated: {len(cl)}; failing: "
                     f"{sum(1 for c in cl if c['verdict'] == 'fail')}, marginal: {sum(1 for c in cl if c['verdict'] == 'marginal')}")
    for note in result.get("notes") or []:
        lines.append(f"Note: {note}")
    lines.append("")
    lines.append("Caution: " + (result.get("caution") or
                 "the tool computes design margins, it does not certify hardware; verify on hardware; "
                 "follow applicable codes and licensed practice."))
    return "\n".join(lines) + "\n"

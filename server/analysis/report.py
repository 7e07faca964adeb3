"""A readable text report of an analysis result.

Provides
--------
format_report(result, doc)
    The result of `analyze_rail` as plain text for people: the verdict and its basis, the
    check table (title, verdict, value, limit with its direction, margin, where the worst
    case lies), the key figures nominal and worst case side by side, the reasons of the
    failing and marginal checks, headroom, the fault timer, the short circuit's onset and
    turn-off, retries, Monte Carlo, the conventions and the caution. Pure string formatting from the result's records: nothing is
    recomputed.
bank_view(bank)
    The result's capacitor bank (``result["bank"]``) in words and units, as the report, the
    rail page and the PDF show it.
"""

from __future__ import annotations

from .units import eng, temp

__all__ = ["format_report", "value_text", "limit_text", "margin_text"]


def value_text(x, unit: str) -> str:
    """A check value or figure in words and units ("-" when there is none)."""
    if x is None:
        return "-"
    if unit == "degC":
        return temp(x)
    if unit == "ratio":
        return f"{x:.3g}"
    return eng(x, unit)


def limit_text(check: dict) -> str:
    """The limit with its direction: "≥ 1.5", "≤ 125.0 °C"."""
    if check.get("limit") is None:
        return "-"
    sign = {">=": "\u2265 ", "<=": "\u2264 "}.get(check.get("direction") or "", "")
    return sign + value_text(check["limit"], check.get("unit", ""))


def margin_text(margin) -> str:
    """The normalised margin: "1.53×" (1.00× is the team limit)."""
    return "-" if margin is None else f"{margin:.3g}\u00d7"


def _table(rows: list[list[str]], head: list[str]) -> list[str]:
    widths = [max(len(str(x)) for x in col) for col in zip(head, *rows)]
    line = lambda cols: "  ".join(str(c).ljust(w) for c, w in zip(cols, widths)).rstrip()  # noqa: E731
    return [line(head), line(["-" * w for w in widths])] + [line(r) for r in rows]


def _basis_line(result: dict) -> str:
    wc = result.get("worst_case") or {}
    if result.get("basis") == "nominal":
        return "basis: nominal point only (a quick look, NOT a sign-off verdict)"
    return (f"basis: worst case over {wc.get('corners', 0)} tolerance corners and {wc.get('search_points', 0)} "
            "points searched inside the tolerance box")


def _check_rows(result: dict) -> list[str]:
    rows = []
    worst_case = result.get("basis") != "nominal"
    for c in result.get("checks") or []:
        unit = c.get("unit", "")
        where = c.get("corner") or ""
        if c.get("found_by") == "search":
            where += " (found by the search)"
        row = [c["verdict"].upper(), c["title"], value_text(c.get("value"), unit), limit_text(c),
               margin_text(c.get("margin")), value_text(c.get("t_start"), "degC")]
        if worst_case:
            row += [value_text((c.get("nominal") or {}).get("value"), unit), where]
        rows.append(row)
    head = ["verdict", "check", "value", "limit", "margin", "starts at"]
    if worst_case:
        head += ["nominal", "worst case at"]
    return _table(rows, head)


def _figure_rows(result: dict) -> list[str]:
    rows = []
    for f in result.get("figures") or []:
        unit = f.get("unit", "")
        rows.append([f["title"], value_text(f.get("nominal"), unit), value_text(f.get("worst"), unit),
                     f.get("corner") or ""])
    if not rows:
        return []
    if result.get("basis") == "nominal":
        return _table([r[:2] for r in rows], ["figure", "nominal"])
    return _table(rows, ["figure", "nominal", "worst case", "worst case at"])


def _timer_lines(tm: dict) -> list[str]:
    lines = [f"Fault timer: trips after {eng(tm.get('t_fault_min'), 's')} to {eng(tm.get('t_fault_max'), 's')} "
             f"(nominal {eng(tm.get('t_fault_nom'), 's')})"]
    win = tm.get("c_window")
    if win:
        hi = "no upper bound" if win[1] is None else eng(win[1], "F")
        sug = f"; suggested {eng(tm['c_suggested'], 'F')} (E12, IEC 60063)" if tm.get("c_suggested") else ""
        lines.append(f"  timer capacitors meeting both margins: {eng(win[0], 'F')} to {hi}{sug}")
    if tm.get("window_note"):
        lines.append(f"  {tm['window_note']}")
    return lines


def _fault_edge_lines(sc: dict, retry: dict | None) -> list[str]:
    """The short circuit's starting temperature, onset and turn-off, and the retry train, at the nominal point."""
    lines = []
    if sc.get("t_start") is not None:
        lines.append(f"Short circuit at nominal: starts from {temp(sc['t_start'])} (the steady state at the "
                     "operating point)")
    on = sc.get("onset")
    if on:
        acted = {"loop": "the current loop takes over", "fast_trip": "the fast trip turns the switch off"}.get(
            on.get("acted_by") or "", "nothing acts during the onset")
        after = f" after {eng(on['t_act'], 's')}" if on.get("t_act") is not None else ""
        lines.append(f"  onset: peak {eng(on.get('i_peak'), 'A')}; {acted}{after}; FET energy "
                     f"{eng(on.get('e_fet'), 'J')}; the SOA from {temp(on.get('t_start'))} allows "
                     f"{eng(on.get('soa_allowed'), 'A')}")
    off = sc.get("turn_off")
    if off:
        by = {"input_capacitance": "the input capacitance", "input_clamp": "the input clamp",
              "breakdown": "the FET's breakdown (avalanche)"}.get(off.get("clamped_by") or "", "nothing")
        event = "the fast trip" if off.get("event") == "fast_trip" else "the fault timer"
        lines.append(f"  turn-off by {event} at {eng(off.get('i'), 'A')}: V_DS peaks at "
                     f"{eng(off.get('v_peak'), 'V')} held by {by}; ½ L I² {eng(off.get('e_half_li2'), 'J')}, "
                     f"in the FET {eng(off.get('e_fet'), 'J')}")
    if retry:
        count = "without end" if retry.get("retries") is None else f"{retry['retries']} retries, then latches"
        lines.append(f"Retry at nominal: {count}; cool-down ratio {retry.get('cooldown_ratio', 0):.3g} (off / on); "
                     f"peak {temp(retry.get('tj_peak'))} from {temp(retry.get('t_start'))}")
    return lines


def _monte_carlo_lines(mc: dict) -> list[str]:
    lo, hi = mc["yield_ci95"]
    kinds = mc.get("distributions") or {}
    dist = ", ".join(f"{k} {v}" for k, v in kinds.items())
    lines = [f"Monte Carlo: {mc['n']} samples (seed {mc['seed']}; {dist}; normal = tolerance as 3 sigma, "
             "truncated to the tolerance box)",
             f"  yield {100 * mc['yield']:.2f} % pass every check (95 % interval {100 * lo:.2f} to {100 * hi:.2f} %); "
             f"{100 * mc['yield_no_fail']:.2f} % have no failing check"]
    rows = []
    for cid, m in (mc.get("checks") or {}).items():
        if not m.get("applies"):
            continue
        mg = m.get("margin") or {}
        rows.append([m["title"], f"{100 * m['fail_share']:.2f} %", f"{100 * m['marginal_share']:.2f} %",
                     margin_text(mg.get("min")), margin_text(mg.get("p50")),
                     margin_text(m.get("worst_case_margin"))])
    if rows:
        lines += ["  " + x for x in _table(rows, ["check", "failing", "marginal", "lowest margin", "median margin",
                                                   "worst case margin"])]
    for flag in mc.get("flags") or []:
        lines.append(f"  FLAG: {flag['samples']} sample(s) read worse than the sign-off worst case for "
                     f"{flag['title']}: margin {margin_text(flag.get('margin'))} at {flag['point']} against "
                     f"{margin_text(flag.get('worst_case_margin'))}; not folded into the verdict.")
    return lines


def _fet_lines(result: dict) -> list[str]:
    """The FET data the result used (parallel count, shares, R_DS(on) spread and data over T_j), and
    which R_DS(on) each check read; nothing for a rail without them."""
    f = result.get("fet")
    if not f:
        return []
    lines = [f"MOSFETs in parallel: {f['count']}; R_DS(on) at 25 \u00b0C {eng(f['rds_on'], 'ohm')} typical"
             + (f", {eng(f['rds_on_max'], 'ohm')} maximum" if f.get("rds_on_max") is not None else "")
             + f"; {f['rds_data']} (beyond it: fails as beyond the part's data)"]
    if f["count"] > 1:
        lines.append(f"  largest share fully on {100 * f['conduction_share']:.3g} % (current divider); while "
                     f"regulating {100 * f['linear_share']:.3g} % (team rule linear_share, common practice, no source)")
    used = [f"{c['title']}: {eng(c['rds_on'], 'ohm')}" for c in result.get("checks") or []
            if c.get("rds_on") is not None]
    if used and f.get("rds_on_max") is not None:
        lines.append("  R_DS(on) used: " + "; ".join(used))
    return lines


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
        The report, lines separated by newlines, with the caution line near the top and
        at the end.
    """
    lines: list[str] = []
    name = result.get("name") or doc.get("name") or "(unnamed rail)"
    sup, load, sw, fet = doc.get("supply", {}), doc.get("load", {}), doc.get("switch", {}), doc.get("fet", {})
    lines.append(f"railsign analysis: {name}")
    lines.append(f"engine {result.get('engine_version')}   verdict: {result.get('verdict', 'n/a').upper()}   "
                 f"{_basis_line(result)}")
    lines.append(f"Caution: {result.get('caution', '')}")
    lines.append("")
    mode = str(sw.get("mode", "")).replace("_", " ")
    bank = result.get("bank")
    c_load = (f"capacitor bank {eng(bank.get('c_total'), 'F')} nominal" if bank else eng(load.get('c_nom'), 'F'))
    lines.append(f"Supply {eng(sup.get('v_min'), 'V')} to {eng(sup.get('v_max'), 'V')} (nominal "
                 f"{eng(sup.get('v_nom'), 'V')}); load {c_load}, "
                 f"{str(load.get('model', 'none')).replace('_', ' ')}; {mode} switch; MOSFET {fet.get('name')}")
    lines += _bank_lines(bank)
    lines += _fet_lines(result)
    lines += _switch_extras(sw, fet)
    lines.append("")
    lines.append("Checks" + (" (sign-off reading: each check's worst case)" if result.get("basis") != "nominal"
                             else " (nominal point only)"))
    lines += _check_rows(result)
    lines.append("")
    problems = [c for c in result.get("checks") or [] if c["verdict"] in ("fail", "marginal")]
    if problems:
        lines.append("Why:")
        for c in problems:
            lines.append(f"  {c['title']} ({c['verdict']}): {c.get('detail', '')}")
        lines.append("")
    lines.append("Team limits are common practice, not a standard. Marginal: between the team limit and the bare "
                 "physical edge.")
    lines.append("")
    fig_rows = _figure_rows(result)
    if fig_rows:
        lines.append("Key figures")
        lines += fig_rows
        lines.append("")
    hd = result.get("headroom") or {}
    for key in ("c_max", "limit_max", "load_max"):
        h = hd.get(key)
        if h:
            value = value_text(h.get("value"), h.get("unit", "")) if h.get("value") is not None else "-"
            lines.append(f"{h['title']}: {value}. {h.get('note') or ''}".rstrip())
    tm = result.get("timer")
    if tm:
        lines += _timer_lines(tm)
    lines += _fault_edge_lines(result.get("short_circuit") or {}, result.get("retry"))
    st = result.get("startup") or {}
    if st and not st.get("complete", True):
        lines.append(f"Start-up at nominal: {st.get('status')}.")
    mc = result.get("monte_carlo")
    if mc:
        lines.append("")
        lines += _monte_carlo_lines(mc)
    lines.append("")
    for text in result.get("conventions") or []:
        lines.append(f"Convention: {text}")
    shown = set((bank or {}).get("notes") or ())  # the bank's notes stand with the bank above
    for note in result.get("notes") or []:
        if note not in shown:
            lines.append(f"Note: {note}")
    lines.append("")
    lines.append("Caution: " + (result.get("caution") or ""))
    return "\n".join(lines) + "\n"


def _percent(x) -> str:
    return "-" if x is None else f"{100.0 * x:.3g} %"


def bank_view(bank: dict | None) -> dict | None:
    """The result's capacitor bank (``result["bank"]``) in words and units for the rail page and the report:
    per group its designators, count, dielectric, value, total, capacitance at the working voltage (and
    its share of nominal), rating and ESR; the bank's totals and notes. Every figure is the record's."""
    if not bank:
        return None
    rows = []
    for k, g in enumerate(bank.get("groups") or []):
        if g.get("has_curve"):
            read = "its DC-bias curve"
        elif g.get("derating"):
            lo, hi = g["derating"]
            read = f"derating range {_percent(lo)} to {_percent(hi)} of nominal"
        else:
            read = "nominal (no DC-bias curve)"
        rows.append({"refs": g.get("refs") or f"group {k + 1}", "count": g["count"], "dielectric": g["dielectric"],
                     "c_each": eng(g["c_each"], "F"), "c_tol": _percent(g.get("c_tol")),
                     "c_total": eng(g["c_total"], "F"), "c_at_v_nom": eng(g["c_at_v_nom"], "F"),
                     "fraction_at_v_nom": _percent(g["fraction_at_v_nom"]), "c_effective": eng(g["c_effective"], "F"),
                     "v_rated": eng(g["v_rated"], "V"), "esr": eng(g["esr"], "ohm"), "read": read})
    return {"rows": rows, "c_total": eng(bank.get("c_total"), "F"), "c_at_v_nom": eng(bank.get("c_at_v_nom"), "F"),
            "fraction_at_v_nom": _percent(bank.get("fraction_at_v_nom")),
            "c_effective": eng(bank.get("c_effective"), "F"), "v_nom": eng(bank.get("v_nom"), "V"),
            "notes": list(bank.get("notes") or []),
            "count": sum(int(g["count"]) for g in bank.get("groups") or [])}


def _bank_lines(bank: dict | None) -> list[str]:
    """The capacitor bank as the result holds it: its totals, a row per group, its notes."""
    view = bank_view(bank)
    if view is None:
        return []
    out = [f"Capacitor bank: {view['count']} capacitors, {view['c_total']} nominal at 0 V; {view['c_at_v_nom']} at "
           f"the nominal supply {view['v_nom']} ({view['fraction_at_v_nom']} of nominal); {view['c_effective']} "
           "charge-equivalent"]
    rows = [[g["refs"], str(g["count"]), g["dielectric"], g["c_each"], g["c_tol"], g["c_total"], g["c_at_v_nom"],
             g["fraction_at_v_nom"], g["v_rated"], g["esr"]] for g in view["rows"]]
    out += _table(rows, ["Designators", "Count", "Dielectric", "Each", "Tol.", "Total", "At working V", "Of nom.",
                         "Rating", "ESR (group)"])
    out += [f"  Bank note: {n}" for n in view["notes"]]
    return out


def _switch_extras(sw: dict, fet: dict) -> list[str]:
    """The foldback curve and the gate drive of the document, where given."""
    out = []
    if sw.get("foldback"):
        pts = "; ".join(f"{eng(v, 'V')}: {eng(i, 'A')}" for v, i in sw["foldback"])
        out.append(f"Foldback current limit (V_DS: nominal limit, flat beyond the ends, scaled by the limit's "
                   f"tolerance): {pts}")
    gate, part = sw.get("gate"), fet.get("gate")
    if gate:
        if gate.get("drive") == "current":
            drive = f"current drive {eng(gate.get('i_gate'), 'A')}"
        else:
            drive = f"voltage drive {eng(gate.get('v_drive'), 'V')} through {eng(gate.get('r_gate'), 'ohm')}"
        text = f"Gate drive: {drive}, external gate capacitor {eng(gate.get('c_ext') or 0.0, 'F')}"
        if part:
            k = f"k {part['k']:.3g} A/V\u00b2" if part.get("k") is not None else \
                f"g_fs {eng(part.get('g_fs'), 'S')} at {eng(part.get('i_gfs'), 'A')}"
            text += (f"; FET V_th {eng(part.get('v_th'), 'V')}, {k}, C_iss {eng(part.get('c_iss'), 'F')}, "
                     f"C_rss {eng(part.get('c_rss'), 'F')}")
        out.append(text + " (replaces the turn-on time and the slew rate)")
    return out

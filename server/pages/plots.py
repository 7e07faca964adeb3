"""Plot figures of the pages, as plain Plotly figure dicts ({"data": [...], "layout": {...}}).

Built here in Python (testable without a browser) and drawn in the page by
``web/static/plots.js``. All values are SI; axes show SI prefixes with the unit as suffix.
The figures of a result read it as the typed :class:`~server.schemas.result.AnalysisResult`
(rail documents and part documents stay plain dicts).

Provides :func:`startup_figure`, :func:`soa_figure`, :func:`timer_figure`,
:func:`monte_carlo_figure`, :func:`startup_overlay_figure`, :func:`soa_overlay_figure`,
:func:`budget_figure`, :func:`part_soa_figure`, :func:`zth_figure`, :func:`zth_fit_figure`, and the palette.
"""

from __future__ import annotations

import math
from datetime import date, timedelta
from typing import Any

import numpy as np

from server.analysis import derated_soa_curves, zth
from server.analysis.foldback import foldback_limit
from server.analysis.soa import envelope_curves
from server.pages.display import fmt as format_quantity
from server.schemas.result import AnalysisResult, MonteCarlo, Waveforms

__all__ = ["PALETTE", "VERDICT_COLOURS", "startup_figure", "soa_figure", "timer_figure", "monte_carlo_figure",
           "startup_overlay_figure", "soa_overlay_figure", "timer_limits", "budget_figure", "part_soa_figure",
           "zth_figure", "zth_fit_figure", "pulse_label", "risk_trend_figure", "sequence_figure", "bank_figure"]

INK, GRID, AXIS = "#22303c", "#e4e8ed", "#9aa5b1"
PALETTE = ["#3a6ea5", "#2a9d8f", "#c98a1b", "#8e5a9b", "#5c6b7a", "#b5523b", "#6f8f3a", "#a0527a"]
VERDICT_COLOURS = {"pass": "#2f7d4f", "marginal": "#b7791f", "fail": "#b3261e", "n/a": "#7a8591"}
CURVE_BLUES = ["#9cc3e6", "#6fa3d4", "#4a84bf", "#2f66a3", "#1f4c80", "#15365c", "#0d2440"]
SIGNIFICANT = 5


def _r(values: Any) -> list[float | None]:
    """Values rounded to a few significant digits: smaller pages, nothing visible lost."""
    return [None if v is None or not math.isfinite(v) else float(f"{v:.{SIGNIFICANT}g}") for v in values]


def pulse_label(t_pulse: float | None) -> str:
    return "DC" if t_pulse is None else format_quantity(t_pulse, "s", 3)


def _axis(title: str, suffix: str = "", *, log: bool = False, **extra: Any) -> dict[str, Any]:
    axis = {"title": {"text": title}, "ticksuffix": suffix, "tickformat": "~s", "gridcolor": GRID,
            "zeroline": False, "showline": True, "linecolor": AXIS, "automargin": True}
    if log:
        axis["type"] = "log"
    axis.update(extra)
    return axis


def _log_ticks(values: list[float], kind: str) -> dict[str, Any]:
    """Tick values 1-2-5 per decade spanning ``values`` (only 1 per decade when that is many),
    labelled in engineering notation."""
    pos = [v for v in values if v is not None and v > 0 and math.isfinite(v)]
    if not pos:
        return {}
    lo, hi = math.floor(math.log10(min(pos))), math.ceil(math.log10(max(pos)))
    steps = (1, 2, 5) if hi - lo <= 5 else (1,)
    ticks = [m * 10.0 ** e for e in range(lo, hi + 1) for m in steps]
    ticks = [t for t in ticks if min(pos) / 2.5 <= t <= max(pos) * 2.5]
    return {"tickmode": "array", "tickvals": ticks, "ticktext": [format_quantity(t, kind, 3) for t in ticks],
            "ticksuffix": ""}


def _layout(title: str, height: int = 420, **extra: Any) -> dict[str, Any]:
    layout = {"title": {"text": title, "x": 0, "xanchor": "left", "font": {"size": 15}},
              "font": {"family": "system-ui, -apple-system, Segoe UI, sans-serif", "size": 12, "color": INK},
              "paper_bgcolor": "#ffffff", "plot_bgcolor": "#ffffff", "height": height,
              "margin": {"l": 70, "r": 24, "t": 48, "b": 100},
              "legend": {"orientation": "h", "x": 0, "xanchor": "left", "y": 0.005, "yanchor": "bottom",
                         "yref": "container"},
              "colorway": PALETTE}
    layout.update(extra)
    return layout


def _hline(y: float, colour: str, yref: str = "y", dash: str = "dash") -> dict[str, Any]:
    return {"type": "line", "xref": "paper", "x0": 0, "x1": 1, "yref": yref, "y0": y, "y1": y,
            "line": {"color": colour, "width": 1.5, "dash": dash}}


def _vline(x: float, colour: str, xref: str = "x", yref: str = "paper", dash: str = "dash") -> dict[str, Any]:
    return {"type": "line", "xref": xref, "x0": x, "x1": x, "yref": yref,
            "y0": 0, "y1": 1, "line": {"color": colour, "width": 1.5, "dash": dash}}


# --- start-up waveforms --------------------------------------------------------------------

_ROWS = [("v_out", "Voltage", "V"), ("i", "Current", "A"), ("p_fet", "FET power", "W"),
         ("tj", "Junction temperature", "\u00b0C")]
_TRACE_NAMES = {"v_out": "Output voltage", "v_in": "Switch input voltage", "i": "Switch current",
                "p_fet": "FET power", "tj": "Junction temperature"}


def _stacked_axes(rows: int, gap: float = 0.05) -> list[list[float]]:
    h = (1 - gap * (rows - 1)) / rows
    return [[round(1 - (k + 1) * h - k * gap, 4), round(1 - k * (h + gap), 4)] for k in range(rows)]


def _off_intervals(wave: Waveforms) -> list[tuple[float, float]]:
    """Times where the switch is off (the fault timer turned it off), from the waveform's ``on`` signal."""
    on, t = wave.on, wave.t
    if not on or not t:
        return []
    out, start = [], None
    for tk, flag in zip(t, on):
        if flag is not None and flag < 0.5 and start is None:
            start = tk
        elif flag is not None and flag >= 0.5 and start is not None:
            out.append((start, tk))
            start = None
    if start is not None:
        out.append((start, t[-1]))
    return out


def startup_figure(result: AnalysisResult, document: dict[str, Any]) -> dict[str, Any] | None:
    """Output and switch-input voltage, current, FET power and Tj of the nominal start-up (what
    happens, with the fault timer acting) on one shared time axis; switch-off times shaded."""
    st = result.startup
    wave = st.waveforms
    if wave is None or not wave.t:
        return None
    title = "Start-up at the nominal point"
    if st.t_trip is not None:
        title += f": the fault timer turns the switch off at {format_quantity(st.t_trip, 's')}"
        title += " and it retries" if st.attempts > 1 else " (latched)"
    fig = _startup([(wave, "", PALETTE[0], "solid")], document, result.rules, title)
    for a, b in _off_intervals(wave):
        fig["layout"]["shapes"].append({"type": "rect", "xref": "x", "x0": a, "x1": b, "yref": "paper", "y0": 0,
                                        "y1": 1, "fillcolor": "rgba(179,38,30,0.08)", "line": {"width": 0},
                                        "layer": "below"})
    if _off_intervals(wave):
        fig["layout"].setdefault("annotations", []).append(
            {"xref": "paper", "x": 0, "yref": "paper", "y": 1.0, "yanchor": "bottom", "showarrow": False,
             "xanchor": "left", "font": {"size": 11}, "text": "shaded: switch off (fault timer)"})
    return fig


def _startup(waves: list[tuple[Waveforms, str, str, str]], document: dict[str, Any], rules: dict[str, float],
             title: str) -> dict[str, Any]:
    data, layout = [], _layout(title, height=640 if len(waves) == 1 else 700, hovermode="x unified",
                               hoversubplots="axis")
    if len(waves) > 1:   # an overlay names every trace with its revision: room for the longer legend
        layout["margin"] = {**layout["margin"], "b": 160}
    domains = _stacked_axes(len(_ROWS))
    for k, (key, label, unit) in enumerate(_ROWS):
        ax = "y" if k == 0 else f"y{k + 1}"
        layout["yaxis" if k == 0 else f"yaxis{k + 1}"] = _axis(f"{label}", " " + unit if unit == "\u00b0C" else unit,
                                                               domain=domains[k], anchor="x")
        keys = [key] + (["v_in"] if key == "v_out" else [])
        for wave, suffix, colour, dash in waves:
            for j, signal in enumerate(keys):
                values = getattr(wave, signal)
                if not values:
                    continue
                single = len(waves) == 1
                data.append({"type": "scatter", "mode": "lines", "name": _TRACE_NAMES[signal] + suffix,
                             "x": _r(wave.t), "y": _r(values), "xaxis": "x", "yaxis": ax,
                             "line": {"color": (PALETTE[k] if j == 0 else PALETTE[5]) if single else colour,
                                      "width": 2, "dash": ("dot" if j else dash)},
                             "showlegend": True, "legendgroup": (suffix or key) + signal})
    layout["xaxis"] = _axis("Time since turn-on", "s", anchor=f"y{len(_ROWS)}", showspikes=True,
                            spikemode="across", spikethickness=1, spikecolor=AXIS)
    tj_max = (document.get("fet") or {}).get("tj_max")
    shapes = []
    if tj_max is not None:
        shapes.append(_hline(tj_max, VERDICT_COLOURS["fail"], yref=f"y{len(_ROWS)}"))
        if rules.get("tj_headroom") is not None:
            shapes.append(_hline(tj_max - rules["tj_headroom"], VERDICT_COLOURS["marginal"], yref=f"y{len(_ROWS)}",
                                 dash="dot"))
        layout["annotations"] = [{"xref": "paper", "x": 1, "yref": f"y{len(_ROWS)}", "y": tj_max, "showarrow": False,
                                  "xanchor": "right", "yanchor": "bottom", "font": {"size": 11},
                                  "text": f"tj_max {tj_max:.0f} \u00b0C (dashed); team limit dotted"}]
    layout["shapes"] = shapes
    return {"data": data, "layout": layout}


def startup_overlay_figure(pairs: list[tuple[str, AnalysisResult]], document: dict[str, Any],
                           rules: dict[str, float]) -> dict[str, Any] | None:
    """Start-up waveforms of several revisions overlaid: [(label, result)], newest last."""
    styles = [("dash", PALETTE[4]), ("solid", PALETTE[0])]
    waves = []
    for k, (label, result) in enumerate(pairs):
        wave = result.startup.waveforms
        if wave is not None and wave.t:
            dash, colour = styles[k % 2] if len(pairs) == 2 else ("solid", PALETTE[k % len(PALETTE)])
            waves.append((wave, f" ({label})", colour, dash))
    if not waves:
        return None
    return _startup(waves, document, rules, "Start-up waveforms, " + " against ".join(p[0] for p in pairs))


# --- safe operating area ---------------------------------------------------------------------

def _curve_traces(curves: list[dict[str, Any]], note: str) -> list[dict[str, Any]]:
    traces = []
    for k, c in enumerate(curves):
        pts = c["points"]
        traces.append({"type": "scatter", "mode": "lines", "name": f"SOA {pulse_label(c['t_pulse'])}{note}",
                       "x": _r([p[0] for p in pts]), "y": _r([p[1] for p in pts]),
                       "line": {"color": CURVE_BLUES[min(k, len(CURVE_BLUES) - 1)], "width": 2},
                       "hovertemplate": "%{x:.3s}V, %{y:.3s}A<extra>" + pulse_label(c["t_pulse"]) + "</extra>"})
    return traces


def _trajectory(wave: Waveforms | None, v_floor: float) -> tuple[list, list]:
    if wave is None or not wave.v_ds:
        return [], []
    v = np.asarray(wave.v_ds, dtype=float)
    i = np.asarray(wave.i, dtype=float)
    keep = (v >= v_floor) & (i > 0)
    return _r(v[keep]), _r(i[keep])


def _foldback_traces(document: dict[str, Any], v_floor: float) -> list[dict[str, Any]]:
    """The foldback current limit (nominal, and at the limit's high tolerance) over the SOA, from
    v_floor to the supply maximum: the document's curve, flat beyond its points as the analysis
    reads it (`server.analysis.foldback`)."""
    sw = document.get("switch") or {}
    points = sw.get("foldback")
    if not points:
        return []
    v_max = float((document.get("supply") or {}).get("v_max") or points[-1][0])
    vs = sorted({v_floor, v_max, *(float(p[0]) for p in points if p[0] > v_floor)})
    nominal = foldback_limit(points, vs)
    traces = [{"type": "scatter", "mode": "lines", "name": "Foldback current limit (nominal)", "x": _r(vs),
               "y": _r(nominal), "line": {"color": PALETTE[4], "width": 2.5, "dash": "dot"},
               "hovertemplate": "%{x:.3s}V, %{y:.3s}A<extra>foldback limit</extra>"}]
    tol = float(sw.get("i_limit_tol") or 0.0)
    if tol > 0.0:
        traces.append({"type": "scatter", "mode": "lines", "name": "Foldback current limit (high tolerance)",
                       "x": _r(vs), "y": _r(nominal * (1.0 + tol)),
                       "line": {"color": PALETTE[4], "width": 1.5, "dash": "dash"},
                       "hovertemplate": "%{x:.3s}V, %{y:.3s}A<extra>foldback limit, high tolerance</extra>"})
    return traces


def _derated(document: dict[str, Any]) -> list[dict[str, Any]]:
    return derated_soa_curves(document["fet"], document.get("environment", {}).get("t_ambient", 25.0))


def soa_figure(result: AnalysisResult, document: dict[str, Any]) -> dict[str, Any]:
    """The SOA curves derated to t_ambient, the start-up trajectory and the short-circuit point."""
    t_amb = document.get("environment", {}).get("t_ambient", 25.0)
    curves = _derated(document)
    v_floor = min(p[0] for c in curves for p in c["points"]) / 10
    data = _curve_traces(curves, "")
    data += _foldback_traces(document, v_floor)
    st = result.startup
    x, y = _trajectory(st.waveforms, v_floor)
    if x:
        data.append({"type": "scatter", "mode": "lines+markers", "name": "Start-up trajectory (V_DS, I_D)",
                     "x": x, "y": y, "line": {"color": PALETTE[2], "width": 2.5}, "marker": {"size": 4},
                     "hovertemplate": "%{x:.3s}V, %{y:.3s}A<extra>start-up</extra>"})
    annotations = []
    if st.pulse_v_ds and st.pulse_i:
        data.append({"type": "scatter", "mode": "markers", "name": "Start-up pulse as its equivalent rectangle",
                     "x": _r([st.pulse_v_ds]), "y": _r([st.pulse_i]),
                     "marker": {"symbol": "square", "size": 10, "color": PALETTE[2],
                                "line": {"color": INK, "width": 1}}})
    sc = result.short_circuit
    if sc.applies:
        points = [("nominal", sc, "diamond-open")]
        if sc.worst:
            points.append(("worst case", sc.worst, "diamond"))
        for label, point, symbol in points:
            if not (point.v_ds and point.i):
                continue
            allowed = "indefinitely" if point.survives_indefinitely else format_quantity(point.t_allow, "s")
            trips = format_quantity(point.t_fault, "s") if point.t_fault else "no timer"
            text = f"Short circuit, {label}: the FET survives {allowed}; the timer trips by {trips}"
            data.append({"type": "scatter", "mode": "markers", "name": f"Short circuit ({label})",
                         "x": _r([point.v_ds]), "y": _r([point.i]),
                         "marker": {"symbol": symbol, "size": 13, "color": VERDICT_COLOURS["fail"],
                                    "line": {"color": INK, "width": 1}},
                         "hovertemplate": text + "<extra></extra>"})
        for label, point in (("nominal", sc), ("worst case", sc.worst)):
            on = getattr(point, "onset", None) if point is not None else None
            if on is None or not (on.i_peak and point.v_ds):
                continue
            text = (f"Short-circuit onset, {label}: peak {format_quantity(on.i_peak, 'A')} read at the full supply; "
                    f"the derated SOA allows {format_quantity(on.soa_allowed, 'A')}")
            data.append({"type": "scatter", "mode": "markers", "name": f"Short-circuit onset peak ({label})",
                         "x": _r([point.v_ds]), "y": _r([on.i_peak]),
                         "marker": {"symbol": "triangle-up" if label == "worst case" else "triangle-up-open",
                                    "size": 12, "color": VERDICT_COLOURS["fail"], "line": {"color": INK, "width": 1}},
                         "hovertemplate": text + "<extra></extra>"})
        w = sc.worst
        if w and w.v_ds and w.i:
            allowed = "indefinitely" if w.survives_indefinitely else format_quantity(w.t_allow, "s")
            annotations.append({"x": math.log10(w.v_ds), "y": math.log10(w.i), "xref": "x", "yref": "y",
                                "text": f"Short circuit, worst case: survives {allowed}", "showarrow": True,
                                "arrowhead": 0, "ax": -40, "ay": -44, "bgcolor": "rgba(255,255,255,0.85)",
                                "bordercolor": AXIS, "font": {"size": 11}})
    xs = [v for t in data for v in t["x"]]
    ys = [v for t in data for v in t["y"]]
    annotations.append({"xref": "paper", "yref": "paper", "x": 0.01, "y": 0.02, "xanchor": "left",
                        "yanchor": "bottom", "showarrow": False, "font": {"size": 11},
                        "text": "read without extrapolation: nothing beyond the drawn curves"})
    layout = _layout(f"Safe operating area, derated to {t_amb:g} \u00b0C", height=520,
                     xaxis=_axis("Drain-source voltage V_DS", "V", log=True, **_log_ticks(xs, "V")),
                     yaxis=_axis("Drain current I_D", "A", log=True, **_log_ticks(ys, "A")),
                     annotations=annotations, hovermode="closest")
    return {"data": data, "layout": layout}


def soa_overlay_figure(pairs: list[tuple[str, AnalysisResult, dict[str, Any]]]) -> dict[str, Any] | None:
    """Start-up trajectories of several revisions on the newest revision's derated curves.

    ``pairs``: [(label, result, document)], newest last.
    """
    if not pairs:
        return None
    newest_doc = pairs[-1][2]
    curves = _derated(newest_doc)
    v_floor = min(p[0] for c in curves for p in c["points"]) / 10
    data = _curve_traces(curves, f" ({pairs[-1][0]})")
    for k, (label, result, _doc) in enumerate(pairs):
        x, y = _trajectory(result.startup.waveforms, v_floor)
        if x:
            last = k == len(pairs) - 1
            data.append({"type": "scatter", "mode": "lines+markers", "name": f"Start-up trajectory ({label})",
                         "x": x, "y": y, "marker": {"size": 4},
                         "line": {"color": PALETTE[2] if last else PALETTE[4], "width": 2.5,
                                  "dash": "solid" if last else "dash"}})
    t_amb = newest_doc.get("environment", {}).get("t_ambient", 25.0)
    xs = [v for t in data for v in t["x"]]
    ys = [v for t in data for v in t["y"]]
    layout = _layout(f"Start-up trajectories on the SOA derated to {t_amb:g} \u00b0C", height=480,
                     xaxis=_axis("Drain-source voltage V_DS", "V", log=True, **_log_ticks(xs, "V")),
                     yaxis=_axis("Drain current I_D", "A", log=True, **_log_ticks(ys, "A")),
                     hovermode="closest")
    return {"data": data, "layout": layout}


# --- fault timer -----------------------------------------------------------------------------

def timer_figure(result: AnalysisResult, document: dict[str, Any]) -> dict[str, Any] | None:
    """Worst-case time in limit against the fault timer's min..max band, with the E12 suggestion."""
    tw = result.timer
    if tw is None or not tw.t_fault_min:
        return None
    timer = (document.get("switch") or {}).get("timer") or {}
    rows, data, shapes = [], [], []
    t_lim = tw.t_limit_worst
    need_min = tw.trip_not_before
    allow_max = tw.trip_by

    def band(name: str, lo: float, nom: float | None, hi: float, colour: str) -> None:
        rows.append(name)
        data.append({"type": "scatter", "mode": "lines+markers", "name": name, "x": _r([lo, hi]), "y": [name, name],
                     "line": {"color": colour, "width": 12}, "marker": {"size": 14, "symbol": "line-ns",
                                                                        "line": {"width": 2, "color": INK}},
                     "hovertemplate": "%{x:.3s}s<extra>" + name + "</extra>"})
        if nom is not None:
            data.append({"type": "scatter", "mode": "markers", "name": name + " (nominal)", "x": _r([nom]),
                         "y": [name], "marker": {"symbol": "line-ns", "size": 18, "line": {"width": 3, "color": INK}},
                         "showlegend": False, "hovertemplate": "nominal %{x:.3s}s<extra></extra>"})

    if t_lim:
        name = "Start-up time in limit (worst case)"
        rows.append(name)
        data.append({"type": "bar", "orientation": "h", "name": name, "x": _r([t_lim]), "y": [name],
                     "base": 0, "marker": {"color": PALETTE[2]}, "width": 0.35,
                     "hovertemplate": "%{x:.3s}s<extra>" + (tw.t_limit_corner or "") + "</extra>"})
    c = timer.get("c")
    band(f"Fault timer now (C = {format_quantity(c, 'F')})", tw.t_fault_min, tw.t_fault_nom, tw.t_fault_max,
         PALETTE[0])
    suggested = tw.c_suggested
    if suggested and c:
        k = suggested / c
        band(f"With the suggested E12 value C = {format_quantity(suggested, 'F')}", tw.t_fault_min * k,
             (tw.t_fault_nom or 0) * k or None, tw.t_fault_max * k, PALETTE[1])
    if need_min:
        shapes.append(_vline(need_min, VERDICT_COLOURS["marginal"]))
    if allow_max:
        shapes.append(_vline(allow_max, VERDICT_COLOURS["fail"]))
    if need_min and allow_max and need_min < allow_max:
        shapes.append({"type": "rect", "xref": "x", "x0": need_min, "x1": allow_max, "yref": "paper", "y0": 0,
                       "y1": 1, "fillcolor": "rgba(47,125,79,0.10)", "line": {"width": 0}, "layer": "below"})
    xs = [v for v in (t_lim, need_min, allow_max, tw.t_fault_min, tw.t_fault_max) if v]
    if suggested and c:
        xs += [tw.t_fault_min * suggested / c, tw.t_fault_max * suggested / c]
    lo, hi = math.log10(min(xs)) - 0.3, math.log10(max(xs)) + 0.3
    layout = _layout("Fault timer window", height=150 + 70 * len(rows),
                     xaxis=_axis("Time", "s", log=True, range=[lo, hi],
                                 **_log_ticks([10 ** lo, 10 ** hi], "s")),
                     yaxis={"type": "category", "categoryorder": "array", "categoryarray": rows[::-1],
                            "automargin": True, "gridcolor": GRID, "showline": True, "linecolor": AXIS},
                     shapes=shapes, hovermode="closest", showlegend=False)
    return {"data": data, "layout": layout}


def timer_limits(result: AnalysisResult) -> list[str]:
    """The two limits the timer window's dashed lines stand for, in words."""
    tw, rules = result.timer, result.rules
    notes = []
    if tw is None:
        return notes
    if tw.trip_not_before is not None:
        notes.append(f"The timer must not trip before {format_quantity(tw.trip_not_before, 's')} (amber line): the "
                     f"team's timer margin {rules.get('timer_margin', 1.5):g} \u00d7 the worst-case time in regulation "
                     f"{format_quantity(tw.t_limit_worst, 's')} ({tw.t_limit_corner}).")
    if tw.trip_by is not None:
        notes.append(f"It must trip by {format_quantity(tw.trip_by, 's')} (red line): the FET survives the worst-case "
                     f"short circuit for {format_quantity(tw.t_allow_worst, 's')}, over the team's fault margin "
                     f"{rules.get('fault_margin', 1.5):g}.")
    return notes


# --- Monte Carlo -----------------------------------------------------------------------------

def monte_carlo_figure(mc: MonteCarlo) -> dict[str, Any] | None:
    """Histograms of every check's normalised margin over the samples, with lines at the team
    limit (1.0) and at the physical edge; a grid of small plots."""
    checks = {cid: m for cid, m in mc.checks.items() if m.histogram}
    if not checks:
        return None
    ids = list(checks)
    cols = 2
    rows = math.ceil(len(ids) / cols)
    height, top, bottom = 170 + 300 * rows, 110, 60
    gap_x, gap_y = 0.12, 120.0 / (height - top - bottom)  # an axis title and the next row's title fit
    w = (1 - gap_x * (cols - 1)) / cols
    h = (1 - gap_y * (rows - 1)) / rows
    data, layout = [], _layout(f"Monte Carlo: {mc.n} samples, {mc.yield_ * 100:.1f} % pass every check<br><sub>"
                               "dashed amber: the team's limit (margin 1); dotted red: the physical edge</sub>",
                               height=height, showlegend=False, hovermode="closest", bargap=0.02,
                               margin={"l": 70, "r": 24, "t": top, "b": bottom})
    shapes, annotations = [], []
    for k, cid in enumerate(ids):
        m = checks[cid]
        r, c = divmod(k, cols)
        n = "" if k == 0 else str(k + 1)
        xd = [round(c * (w + gap_x), 4), round(c * (w + gap_x) + w, 4)]
        yd = [round(1 - (r + 1) * h - r * gap_y, 4), round(1 - r * (h + gap_y), 4)]
        hist = m.histogram
        edges, counts = hist.edges, hist.counts
        centres = [(a + b) / 2 for a, b in zip(edges[:-1], edges[1:])]
        data.append({"type": "bar", "x": _r(centres), "y": counts, "width": (edges[1] - edges[0]) if len(edges) > 1
                     else None, "xaxis": f"x{n}", "yaxis": f"y{n}", "marker": {"color": PALETTE[0]},
                     "name": m.title, "hovertemplate": "margin %{x:.3g}: %{y} samples<extra></extra>"})
        layout[f"xaxis{n}"] = _axis("Margin (1 = team limit)", "", domain=xd, anchor=f"y{n}", tickformat=".3~g")
        layout[f"yaxis{n}"] = _axis("Samples", "", domain=yd, anchor=f"x{n}", rangemode="tozero")
        annotations.append({"xref": f"x{n} domain", "yref": f"y{n} domain", "x": 0, "y": 1.03, "xanchor": "left",
                            "yanchor": "bottom", "showarrow": False, "font": {"size": 11},
                            "text": (f"{m.title}<br>fails in {m.fail_share * 100:.1f} %, marginal in "
                                     f"{m.marginal_share * 100:.1f} % of {hist.total}")})
        lo, hi = edges[0], edges[-1]
        for x, colour, dash in ((1.0, VERDICT_COLOURS["marginal"], "dash"),
                                (m.margin_edge, VERDICT_COLOURS["fail"], "dot")):
            if x is not None and lo <= x <= hi:
                shapes.append({"type": "line", "xref": f"x{n}", "x0": x, "x1": x, "yref": f"y{n} domain", "y0": 0,
                               "y1": 1, "line": {"color": colour, "width": 2, "dash": dash}})
    layout["shapes"], layout["annotations"] = shapes, annotations
    return {"data": data, "layout": layout}


# --- capacitor bank ---------------------------------------------------------------------------

def bank_figure(bank: dict[str, Any] | None) -> dict[str, Any] | None:
    """The capacitor bank's C(v) as the result holds it (``result["bank"]``): nominal, and the low and high
    corners (every group's tolerance and derating range together), against the DC voltage, with the
    nominal supply marked."""
    if not bank or not bank.get("v"):
        return None
    v = _r(bank["v"])
    hover = "%{x:.3s}V: %{y:.3s}F<extra>"
    data = [
        {"type": "scatter", "mode": "lines", "name": "Low corner", "x": v, "y": _r(bank["c_low"]),
         "line": {"color": PALETTE[4], "width": 1.5, "dash": "dot"}, "hovertemplate": hover + "low corner</extra>"},
        {"type": "scatter", "mode": "lines", "name": "High corner", "x": v, "y": _r(bank["c_high"]),
         "line": {"color": PALETTE[4], "width": 1.5, "dash": "dash"}, "fill": "tonexty",
         "fillcolor": "rgba(92,107,122,0.10)", "hovertemplate": hover + "high corner</extra>"},
        {"type": "scatter", "mode": "lines", "name": "Nominal", "x": v, "y": _r(bank["c_nominal"]),
         "line": {"color": PALETTE[0], "width": 2.5}, "hovertemplate": hover + "nominal</extra>"},
    ]
    shapes, annotations = [], []
    v_nom = bank.get("v_nom")
    if v_nom:
        shapes.append(_vline(v_nom, VERDICT_COLOURS["n/a"]))
        annotations.append({"xref": "x", "x": v_nom, "yref": "paper", "y": 1, "xanchor": "left", "yanchor": "top",
                            "showarrow": False, "text": f" nominal supply {format_quantity(v_nom, 'V')}"})
    layout = _layout("Capacitor bank: capacitance against DC voltage", height=400,
                     xaxis=_axis("DC voltage across the bank", "V", rangemode="tozero"),
                     yaxis=_axis("Capacitance", "F", rangemode="tozero"), shapes=shapes, annotations=annotations,
                     hovermode="x unified")
    return {"data": data, "layout": layout}


# --- supply budget ---------------------------------------------------------------------------

def budget_figure(entry: dict[str, Any], title: str) -> dict[str, Any] | None:
    if not entry["t"]:
        return None
    data = [{"type": "scatter", "mode": "lines", "name": name, "x": _r(entry["t"]), "y": _r(cur),
             "stackgroup": "rails", "line": {"width": 0.5}, "hovertemplate": "%{y:.3s}A<extra>" + name + "</extra>"}
            for name, cur in entry["currents"].items()]
    data.append({"type": "scatter", "mode": "lines", "name": "Sum of start-up currents", "x": _r(entry["t"]),
                 "y": _r(entry["total"]), "line": {"color": INK, "width": 2}})
    shapes, annotations = [], []
    if entry.get("i_max"):
        shapes.append(_hline(entry["i_max"], VERDICT_COLOURS["fail"]))
        annotations.append({"xref": "paper", "x": 1, "y": entry["i_max"], "yref": "y", "xanchor": "right",
                            "yanchor": "bottom", "showarrow": False,
                            "text": f"supply i_max {format_quantity(entry['i_max'], 'A')}"})
    layout = _layout(title, height=380, xaxis=_axis("Time since a common turn-on", "s"),
                     yaxis=_axis("Current drawn from the supply", "A", rangemode="tozero"), shapes=shapes,
                     annotations=annotations, hovermode="x unified")
    return {"data": data, "layout": layout}


# --- board power-up sequence ----------------------------------------------------------------

def sequence_figure(corner: dict[str, Any], title: str) -> dict[str, Any] | None:
    """One corner of the board start-up: every supply's voltage with its UVLO thresholds (top), each rail's
    input current and every supply's total (bottom), on one time axis. The figures come from the stored
    result (``railsign.sequence-result/1``); nothing is computed here."""
    series = corner.get("series") or {}
    t = series.get("t") or []
    if not t:
        return None
    x = _r(t)
    top, bottom = _stacked_axes(2, 0.08)
    data, shapes = [], []
    for k, sup in enumerate(corner["supplies"]):
        s = series["supplies"][sup["id"]]
        colour = PALETTE[k % len(PALETTE)]
        data.append({"type": "scatter", "mode": "lines", "name": f"{sup['name']} voltage", "x": x, "y": _r(s["v"]),
                     "line": {"color": colour, "width": 2}, "yaxis": "y",
                     "hovertemplate": "%{y:.4s}V<extra>" + sup["name"] + "</extra>"})
        data.append({"type": "scatter", "mode": "lines", "name": f"{sup['name']} total current", "x": x,
                     "y": _r(s["i"]), "line": {"color": colour, "width": 2.5}, "yaxis": "y2",
                     "hovertemplate": "%{y:.3s}A<extra>" + sup["name"] + " total</extra>"})
        for level in sup.get("uvlo") or []:
            shapes.append(_hline(level, VERDICT_COLOURS["fail"], "y", "dot"))
        if sup.get("i_max"):
            shapes.append(_hline(sup["i_max"], VERDICT_COLOURS["fail"], "y2", "dot"))
    for rail in corner["rails"]:
        r = series["rails"][rail["id"]]
        data.append({"type": "scatter", "mode": "lines", "name": f"rail {rail['id']}", "x": x, "y": _r(r["i"]),
                     "line": {"width": 1}, "yaxis": "y2", "hovertemplate": "%{y:.3s}A<extra>" + rail["id"] + "</extra>"})
    layout = _layout(title, height=560, hovermode="x unified", shapes=shapes,
                     xaxis=_axis("Time since the first enable", "s", anchor="y2"),
                     yaxis=_axis("Supply voltage", "V", domain=top),
                     yaxis2=_axis("Current", "A", domain=bottom, rangemode="tozero"))
    return {"data": data, "layout": layout}


# --- part library ----------------------------------------------------------------------------

def part_soa_figure(fet: dict[str, Any]) -> dict[str, Any]:
    """A part's SOA curves as entered (case at t_case, not derated); where the analysis reads a curve lower
    (the conservative envelope of crossing or rising curves), that reading dashed beside it."""
    curves = sorted((fet.get("soa") or {}).get("curves", []),
                    key=lambda c: math.inf if c["t_pulse"] is None else c["t_pulse"])
    t_case = (fet.get("soa") or {}).get("t_case", 25.0)
    data = _curve_traces(curves, "")
    for k, c in enumerate(envelope_curves(fet)):
        if c["capped"]:
            pts = c["points"]
            data.append({"type": "scatter", "mode": "lines", "name": f"SOA {pulse_label(c['t_pulse'])} as the "
                         "analysis reads it (envelope)", "x": _r([p[0] for p in pts]), "y": _r([p[1] for p in pts]),
                         "line": {"color": CURVE_BLUES[min(k, len(CURVE_BLUES) - 1)], "width": 2, "dash": "dash"},
                         "hovertemplate": "%{x:.3s}V, %{y:.3s}A<extra>" + pulse_label(c["t_pulse"])
                                          + " as read</extra>"})
    xs = [v for t in data for v in t["x"]]
    ys = [v for t in data for v in t["y"]]
    return {"data": data,
            "layout": _layout(f"SOA curves as entered (T_case {t_case:g} \u00b0C)", height=440,
                              xaxis=_axis("Drain-source voltage V_DS", "V", log=True, **_log_ticks(xs, "V")),
                              yaxis=_axis("Drain current I_D", "A", log=True, **_log_ticks(ys, "A")),
                              hovermode="closest")}


def zth_figure(stages: list[dict[str, Any]], points: list[list[float]] | None = None) -> dict[str, Any] | None:
    """Zth(t) of the Foster stages, from a decade below the fastest to a decade above the slowest stage; with
    ``points``, the datasheet points the stages were fitted to (junction to case) as markers."""
    if not stages:
        return None
    taus = [s["tau"] for s in stages] + [p[0] for p in points or []]
    t = np.logspace(math.log10(min(taus)) - 1, math.log10(max(taus)) + 1, 120)
    z = zth([(s["r"], s["tau"]) for s in stages], t)
    data = [{"type": "scatter", "mode": "lines", "name": "Zth(t) of the stages", "x": _r(t), "y": _r(z),
             "line": {"color": PALETTE[3], "width": 2}}]
    if points:
        data.append(_zth_markers(points))
    return {"data": data,
            "layout": _layout("Transient thermal impedance of the Foster stages", height=360,
                              xaxis=_axis("Pulse duration", "s", log=True, **_log_ticks(list(t), "s")),
                              yaxis=_axis("Zth junction to ambient", " K/W", log=True,
                                          **_log_ticks(list(z) + [p[1] for p in points or []], "K/W")),
                              showlegend=bool(points))}


def _zth_markers(points: list[list[float]] | tuple) -> dict[str, Any]:
    return {"type": "scatter", "mode": "markers", "name": "Zth points (datasheet, junction to case)",
            "x": _r([p[0] for p in points]), "y": _r([p[1] for p in points]),
            "marker": {"color": INK, "size": 7, "symbol": "circle-open"},
            "hovertemplate": "%{x:.3s}s, %{y:.4s} K/W<extra>point</extra>"}


def zth_fit_figure(fit: Any) -> dict[str, Any]:
    """A Foster fit (`server.analysis.zth_fit.ZthFit`) over its points: the fitted junction-to-case curve, and
    with the board stage up to R_th junction-ambient, on log-log axes."""
    t_lo, t_hi = fit.points[0][0], fit.points[-1][0]
    slowest = max(tau for _, tau in fit.all_stages)
    t = np.logspace(math.log10(t_lo) - 0.5, math.log10(max(t_hi, slowest)) + 1, 160)
    fitted, mounted = fit.curve(t), fit.curve(t, board=True)
    data = [_zth_markers(fit.points),
            {"type": "scatter", "mode": "lines", "name": f"Fit, {len(fit.stages)} stages (junction to case)",
             "x": _r(t), "y": _r(fitted), "line": {"color": PALETTE[0], "width": 2}}]
    if fit.board is not None:
        data.append({"type": "scatter", "mode": "lines", "name": "With the board stage (junction to ambient)",
                     "x": _r(t), "y": _r(mounted), "line": {"color": PALETTE[2], "width": 2, "dash": "dash"}})
    ys = [p[1] for p in fit.points] + list(mounted)
    return {"data": data,
            "layout": _layout(f"Foster fit: largest error {fit.largest_error:.2%} over the points", height=400,
                              xaxis=_axis("Pulse duration", "s", log=True, **_log_ticks(list(t), "s")),
                              yaxis=_axis("Zth", " K/W", log=True, **_log_ticks(ys, "K/W")),
                              hovermode="closest")}


# --- risk counts over time ------------------------------------------------------------------

def risk_trend_figure(points: list[dict[str, Any]], lines: list[tuple[str, str, str, str]]) -> dict[str, Any] | None:
    """Risk counts per day as a small line chart, every line named in the legend.

    ``points``: [{day (ISO date), counts}], oldest first; ``lines``: (count key, name, colour, dash);
    the line of ``not_analysed`` also counts the rails never analysed.
    """
    if not points:
        return None
    days = [p["day"] for p in points]
    data = []
    for key, name, colour, dash in lines:
        values = [p["counts"].get(key, 0) + (p["counts"].get("never_analysed", 0) if key == "not_analysed" else 0)
                  for p in points]
        data.append({"type": "scatter", "mode": "lines+markers", "name": name, "x": days, "y": values,
                     "line": {"color": colour, "width": 2, "dash": dash}, "marker": {"size": 5},
                     "hovertemplate": "%{x}: %{y}<extra>" + name + "</extra>"})
    first, last = date.fromisoformat(days[0]), date.fromisoformat(days[-1])
    first = min(first, last - timedelta(days=6))           # at least a week wide, one tick a day or fewer
    span = [(first - timedelta(hours=12)).isoformat(), (last + timedelta(hours=12)).isoformat()]
    layout = _layout("Rails at risk per day (technical risks solid, process state dashed)", height=340,
                     xaxis={**_axis("Day (UTC)"), "tickformat": "%b %d", "type": "date", "range": span,
                            "dtick": 86_400_000 * max(1, (last - first).days // 10)},
                     yaxis={**_axis("Rails"), "rangemode": "tozero", "tickformat": "d",
                            "dtick": max(1, math.ceil(max((v for t in data for v in t["y"]), default=0) / 5))},
                     margin={"l": 60, "r": 20, "t": 44, "b": 120}, hovermode="x unified")
    return {"data": data, "layout": layout}

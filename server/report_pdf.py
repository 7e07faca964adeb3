"""The board sign-off report as a PDF, made on the server (ReportLab; plots by matplotlib, Agg).

:func:`render` takes the report read model of :func:`server.services.reports.board_report`
(texts already in words and units, and the stored waveform arrays) and returns the PDF bytes.
A title page (board, product, team, time, engine version, the caution, the rails with their
revision and sha256, the team's sign-off rules), the board's power-up sequence when it has one
(its verdict, its checks in words and the timeline of each corner; or that its analysis is
pending), then one section per rail, each starting on a new page and bookmarked: state, revision and sha256, inputs, team limits, the check
table with the worst case's corner in words, the key figures, the start-up and SOA plots,
approvals and waivers with names and times. Every page carries the caution in its footer.

No database and no web: only the formats (it sits beside the rail file formats).
"""

from __future__ import annotations

import io
import math
from pathlib import Path
from typing import Any

import matplotlib
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import EngFormatter
from reportlab import rl_config
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.platypus import (Flowable, Image, KeepTogether, PageBreak, Paragraph, SimpleDocTemplate, Spacer,
                                Table, TableStyle)
from xml.sax.saxutils import escape

__all__ = ["render", "sequence_section", "FONT"]

# DejaVu Sans (shipped with matplotlib) has µ, Ω, °, ≥, ≤ and ×, which the PDF base fonts lack.
_FONT_DIR = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
FONT, FONT_BOLD = "RailsignSans", "RailsignSans-Bold"
if FONT not in pdfmetrics.getRegisteredFontNames():
    pdfmetrics.registerFont(TTFont(FONT, str(_FONT_DIR / "DejaVuSans.ttf")))
    pdfmetrics.registerFont(TTFont(FONT_BOLD, str(_FONT_DIR / "DejaVuSans-Bold.ttf")))
    pdfmetrics.registerFontFamily(FONT, normal=FONT, bold=FONT_BOLD, italic=FONT, boldItalic=FONT_BOLD)

# binary streams as they are (ASCII85 text of every image would cost more time than drawing it)
rl_config.useA85 = 0

INK = colors.HexColor("#22303c")
MUTED = colors.HexColor("#5c6b7a")
RULE = colors.HexColor("#c9d1d9")
HEAD_BG = colors.HexColor("#eef2f6")
VERDICT_COLOURS = {"pass": colors.HexColor("#2f7d4f"), "marginal": colors.HexColor("#b7791f"),
                   "fail": colors.HexColor("#b3261e"), "n/a": colors.HexColor("#7a8591")}
PLOT_COLOURS = ["#3a6ea5", "#2a9d8f", "#c98a1b", "#8e5a9b", "#5c6b7a", "#b5523b"]
PLOT_DPI = 110

_base = getSampleStyleSheet()
STYLES = {
    "title": ParagraphStyle("title", parent=_base["Title"], fontName=FONT_BOLD, fontSize=18, leading=22,
                            alignment=TA_LEFT, textColor=INK, spaceAfter=4),
    "h1": ParagraphStyle("h1", parent=_base["Heading1"], fontName=FONT_BOLD, fontSize=15, leading=19, textColor=INK,
                         spaceBefore=0, spaceAfter=4),
    "h2": ParagraphStyle("h2", parent=_base["Heading2"], fontName=FONT_BOLD, fontSize=11.5, leading=14,
                         textColor=INK, spaceBefore=8, spaceAfter=3),
    "body": ParagraphStyle("body", parent=_base["BodyText"], fontName=FONT, fontSize=9, leading=11.5, textColor=INK),
    "small": ParagraphStyle("small", parent=_base["BodyText"], fontName=FONT, fontSize=7.5, leading=9.5,
                            textColor=MUTED),
    "cell": ParagraphStyle("cell", fontName=FONT, fontSize=7.5, leading=9, textColor=INK),
    "cellhead": ParagraphStyle("cellhead", fontName=FONT_BOLD, fontSize=7.5, leading=9, textColor=INK),
    "caution": ParagraphStyle("caution", parent=_base["BodyText"], fontName=FONT, fontSize=8.5, leading=11,
                              textColor=INK, borderColor=colors.HexColor("#b7791f"), borderWidth=0.8,
                              borderPadding=5, backColor=colors.HexColor("#fff8e6"), spaceBefore=6, spaceAfter=10),
}
PAGE_W, PAGE_H = A4
MARGIN = 16 * mm
TEXT_W = PAGE_W - 2 * MARGIN


def _p(text: Any, style: str = "body") -> Paragraph:
    return Paragraph(escape("" if text is None else str(text)), STYLES[style])


def _verdict(word: str | None) -> Paragraph:
    word = word or "not analysed"
    colour = VERDICT_COLOURS.get(word, MUTED)
    return Paragraph(f'<font color="#{colour.hexval()[2:]}"><b>{escape(word)}</b></font>', STYLES["cell"])


def _table(head: list[str], rows: list[list[Any]], widths: list[float]) -> Table:
    """A table of paragraphs (long texts wrap), header repeated on each page."""
    data = [[_p(h, "cellhead") for h in head]]
    for row in rows:
        data.append([c if isinstance(c, Flowable) else _p(c, "cell") for c in row])
    total = sum(widths)
    t = Table(data, colWidths=[TEXT_W * w / total for w in widths], repeatRows=1, hAlign="LEFT")
    t.setStyle(TableStyle([("BACKGROUND", (0, 0), (-1, 0), HEAD_BG), ("LINEBELOW", (0, 0), (-1, -1), 0.25, RULE),
                           ("VALIGN", (0, 0), (-1, -1), "TOP"), ("TOPPADDING", (0, 0), (-1, -1), 2),
                           ("BOTTOMPADDING", (0, 0), (-1, -1), 2), ("LEFTPADDING", (0, 0), (-1, -1), 3),
                           ("RIGHTPADDING", (0, 0), (-1, -1), 3)]))
    return t


class _Bookmark(Flowable):
    """An outline entry (the PDF's bookmarks) at this point of the story."""

    def __init__(self, key: str, title: str, level: int = 0) -> None:
        super().__init__()
        self.key, self.title, self.level = key, title, level
        self.width = self.height = 0

    def draw(self) -> None:
        self.canv.bookmarkPage(self.key)
        self.canv.addOutlineEntry(self.title, self.key, level=self.level)


# --- plots (stored arrays only) ------------------------------------------------------------


def _finite(xs: list[Any], ys: list[Any]) -> tuple[list[float], list[float]]:
    pairs = [(x, y) for x, y in zip(xs or [], ys or []) if x is not None and y is not None
             and math.isfinite(x) and math.isfinite(y)]
    return [p[0] for p in pairs], [p[1] for p in pairs]


def _png(fig: Figure) -> io.BytesIO:
    """The figure as an image for the PDF: JPEG, which the PDF embeds as it is (a PNG would be
    decoded and compressed again, which costs more than drawing it)."""
    out = io.BytesIO()
    FigureCanvasAgg(fig).print_jpg(out, pil_kwargs={"quality": 90, "optimize": False})
    out.seek(0)
    return out


def _clear(ax) -> None:  # noqa: ANN001
    """Take a rail's data off an axis; its ticks, formatters and labels stay for the next rail."""
    for artist in list(ax.lines) + list(ax.collections) + list(ax.patches):
        artist.remove()
    if ax.get_legend() is not None:
        ax.get_legend().remove()


STARTUP_ROWS = [("Voltage", "V", [("v_out", "output"), ("v_in", "switch input")]), ("Current", "A", [("i", "switch")]),
                ("FET power", "W", [("p_fet", "FET")]), ("Junction temperature", "°C", [("tj", "junction")])]
SOA_BLUES = ["#9cc3e6", "#6fa3d4", "#4a84bf", "#2f66a3", "#1f4c80", "#15365c"]


class _Plots:
    """The two figures of a rail section, made once per document and drawn again for each rail
    (making a figure and its axes costs more than drawing the few curves of a rail)."""

    def __init__(self) -> None:
        self.startup = Figure(figsize=(7.0, 5.0), dpi=PLOT_DPI)
        self.startup.subplots_adjust(left=0.1, right=0.98, top=0.94, bottom=0.09, hspace=0.12)
        self.axes = self.startup.subplots(4, 1, sharex=True)
        for ax, (label, unit, _) in zip(self.axes, STARTUP_ROWS):
            ax.set_ylabel(f"{label}\n({unit})", fontsize=7.5)
            if unit != "°C":
                ax.yaxis.set_major_formatter(EngFormatter(unit="", places=None))
            ax.grid(True, color="#e4e8ed", lw=0.6)
            ax.tick_params(labelsize=7)
        self.axes[3].xaxis.set_major_formatter(EngFormatter(unit="s"))
        self.axes[3].set_xlabel("Time since turn-on", fontsize=7.5)
        self.startup.suptitle("Start-up at the nominal point (stored waveforms)", fontsize=9, x=0.01, ha="left")
        self.soa = Figure(figsize=(7.0, 3.2), dpi=PLOT_DPI)
        self.soa.subplots_adjust(left=0.1, right=0.66, top=0.9, bottom=0.15)
        self.soa_ax = self.soa.subplots()
        ax = self.soa_ax
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.xaxis.set_major_formatter(EngFormatter(unit="V"))
        ax.yaxis.set_major_formatter(EngFormatter(unit="A"))
        ax.minorticks_off()
        ax.set_xlabel("Drain-source voltage", fontsize=7.5)
        ax.set_ylabel("Drain current", fontsize=7.5)
        ax.tick_params(labelsize=7)
        ax.grid(True, color="#e4e8ed", lw=0.5)
        self.soa.suptitle("Safe operating area at the rail's ambient, start-up trajectory", fontsize=9, x=0.01,
                          ha="left")

    def startup_image(self, plots: dict[str, Any]) -> Image:
        """Output and switch-input voltage, current, FET power and Tj of the nominal start-up, one time axis."""
        w = plots["waves"]
        axes = self.axes
        for k, (ax, (_, _, signals)) in enumerate(zip(axes, STARTUP_ROWS)):
            _clear(ax)
            for j, (key, name) in enumerate(signals):
                x, y = _finite(w.get("t") or [], w.get(key) or [])
                if x:
                    ax.plot(x, y, color=PLOT_COLOURS[k] if j == 0 else PLOT_COLOURS[5], lw=1.3,
                            ls="-" if j == 0 else ":", label=name)
            if len(signals) > 1 and ax.lines:
                ax.legend(fontsize=6.5, loc="lower right", frameon=False)
        if plots.get("tj_max") is not None:
            axes[3].axhline(plots["tj_max"], color="#b3261e", ls="--", lw=1, label="tj_max")
            if plots.get("tj_headroom") is not None:
                axes[3].axhline(plots["tj_max"] - plots["tj_headroom"], color="#b7791f", ls=":", lw=1,
                                label="team limit")
            axes[3].legend(fontsize=6.5, loc="lower right", frameon=False)
        if plots.get("t_trip") is not None:
            for ax in axes:
                ax.axvline(plots["t_trip"], color="#b3261e", lw=0.8, alpha=0.6)
        for ax in axes:
            ax.relim()
            ax.autoscale_view()
        return Image(_png(self.startup), width=TEXT_W, height=TEXT_W * 5.0 / 7.0)

    def soa_image(self, plots: dict[str, Any]) -> Image | None:
        """The start-up trajectory (V_DS, I_D) against the SOA curves at the rail's ambient, log-log."""
        w = plots["waves"]
        x, y = _finite(w.get("v_ds") or [], w.get("i") or [])
        curves = plots.get("soa_curves") or []
        # as on the rail page: the trajectory from a tenth of the curves' lowest voltage (and here a
        # hundredth of their lowest current) up, where a log scale can show it
        v_floor = min((p[0] for c in curves for p in c.get("points") or [] if p[0] > 0), default=0.0) / 10
        i_floor = min((p[1] for c in curves for p in c.get("points") or [] if p[1] > 0), default=0.0) / 100
        keep = [(a, b) for a, b in zip(x, y) if a > 0 and b > 0 and a >= v_floor and b >= i_floor]
        if not keep and not curves:
            return None
        ax = self.soa_ax
        _clear(ax)
        for k, c in enumerate(curves):
            pts = [(p[0], p[1]) for p in c.get("points") or [] if p[0] > 0 and p[1] > 0]
            if pts:
                t = c.get("t_pulse")
                label = "SOA DC" if t is None else f"SOA {EngFormatter(unit='s')(t)}"
                ax.plot([p[0] for p in pts], [p[1] for p in pts], color=SOA_BLUES[min(k, len(SOA_BLUES) - 1)],
                        lw=1.2, label=label)
        if keep:
            ax.plot([p[0] for p in keep], [p[1] for p in keep], color=PLOT_COLOURS[2], lw=1.5, marker=".", ms=2,
                    label="start-up trajectory")
        pulse = plots.get("pulse") or {}
        if pulse.get("v_ds") and pulse.get("i"):
            ax.plot([pulse["v_ds"]], [pulse["i"]], "s", color=PLOT_COLOURS[2], mec="#22303c", ms=6,
                    label="start-up pulse (equivalent rectangle)")
        for k, p in enumerate(plots.get("points") or []):
            ax.plot([p["v_ds"]], [p["i"]], "D", color="#b3261e", mfc="none" if k == 0 else "#b3261e", ms=7,
                    label=p["label"])
        ax.relim()
        ax.autoscale_view()
        ax.legend(fontsize=6, loc="center left", bbox_to_anchor=(1.02, 0.5), frameon=False)
        return Image(_png(self.soa), width=TEXT_W, height=TEXT_W * 3.2 / 7.0)


# --- the document --------------------------------------------------------------------------


def _title_page(report: dict[str, Any]) -> list[Flowable]:
    b = report["board"]
    story: list[Flowable] = [_Bookmark("title", "Sign-off report"),
                             _p(f"Sign-off report: {b['name']} rev {b['revision']}", "title"),
                             _p(f"Product {report['product']['name']} · team {report['team']} · "
                                f"{len(report['rails'])} rail{'' if len(report['rails']) == 1 else 's'} · "
                                f"made {report['generated_at']} · analysis engine {report['engine_version']}", "small")]
    if b.get("description"):
        story.append(_p(b["description"]))
    story.append(Paragraph(f"<b>Caution:</b> {escape(report['caution'])}", STYLES["caution"]))
    story.append(_p("Rails", "h2"))
    rows = [[str(k), r["name"], f"{r['revision']}", r["sha256"], _verdict(_rail_verdict(r)), r["state"]["name"]]
            for k, r in enumerate(report["rails"], start=1)]
    story.append(_table(["#", "Rail", "Revision", "sha256 of the revision", "Verdict", "Workflow state"], rows,
                        [3, 14, 8, 39, 9, 14]) if rows else _p("No rails on this board."))
    story += _rules_flowables(report["workflow"])
    return story


def _rail_verdict(r: dict[str, Any]) -> str | None:
    res = r.get("result")
    if res is None:
        return None
    return f"{res['verdict']} (engine {res['engine_version']})" if res["outdated"] else res["verdict"]


def _rules_flowables(wf: dict[str, Any]) -> list[Flowable]:
    out: list[Flowable] = [
        _p("Team sign-off rules in force", "h2"),
        _p(f"Workflow “{wf['name']}”, version {wf['version']}"
           + (f", saved by {wf['updated_by']} at {wf['updated_at']}" if wf["updated_by"] else " (the default)")
           + f". A rail goes back to “{wf['on_edit']}” when it gets a new revision.", "body"), Spacer(1, 3),
        _table(["State", "Marked", "What it means"], [[s["name"], s["flags"] or "-", s["description"] or "-"]
                                                     for s in wf["states"]], [14, 14, 40]),
        Spacer(1, 5),
        _table(["Transition", "From", "To", "Who may take it", "It demands"],
               [[t["name"], t["source"], t["target"], t["roles"], t["demands"]] for t in wf["transitions"]],
               [12, 12, 12, 14, 26]),
    ]
    return out


def _rail_section(r: dict[str, Any], k: int, n: int, drawer: _Plots) -> list[Flowable]:
    story: list[Flowable] = [PageBreak(), _Bookmark(f"rail-{r['id']}", f"{k}. {r['name']} (revision {r['revision']})"),
                             _p(f"Rail {k} of {n}: {r['name']}", "h1"),
                             _p(f"Revision {r['revision']} · sha256 {r['sha256']}", "body"),
                             _p(f"Saved by {r['author']} at {r['saved_at']}" + (f": {r['message']}" if r["message"]
                                                                              else "") + f" · mode {r['mode']}",
                                "small"),
                             _p(f"Workflow state: {r['state']['name']}"
                                + (" (signed off)" if r["state"]["signed_off"] else "")
                                + f", since {r['state']['since']}" + (f" by {r['state']['by']}" if r["state"]["by"]
                                                                       else ""), "body")]
    res = r.get("result")
    if res is None:
        story.append(_p("Not analysed: this revision has no stored result.", "body"))
    else:
        words = f"Verdict {res['verdict']} · basis: {res['basis']} · result {res['id']} of engine " \
                f"{res['engine_version']}, computed {res['computed_at']}"
        if res["outdated"]:
            words += " · an older engine than the current one: not a current sign-off reading"
        story.append(_p(words, "body"))
    story.append(_p("Inputs", "h2"))
    items = [[s["title"], t, v] for s in r["inputs"] for t, v in s["items"]]
    half = (len(items) + 1) // 2
    left, right = items[:half], items[half:]
    rows = [[a[0], a[1], a[2]] + (b if b else ["", "", ""]) for a, b in zip(left, right + [None] * (half - len(right)))]
    story.append(_table(["Section", "Input", "Value"] * 2, rows, [8, 13, 9, 8, 13, 9]))
    bank = r.get("bank")
    if bank:
        story.append(_p("Capacitor bank", "h2"))
        story.append(_p(f"{bank['count']} capacitors: {bank['c_total']} nominal at 0 V; {bank['c_at_v_nom']} "
                        f"({bank['fraction_at_v_nom']}) at the nominal supply {bank['v_nom']}; "
                        f"{bank['c_effective']} charge-equivalent.", "body"))
        story.append(_table(["Designators", "Count", "Dielectric", "Each", "Total", "At working V", "Of nominal",
                             "Rating", "ESR (group)"],
                            [[g["refs"], g["count"], g["dielectric"], g["c_each"], g["c_total"], g["c_at_v_nom"],
                              g["fraction_at_v_nom"], g["v_rated"], g["esr"]] for g in bank["rows"]],
                            [10, 4, 10, 6, 6, 7, 6, 5, 6]))
        for note in bank["notes"]:
            story.append(_p(note, "small"))
    if r["rules"]:
        story.append(_p("Team limits used", "h2"))
        story.append(_table(["Limit", "Value", "From"], [[x["title"], x["value"], x["source"]] for x in r["rules"]],
                            [20, 8, 12]))
    if r["checks"]:
        story.append(_p("Checks", "h2"))
        story.append(_table(["Check", "Verdict", "Value", "Limit", "Margin", "Nominal", "Worst case at"],
                            [[c["title"], _verdict(c["verdict"]), c["value"], c["limit"], c["margin"], c["nominal"],
                              c["corner"] + (f" (found by {c['found_by']})" if c["found_by"] == FOUND_SEARCH else "")]
                             for c in r["checks"]], [20, 7, 9, 9, 6, 9, 22]))
        story.append(_p("Margin: 1× is the team limit; below 1× the check is beyond it.", "small"))
    if r["figures"]:
        story.append(_p("Key figures", "h2"))
        story.append(_table(["Figure", "Nominal", "Worst case", "Worst case at"],
                            [[f["title"], f["nominal"], f["worst"], f["corner"]] for f in r["figures"]],
                            [20, 9, 9, 22]))
    plots = r.get("plots")
    if plots:
        story.append(KeepTogether([_p("Plots", "h2"), drawer.startup_image(plots)]))
        soa = drawer.soa_image(plots)
        if soa is not None:
            story.append(soa)
    story.append(_p("Approvals of this revision", "h2"))
    if r["approvals"]:
        story.append(_table(["Reviewer", "When", "Engine", "Comment"],
                            [[a["reviewer"], a["at"], a["engine_version"],
                              a["comment"] + (f" (stale: {a['stale_reason']})" if a["stale"] else "")]
                             for a in r["approvals"]], [10, 10, 6, 34]))
    else:
        story.append(_p("None.", "body"))
    story.append(_p("Waivers of this revision", "h2"))
    if r["waivers"]:
        story.append(KeepTogether(_table(["Check", "Verdict waived", "Reviewer", "When", "Reason"],
                                         [[w["check"], w["verdict"], w["reviewer"], w["at"],
                                           w["reason"] + (" (carried from an earlier revision)" if w["carried"] else "")]
                                          for w in r["waivers"]], [12, 7, 9, 10, 22])))
    else:
        story.append(_p("None.", "body"))
    return story


FOUND_SEARCH = "the search inside the tolerance box"


# --- the board's power-up sequence ----------------------------------------------------------


def _sequence_timeline(corners: list[dict[str, Any]]) -> Image | None:
    """Each supply's voltage (top row) and total current (bottom row) over time, one column per corner (the
    nominal supply, the supply-low corner), from the stored series; UVLO thresholds and current capability
    dotted."""
    corners = [c for c in corners if c.get("t")]
    if not corners:
        return None
    fig = Figure(figsize=(7.0, 4.4), dpi=PLOT_DPI)
    fig.subplots_adjust(left=0.1, right=0.98, top=0.88, bottom=0.17, hspace=0.12, wspace=0.18)
    axes = fig.subplots(2, len(corners), sharex="col", squeeze=False)
    for col, c in enumerate(corners):
        v_ax, i_ax = axes[0][col], axes[1][col]
        v_ax.set_title(c["title"], fontsize=8)
        for k, sup in enumerate(c["supplies"]):
            colour = PLOT_COLOURS[k % len(PLOT_COLOURS)]
            x, y = _finite(c["t"], sup.get("v") or [])
            if x:
                v_ax.plot(x, y, color=colour, lw=1.3, label=sup["name"])
            x, y = _finite(c["t"], sup.get("i") or [])
            if x:
                i_ax.plot(x, y, color=colour, lw=1.3, label=sup["name"])
            for level in sorted(set(sup.get("uvlo") or [])):
                v_ax.axhline(level, color=colour, ls=":", lw=0.9)
            if sup.get("i_max"):
                i_ax.axhline(sup["i_max"], color=colour, ls=":", lw=0.9)
        for ax, label in ((v_ax, "Supply voltage\n(V)"), (i_ax, "Total current\n(A)")):
            ax.yaxis.set_major_formatter(EngFormatter(unit="", places=None))
            ax.grid(True, color="#e4e8ed", lw=0.6)
            ax.tick_params(labelsize=7)
            if col == 0:
                ax.set_ylabel(label, fontsize=7.5)
        i_ax.set_ylim(bottom=0)
        i_ax.xaxis.set_major_formatter(EngFormatter(unit="s"))
        i_ax.set_xlabel("Time since the first enable", fontsize=7.5)
    handles, labels = axes[0][0].get_legend_handles_labels()
    if handles:
        fig.legend(handles, labels, loc="lower center", ncol=min(len(labels), 3), fontsize=6.5, frameon=False)
    fig.suptitle("Board start-up per supply (stored time series; dotted: UVLO thresholds, current capability)",
                 fontsize=9, x=0.01, ha="left")
    return Image(_png(fig), width=TEXT_W, height=TEXT_W * 4.4 / 7.0)


def sequence_section(seq: dict[str, Any]) -> list[Flowable]:
    """The board's power-up sequence (``report["sequence"]``, put in words by
    ``services.reports.sequence_part``): revision, verdict, the checks, the timeline; or that its
    analysis is pending; or, in an archived copy, that the copy leaves it out."""
    story: list[Flowable] = [PageBreak(), _Bookmark("sequence", "Power-up sequence"), _p("Power-up sequence", "h1")]
    if seq.get("omitted"):
        story.append(_p(f"The board has a power-up sequence (revision {seq['n']}). This archived copy, made at a "
                        "sign-off transition of a rail, leaves it out: read it on the board page or in the live "
                        "report.", "body"))
        return story
    story.append(_p(f"{seq['name']} · revision {seq['n']} · sha256 {seq['sha256']} · saved by {seq['author']}",
                    "body"))
    if not seq["current"]:
        story.append(_p("Analysis pending: the result of this revision with the rails' current revisions is not "
                        f"stored yet ({seq['pending']}). No verdict is reported until it is.", "body"))
    else:
        colour = VERDICT_COLOURS.get(seq["verdict"], MUTED)
        word = f'<font color="#{colour.hexval()[2:]}"><b>{escape(seq["verdict"] or "not analysed")}</b></font>'
        story.append(Paragraph(f"Verdict {word} with the rails' current revisions: every "
                               "rail on its shared supply on one time line, at the nominal supply and at the "
                               "supply-low corner.", STYLES["body"]))
        if seq["problem"]:
            story.append(_p(seq["problem"], "body"))
        if seq["checks"]:
            story.append(_p("Checks", "h2"))
            story.append(_table(["Check", "Verdict", "Value", "Limit", "Margin", "In words"],
                                [[c["title"], _verdict(c["verdict"]), c["value"], c["limit"], c["margin"], c["reason"]]
                                 for c in seq["checks"]], [24, 7, 8, 8, 6, 27]))
        timeline = _sequence_timeline(seq["corners"])
        if timeline is not None:
            story.append(KeepTogether([_p("Timeline", "h2"), timeline]))
        if seq["conventions"]:
            story.append(_p("How to read it", "h2"))
            story += [_p(f"· {text}", "small") for text in seq["conventions"]]
    story.append(_p("Approvals of the sequence", "h2"))
    story.append(_p("; ".join(f"{a['reviewer']} (revision {a['revision_n']}"
                              + (f", stale: {a['stale_reason']})" if a["stale"] else ")") for a in seq["approvals"])
                    or "None.", "body"))
    return story


def _footer(report: dict[str, Any]):
    b = report["board"]
    label = f"{b['name']} rev {b['revision']} · sign-off report made {report['generated_at']}"
    first, _, rest = report["caution"].partition(". ")
    caution = [f"Caution: {first}.", rest] if rest else [f"Caution: {first}"]

    def draw(canvas, doc) -> None:  # noqa: ANN001
        canvas.saveState()
        canvas.setFont(FONT, 6.5)
        canvas.setFillColor(MUTED)
        canvas.drawString(MARGIN, 11 * mm, label)
        canvas.drawRightString(PAGE_W - MARGIN, 11 * mm, f"page {doc.page}")
        for k, line in enumerate(caution):
            canvas.drawString(MARGIN, (8 - 2.8 * k) * mm, line)
        canvas.restoreState()
    return draw


def render(report: dict[str, Any]) -> bytes:
    """The PDF of a board's sign-off report (read model of ``services.reports.board_report``)."""
    out = io.BytesIO()
    b = report["board"]
    doc = SimpleDocTemplate(out, pagesize=A4, leftMargin=MARGIN, rightMargin=MARGIN, topMargin=MARGIN,
                            bottomMargin=MARGIN + 4 * mm, title=f"Sign-off report: {b['name']} rev {b['revision']}",
                            author="railsign", subject=f"{report['product']['name']}, team {report['team']}",
                            creator=f"railsign, analysis engine {report['engine_version']}")
    story = _title_page(report)
    if report.get("sequence"):
        story += sequence_section(report["sequence"])
    n = len(report["rails"])
    drawer = _Plots()
    for k, r in enumerate(report["rails"], start=1):
        story += _rail_section(r, k, n, drawer)
    footer = _footer(report)
    doc.build(story, onFirstPage=footer, onLaterPages=footer)
    return out.getvalue()

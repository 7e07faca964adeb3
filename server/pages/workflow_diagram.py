"""A picture of a team's workflow, drawn on the server as SVG from its definition (no script, no network).

The states stand in one row: the initial state first, then the others in the order the definition
lists them (the order of the editor's rows, so the author decides it). A transition to
the next state in the row is a straight arrow; one that skips ahead arcs above the row, one that
goes back arcs below it. Arcs that would overlap (their spans or their labels) are drawn at
different heights. Transitions between the same two states in the same direction share an
arrow and list their names. Every arrow is labelled with the transition's name, who may take it
and what it demands. The initial state has an arrow from a dot marked "start"; signed-off states
have a double border and say so; a state flagged ``archives`` (when the definition carries the
flag) and the state an edit returns to say so too.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from markupsafe import Markup, escape

__all__ = ["workflow_svg", "state_order", "transition_words"]

BOX_W, BOX_H = 172, 78          # px, a state's box
GAP = 164                       # px between two boxes: room for a straight arrow's label
LEFT, RIGHT = 78, 24            # px: room for the start marker; a margin
LABEL_W = 150                   # px, widest label
NAME_PX, SMALL_PX = 7.2, 5.9    # px per character (13 px bold; 11-12 px regular), estimates on the safe side
LINE_NAME, LINE_SMALL = 15, 13  # px line heights
ARC_GAP = 16                    # px between the labels of two arc levels
MIN_SCALE = 0.75                # a page may shrink the picture this far to fit, then it scrolls
COLOURS = {"ink": "#1f2a36", "soft": "#4a5866", "line": "#5d6d7e", "box": "#ffffff", "border": "#2f5f8f",
           "signed": "#2f7d4f", "signed_bg": "#e5f2ea", "paper": "#ffffff"}


def state_order(definition: Mapping[str, Any]) -> list[str]:
    """State names in the order of the row: the initial state first, then the others in the order the
    definition lists them (the order the editor's rows show)."""
    names = [s["name"] for s in definition.get("states", [])]
    initial = [s["name"] for s in definition.get("states", []) if s.get("initial")][:1]
    return initial + [n for n in names if n not in initial]


def transition_words(t: Mapping[str, Any]) -> tuple[str, str]:
    """(who may take it, what it demands) in words, for a label."""
    roles = ", ".join(t.get("roles") or []) or "nobody"
    demands = t.get("demands") or {}
    parts = []
    n = int(demands.get("approvals") or 0)
    if n:
        parts.append(f"{n} approval{'s' if n != 1 else ''}")
    if demands.get("checks_pass"):
        parts.append("checks clear")
    if demands.get("no_stale_approvals"):
        parts.append("no stale approval")
    return f"by {roles}", ("needs " + ", ".join(parts)) if parts else ""


@dataclass
class _Label:
    lines: list[tuple[str, str]]             # (css class, text)

    @property
    def height(self) -> float:
        return sum(LINE_NAME if cls == "t-name" else LINE_SMALL for cls, _ in self.lines) + 6

    @property
    def width(self) -> float:
        widest = max(len(text) * (NAME_PX if cls == "t-name" else SMALL_PX) for cls, text in self.lines)
        return min(LABEL_W, widest + 10)


def _wrap(text: str, px: float, max_lines: int, width: float = LABEL_W - 10) -> list[str]:
    """``text`` in lines of at most ``width`` px, at most ``max_lines`` of them (an ellipsis ends a cut)."""
    lines = textwrap.wrap(text, width=max(8, int(width / px))) or [""]
    if len(lines) > max_lines:
        lines = lines[:max_lines]
        lines[-1] = lines[-1][: max(1, len(lines[-1]) - 1)] + "\u2026"
    return lines


def _label(transitions: Sequence[Mapping[str, Any]]) -> _Label:
    lines: list[tuple[str, str]] = []
    for t in transitions:
        lines += [("t-name", line) for line in _wrap(str(t.get("name", "")), NAME_PX, 2)]
        who, needs = transition_words(t)
        lines += [("t-small", line) for line in _wrap(who, SMALL_PX, 3)]
        if needs:
            lines += [("t-small", line) for line in _wrap(needs, SMALL_PX, 3)]
    return _Label(lines)


@dataclass
class _Edge:
    source: int
    target: int
    transitions: list[Mapping[str, Any]] = field(default_factory=list)
    level: int = 0                            # 0: straight; above (ahead) or below (back) the row otherwise

    @property
    def ahead(self) -> bool:
        return self.target > self.source


def _x(position: int) -> float:
    return LEFT + position * (BOX_W + GAP)


def _levels(edges: list[_Edge], labels: dict[int, _Label]) -> None:
    """Give each arc the lowest level where neither its span nor its label overlaps another arc's."""
    taken: dict[int, list[tuple[float, float]]] = {}
    for k in sorted(range(len(edges)), key=lambda k: (abs(edges[k].target - edges[k].source), edges[k].source)):
        e = edges[k]
        a, b = sorted((_x(e.source) + BOX_W / 2, _x(e.target) + BOX_W / 2))
        mid, half = (a + b) / 2, labels[k].width / 2
        span = (min(a + 12, mid - half), max(b - 12, mid + half))
        level = 1
        while any(span[0] < hi and lo < span[1] for lo, hi in taken.get(level, [])):
            level += 1
        taken.setdefault(level, []).append(span)
        e.level = level


def _text(x: float, y: float, cls: str, text: str, anchor: str = "middle") -> str:
    return f'<text x="{x:.1f}" y="{y:.1f}" class="{cls}" text-anchor="{anchor}">{escape(text)}</text>'


def _label_svg(label: _Label, cx: float, top: float) -> str:
    w, h = label.width, label.height
    out = [f'<rect class="label-bg" x="{cx - w / 2:.1f}" y="{top:.1f}" width="{w:.1f}" height="{h:.1f}" rx="3"/>']
    y = top + 3
    for cls, text in label.lines:
        y += LINE_NAME if cls == "t-name" else LINE_SMALL
        out.append(_text(cx, y - 3, cls, text))
    return "".join(out)


def _box(position: int, state: Mapping[str, Any], top: float, on_edit: str) -> str:
    x = _x(position)
    signed = bool(state.get("signed_off"))
    tags = []
    if state.get("initial"):
        tags.append("new rails start here")
    if signed:
        tags.append("\u2714 signed off")
    if state.get("archives"):
        tags.append("archives the record")
    if state.get("name") == on_edit:
        tags.append("an edit returns here")
    tag_lines = _wrap(" \u00b7 ".join(tags), SMALL_PX, 2, BOX_W - 14) if tags else []
    name_lines = _wrap(str(state.get("name", "")), NAME_PX, 4 - len(tag_lines), BOX_W - 14)
    lines = [("s-name", t) for t in name_lines] + [("s-tag", t) for t in tag_lines]
    cls = "state signed" if signed else "state"
    out = [f'<g class="{cls}" data-state="{escape(state.get("name", ""))}">',
           f'<rect class="box" x="{x:.1f}" y="{top:.1f}" width="{BOX_W}" height="{BOX_H}" rx="6"/>']
    if signed:
        out.append(f'<rect class="inner" x="{x + 4:.1f}" y="{top + 4:.1f}" width="{BOX_W - 8}" '
                   f'height="{BOX_H - 8}" rx="4"/>')
    height = sum(LINE_NAME if c == "s-name" else LINE_SMALL for c, _ in lines)
    y = top + (BOX_H - height) / 2
    for c, t in lines:
        y += LINE_NAME if c == "s-name" else LINE_SMALL
        out.append(_text(x + BOX_W / 2, y - 3, c, t))
    out.append("</g>")
    return "".join(out)


def _arc(e: _Edge, label: _Label, row_top: float, offsets: dict[int, float]) -> str:
    """An arc above (ahead) or below (back) the row, its apex at its level, the label on the apex."""
    shift = min(BOX_W / 2 - 14, 10 + 12 * (e.level - 1))
    x1 = _x(e.source) + BOX_W / 2 + (shift if e.ahead else -shift)
    x2 = _x(e.target) + BOX_W / 2 - (shift if e.ahead else -shift)
    if e.ahead:
        y1 = row_top
        apex = row_top - offsets[e.level]
        label_top = apex - label.height / 2
    else:
        y1 = row_top + BOX_H
        apex = row_top + BOX_H + offsets[e.level]
        label_top = apex - label.height / 2
    control = (apex - 0.25 * y1) / 0.75          # a cubic with both controls at this height peaks at ``apex``
    path = f"M{x1:.1f},{y1:.1f} C{x1:.1f},{control:.1f} {x2:.1f},{control:.1f} {x2:.1f},{y1:.1f}"
    return (f'<g class="transition {"ahead" if e.ahead else "back"}"><path class="arrow" d="{path}" '
            f'marker-end="url(#wf-arrowhead)"/>{_label_svg(label, (x1 + x2) / 2, label_top)}</g>')


def _straight(e: _Edge, label: _Label, row_top: float) -> str:
    x1, x2 = _x(e.source) + BOX_W, _x(e.target)
    y = row_top + BOX_H / 2
    return (f'<g class="transition ahead"><path class="arrow" d="M{x1:.1f},{y:.1f} L{x2 - 2:.1f},{y:.1f}" '
            f'marker-end="url(#wf-arrowhead)"/>{_label_svg(label, (x1 + x2) / 2, y - label.height / 2)}</g>')


def _offsets(edges: list[_Edge], labels: dict[int, _Label], ahead: bool) -> dict[int, float]:
    """Distance from the row to the apex of each level's arcs: each level clears the labels below it."""
    out: dict[int, float] = {}
    reach = 0.0
    for level in sorted({e.level for e in edges if e.level and e.ahead == ahead}):
        tallest = max(labels[k].height for k, e in enumerate(edges) if e.level == level and e.ahead == ahead)
        out[level] = reach + ARC_GAP + tallest / 2 + (12 if level == 1 else 0)
        reach = out[level] + tallest / 2
    out[0] = reach                                   # how far this side's arcs and labels reach
    return out


def _description(definition: Mapping[str, Any], order: list[str]) -> str:
    states = {s["name"]: s for s in definition.get("states", [])}
    said = []
    for name in order:
        flags = (("initial", "initial"), ("signed_off", "signed off"), ("archives", "archives the record"))
        marks = [w for key, w in flags if states[name].get(key)]
        said.append(name + (f" ({', '.join(marks)})" if marks else ""))
    moves = []
    for t in definition.get("transitions", []):
        who, needs = transition_words(t)
        moves.append(f"{t['name']}: from {t['from']} to {t['to']}, {who}" + (f", {needs}" if needs else ""))
    return "States: " + "; ".join(said) + ". Transitions: " + "; ".join(moves) + "."


def _style() -> str:
    """The diagram's style element; every rule is scoped to the diagram (a style element inside an
    SVG applies to the whole page)."""
    c = COLOURS
    rules = {
        ".box": f"fill:{c['box']};stroke:{c['border']};stroke-width:1.5",
        ".signed .box": f"fill:{c['signed_bg']};stroke:{c['signed']};stroke-width:2",
        ".inner": f"fill:none;stroke:{c['signed']};stroke-width:1.2",
        ".arrow": f"fill:none;stroke:{c['line']};stroke-width:1.6",
        ".back .arrow": "stroke-dasharray:6 4",
        ".label-bg": f"fill:{c['paper']};fill-opacity:.92",
        "text": "font-family:system-ui,-apple-system,'Segoe UI',sans-serif",
        ".s-name": f"font-size:13px;font-weight:600;fill:{c['ink']}",
        ".t-name": f"font-size:13px;font-weight:600;fill:{c['ink']}",
        ".s-tag": f"font-size:11px;fill:{c['soft']}",
        ".signed .s-tag": f"fill:{c['signed']}",
        ".t-small": f"font-size:11.5px;fill:{c['soft']}",
        ".start-dot": f"fill:{c['ink']}",
    }
    return "<style>" + "".join(f"svg.workflow-diagram {sel}{{{rule}}}" for sel, rule in rules.items()) + "</style>"


def workflow_svg(definition: Mapping[str, Any], *, title: str = "") -> Markup:
    """The workflow as an SVG element (safe markup to embed in a page)."""
    order = state_order(definition)
    if not order:
        return Markup("")
    position = {name: k for k, name in enumerate(order)}
    states = {s["name"]: s for s in definition["states"]}
    grouped: dict[tuple[int, int], _Edge] = {}
    for t in definition.get("transitions", []):
        if t.get("from") in position and t.get("to") in position and t["from"] != t["to"]:
            key = (position[t["from"]], position[t["to"]])
            grouped.setdefault(key, _Edge(*key)).transitions.append(t)
    edges = list(grouped.values())
    labels = {k: _label(e.transitions) for k, e in enumerate(edges)}
    arcs = [k for k, e in enumerate(edges) if e.target != e.source + 1]
    for side in (True, False):
        chosen = [k for k in arcs if edges[k].ahead == side]
        sub = [edges[k] for k in chosen]
        _levels(sub, {j: labels[k] for j, k in enumerate(chosen)})
    above, below = _offsets(edges, labels, True), _offsets(edges, labels, False)
    row_top = max(above[0], 40) + 12
    width = _x(len(order) - 1) + BOX_W + RIGHT
    height = row_top + BOX_H + below[0] + 16
    initial = next((n for n in order if states[n].get("initial")), order[0])
    sx, sy = _x(position[initial]) - 52, row_top + BOX_H / 2
    title = title or f"Diagram of the workflow {definition.get('name', '')}".strip()
    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" class="workflow-diagram" width="{width:.0f}" height="{height:.0f}" '
        f'style="min-width: {MIN_SCALE * width:.0f}px" '
        f'viewBox="0 0 {width:.0f} {height:.0f}" role="img" aria-labelledby="wf-diagram-title wf-diagram-desc">',
        f'<title id="wf-diagram-title">{escape(title)}</title>',
        f'<desc id="wf-diagram-desc">{escape(_description(definition, order))}</desc>',
        "<defs><marker id=\"wf-arrowhead\" viewBox=\"0 0 10 10\" refX=\"9\" refY=\"5\" markerWidth=\"8\" "
        f"markerHeight=\"8\" orient=\"auto-start-reverse\"><path d=\"M0,0 L10,5 L0,10 z\" fill=\"{COLOURS['line']}\"/>"
        "</marker></defs>",
        _style(),
        f'<g class="start"><circle class="start-dot" cx="{sx:.1f}" cy="{sy:.1f}" r="6"/>'
        f'<path class="arrow" d="M{sx + 7:.1f},{sy:.1f} L{_x(position[initial]) - 2:.1f},{sy:.1f}" '
        f'marker-end="url(#wf-arrowhead)"/>{_text(sx, sy - 12, "t-small", "start")}</g>',
    ]
    for k, e in enumerate(edges):                       # arrows first, boxes over their ends
        if e.level:
            parts.append(_arc(e, labels[k], row_top, above if e.ahead else below))
    for name in order:
        parts.append(_box(position[name], states[name], row_top, definition.get("on_edit", "")))
    for k, e in enumerate(edges):                       # straight arrows and their labels sit between boxes
        if not e.level:
            parts.append(_straight(e, labels[k], row_top))
    parts.append("</svg>")
    return Markup("".join(parts))

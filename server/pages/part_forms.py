"""The part (MOSFET) form: fields, pasted CSV for SOA curves and Foster stages, errors by field.

Pure functions over plain dicts. An SOA curve is one pulse width and a block of pasted
points, one "V_ds, I_d" pair per line (comma, semicolon, tab or spaces between the two;
a header line and lines starting with # are skipped). Foster stages are pasted the same
way, one "r, tau" pair per line, and so are the points of the Zth curve the stages were fitted
to, one "t, Zth" pair per line, and the normalised R_DS(on) curve over temperature, one
"T_j, ratio" pair per line (blank: the linear coefficient). Values may carry units ("12 V",
"20 us"). The number of parallel FETs is the rail's, not the part's: it is on the rail form.

Provides :data:`PART_FIELDS`, :func:`parse_pairs`, :func:`document_from_part_form`,
:func:`part_form_from_document`, :func:`curve_slots`.
"""

from __future__ import annotations

import re
from typing import Any

from server.analysis.words import field_title
from server.pages.forms import FormField, form_value, place_errors, titled_field

__all__ = ["PART_FIELDS", "parse_pairs", "document_from_part_form", "part_form_from_document", "curve_slots",
           "part_errors", "part_field_titles", "ZTH_FIELD", "ZTH_POINTS_FIELD", "RDS_CURVE_FIELD", "FIT_FIELDS",
           "FIT_STAGES_DEFAULT", "EMPTY_CURVES", "stage_lines"]

def _fet_field(name: str, *, required: bool = False, example: str = "") -> FormField:
    """A field of the part form: ``name`` is its path in the part (``fet``) document."""
    return titled_field(f"fet.{name}", name=name, required=required, example=example)


PART_FIELDS = [
    _fet_field("name", required=True, example="N-channel 30 V 5 m\u03a9"),
    _fet_field("vds_max", required=True, example="30 V"),
    _fet_field("id_pulse_max"),
    _fet_field("e_avalanche"),
    _fet_field("rds_on", required=True, example="5 m\u03a9"),
    _fet_field("rds_on_max", example="6.5 m\u03a9"),
    _fet_field("rds_on_alpha"),
    _fet_field("tj_max", required=True, example="150 \u00b0C"),
    _fet_field("rth_ja", required=True, example="40 K/W"),
    _fet_field("soa.t_case"),
    # the gate data a gate-driven turn-on needs (all blank: none)
    _fet_field("gate.v_th", example="3 V"),
    _fet_field("gate.k", example="20 A/V^2"),
    _fet_field("gate.g_fs", example="40 S"),
    _fet_field("gate.i_gfs", example="20 A"),
    _fet_field("gate.c_iss", example="3 nF"),
    _fet_field("gate.c_rss", example="150 pF"),
]
ZTH_FIELD = "zth"
RDS_CURVE_FIELD = "rds_on_curve"
ZTH_POINTS_FIELD = "zth_points"
# the choices of a fit (not stored in the part): number of stages, time constant of the board stage
FIT_FIELDS = {"fit_stages": "Number of Foster stages to fit", "fit_board_tau": "Time constant of the board stage"}
FIT_STAGES_DEFAULT = "4"
EMPTY_CURVES = ["100 µs", "1 ms", "10 ms", "DC"]
_SPLIT = re.compile(r"\s*[,;\t]\s*")
_COMMENT = "#"


def _curve_name(k: int, part: str) -> str:
    return f"soa.curves[{k}].{part}"


def part_field_titles(slots: list[int]) -> dict[str, str]:
    """Every field of the part form (its path in the part document) -> its title."""
    names = [f.name for f in PART_FIELDS] + [ZTH_FIELD, ZTH_POINTS_FIELD, RDS_CURVE_FIELD, "soa.curves"] + [
        _curve_name(k, p) for k in slots for p in ("t_pulse", "points")]
    return {name: field_title(f"fet.{name}") for name in names} | FIT_FIELDS


def parse_pairs(text: str) -> tuple[list[tuple[str, str, int]], list[str]]:
    """Pairs of values from pasted text: [(first, second, line number)], and the problems found.

    A first line that holds no digit at all is taken for a header and skipped.
    """
    pairs, problems = [], []
    for n, line in enumerate(text.splitlines(), start=1):
        line = line.strip()
        if not line or line.startswith(_COMMENT):
            continue
        if not pairs and not problems and not re.search(r"\d", line):
            continue  # header
        cells = [c for c in (_SPLIT.split(line) if _SPLIT.search(line) else line.split()) if c]
        if len(cells) != 2:
            problems.append(f"line {n}: expected two values, got {len(cells)} ('{line[:40]}')")
            continue
        pairs.append((cells[0], cells[1], n))
    return pairs, problems


def curve_slots(form: dict[str, str]) -> list[int]:
    """The curve indices present in a submitted form, ascending."""
    found = set()
    for key in form:
        m = re.match(r"soa\.curves\[(\d+)\]\.", key)
        if m:
            found.add(int(m.group(1)))
    return sorted(found)


def document_from_part_form(form: dict[str, str]) -> tuple[dict[str, Any], dict[str, str], dict[str, Any]]:
    """The FET document of a submitted part form.

    Returns (document, errors found while reading the pasted text by field, how document
    indices map back to form fields: {"curves": {doc index: form index}, "zth_lines": [...],
    "points_lines": {form index: [line numbers]}}).
    """
    doc: dict[str, Any] = {"soa": {"curves": []}}
    errors: dict[str, str] = {}
    for f in PART_FIELDS:
        raw = form.get(f.name, "").strip()
        if raw:
            if f.name == "soa.t_case":
                doc["soa"]["t_case"] = raw
            elif f.name.startswith("gate."):
                doc.setdefault("gate", {})[f.name.removeprefix("gate.")] = raw
            else:
                doc[f.name] = raw
    pairs, problems = parse_pairs(form.get(ZTH_FIELD, ""))
    if problems:
        errors[ZTH_FIELD] = "; ".join(problems)
    doc["zth"] = [{"r": a, "tau": b} for a, b, _ in pairs]
    points, problems = parse_pairs(form.get(ZTH_POINTS_FIELD, ""))
    if problems:
        errors[ZTH_POINTS_FIELD] = "; ".join(problems)
    if points:
        doc["zth_points"] = [[a, b] for a, b, _ in points]
    mapping: dict[str, Any] = {"curves": {}, "zth_lines": [n for _, _, n in pairs], "points_lines": {},
                               "zth_points_lines": [n for _, _, n in points]}
    rds_pairs, problems = parse_pairs(form.get(RDS_CURVE_FIELD, ""))
    if problems:
        errors[RDS_CURVE_FIELD] = "; ".join(problems)
    if rds_pairs:
        doc["rds_on_curve"] = [[a, b] for a, b, _ in rds_pairs]
    mapping["rds_lines"] = [n for _, _, n in rds_pairs]
    for k in curve_slots(form):
        t_raw = form.get(_curve_name(k, "t_pulse"), "").strip()
        text = form.get(_curve_name(k, "points"), "")
        if not t_raw and not text.strip():
            continue
        pts, problems = parse_pairs(text)
        if problems:
            errors[_curve_name(k, "points")] = "; ".join(problems)
        mapping["curves"][len(doc["soa"]["curves"])] = k
        mapping["points_lines"][k] = [n for _, _, n in pts]
        t_pulse = None if t_raw.upper() in ("", "DC") else t_raw
        doc["soa"]["curves"].append({"t_pulse": t_pulse, "points": [[a, b] for a, b, _ in pts]})
    return doc, errors, mapping


def part_errors(details: list[dict[str, Any]], mapping: dict[str, Any]) -> tuple[dict[str, str], list[str]]:
    """Errors of the part service placed beside the form's fields (document indices made form fields)."""
    fixed = []
    for d in details:
        path = str(d.get("field") or "").removeprefix("document").lstrip(".")
        message = str(d.get("message", ""))
        m = re.match(r"soa\.curves\[(\d+)\](.*)", path)
        if m and int(m.group(1)) in mapping["curves"]:
            k = mapping["curves"][int(m.group(1))]
            rest = m.group(2)
            pm = re.match(r"\.points\[(\d+)\]", rest)
            lines = mapping["points_lines"].get(k, [])
            if pm and int(pm.group(1)) < len(lines):
                message = f"line {lines[int(pm.group(1))]}: {message}"
            path = _curve_name(k, "t_pulse" if rest.startswith(".t_pulse") else "points")
        path = _zth_points_error(path, message, mapping, fixed)
        if path is None:
            continue
        zm = re.match(r"zth\[(\d+)\](.*)", path)
        if zm:
            j = int(zm.group(1))
            line = mapping["zth_lines"][j] if j < len(mapping["zth_lines"]) else j + 1
            message, path = f"line {line} ({zm.group(2).lstrip('.') or 'stage'}): {message}", ZTH_FIELD
        rm = re.match(r"rds_on_curve\[(\d+)\](.*)", path)
        if rm:
            j = int(rm.group(1))
            lines = mapping.get("rds_lines", [])
            message, path = f"line {lines[j] if j < len(lines) else j + 1}: {message}", RDS_CURVE_FIELD
        if path == "soa.curves" or path == "soa":
            path = "soa.curves"
        fixed.append({"field": path, "message": message})
    names = [f.name for f in PART_FIELDS] + [ZTH_FIELD, ZTH_POINTS_FIELD, RDS_CURVE_FIELD, "soa.curves", *FIT_FIELDS] + [
        _curve_name(k, p) for k in mapping["curves"].values() for p in ("t_pulse", "points")]
    return place_errors(fixed, names)


def _zth_points_error(path: str, message: str, mapping: dict[str, Any], fixed: list[dict]) -> str | None:
    """An error on a Zth curve point goes to the points' text box, naming its line (None: placed)."""
    m = re.match(r"zth_points(?:\[(\d+)\])?$", path)
    if m is None:
        return path
    lines = mapping.get("zth_points_lines", [])
    if m.group(1) is not None:
        j = int(m.group(1))
        message = f"line {lines[j] if j < len(lines) else j + 1}: {message}"
    fixed.append({"field": ZTH_POINTS_FIELD, "message": message})
    return None


def part_form_from_document(doc: dict[str, Any] | None) -> dict[str, str]:
    """The form's values for a stored FET document (or the empty form: four curve slots)."""
    form: dict[str, str] = {}
    if doc is None:
        for k, label in enumerate(EMPTY_CURVES):
            form[_curve_name(k, "t_pulse")] = label
            form[_curve_name(k, "points")] = ""
        form[ZTH_FIELD] = ""
        form[RDS_CURVE_FIELD] = ""
        form[ZTH_POINTS_FIELD] = ""
        form["fit_stages"] = FIT_STAGES_DEFAULT
        return form
    for f in PART_FIELDS:
        if f.name == "soa.t_case":
            value = (doc.get("soa") or {}).get("t_case")
        elif f.name.startswith("gate."):
            value = (doc.get("gate") or {}).get(f.name.removeprefix("gate."))
        else:
            value = doc.get(f.name)
        form[f.name] = form_value(value, f.kind)
    form[ZTH_FIELD] = "\n".join(f"{form_value(s['r'], 'K/W')}, {form_value(s['tau'], 's')}" for s in doc["zth"])
    form[RDS_CURVE_FIELD] = "\n".join(f"{_num(t)}, {_num(k)}" for t, k in (doc.get("rds_on_curve") or []))
    form[ZTH_POINTS_FIELD] = "\n".join(f"{_num(t)}, {_num(z)}" for t, z in doc.get("zth_points") or [])
    form["fit_stages"] = FIT_STAGES_DEFAULT
    for k, c in enumerate(doc["soa"]["curves"]):
        form[_curve_name(k, "t_pulse")] = "DC" if c["t_pulse"] is None else form_value(c["t_pulse"], "s")
        form[_curve_name(k, "points")] = "\n".join(f"{_num(v)}, {_num(i)}" for v, i in c["points"])
    return form


def _num(x: float) -> str:
    text = f"{x:.15g}"
    return text if float(text) == x else repr(x)


def stage_lines(stages: Any, rth_ja: float | None = None) -> str:
    """Foster stages as the stages' text box shows them: one "r, tau" line each (SI).

    With ``rth_ja`` (a fit: the last stage is the board stage), the fitted stages are written to six
    significant digits (a millionth, far below any fit's error, and readable) and the board stage's r
    is R_th junction-ambient minus their sum as written, so that the stages still sum to it."""
    stages = [(float(r), float(tau)) for r, tau in stages]
    if rth_ja is not None:
        fitted = [(float(f"{r:.6g}"), float(f"{tau:.6g}")) for r, tau in stages[:-1]]
        stages = fitted + [(rth_ja - sum(r for r, _ in fitted), stages[-1][1])]
    return "\n".join(f"{_num(r)}, {_num(tau)}" for r, tau in stages)

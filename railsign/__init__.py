"""railsign from Python: analyse switched power rails in a script or a notebook, no database.

>>> import railsign
>>> document = railsign.load_document("examples/rails/vout_12v.json")   # doctest: +SKIP
>>> result = railsign.analyze(document)                                  # doctest: +SKIP

Documents
    ``load_document(path)``, ``load_documents(path)``, ``parse_document(data)``: rail
    documents (schema ``railsign.rail/1``; engineering notation such as ``"680uF"``
    accepted) validated and normalized to SI numbers; a bundle file holds several.
    ``document_sha256(document)``: the sha256 a stored revision of it would have.
Analysis
    ``analyze(document, corners=True, monte_carlo=None)`` returns the typed
    :class:`AnalysisResult`. ``corners=True`` is the sign-off basis: every check's worst
    case over the tolerance corners and a search inside the tolerance box.
Figures
    ``check_table(result)`` and ``figure_table(result)``: lists of flat dicts, one per check
    or key figure; ``waveform_arrays(result)`` and ``corner_arrays(result)``: numpy arrays.
A CI gate over rail files
    :mod:`railsign.gate` (the ``railsign check`` command).

Errors: bad input raises :class:`DocumentInvalid` (a ValueError) whose ``errors`` name each
field and the reason; a design that cannot work is not an error but failing checks.

The ``server`` package is railsign's inside; this module is the interface that stays.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from os import PathLike
from typing import Any

import numpy as np

from server.analysis import DEFAULT_RULES, ENGINE_VERSION, analyze_rail
from server.bundle import load_json, read_rail_file
from server.schemas.rail import document_sha256 as _sha256
from server.schemas.rail import normalize
from server.schemas.result import AnalysisResult, CheckRecord
from server.schemas.validation import DocumentInvalid, FieldError, parse_rail_document

__all__ = ["ENGINE_VERSION", "DEFAULT_RULES", "AnalysisResult", "CheckRecord", "DocumentInvalid", "analyze",
           "load_document", "load_documents", "parse_document", "document_sha256", "check_table", "figure_table",
           "waveform_arrays", "corner_arrays"]


# --- documents ---------------------------------------------------------------------------------


def _documents(data: Any) -> list[dict[str, Any]]:
    file = read_rail_file(data)
    return [normalize(parse_rail_document(e.document, e.location)) for e in file.rails]


def parse_document(data: Any) -> dict[str, Any]:
    """One rail document from parsed JSON (or a bundle holding exactly one rail), validated and normalized.

    Parameters
    ----------
    data : Any
        A rail document as a dict (SI numbers or engineering-notation strings), or a
        bundle (``railsign export``) with one rail.

    Returns
    -------
    dict
        The canonical document: SI floats, defaults filled in.

    Raises
    ------
    DocumentInvalid
        Naming each bad field and the reason.
    """
    documents = _documents(data)
    if len(documents) != 1:
        raise DocumentInvalid([FieldError("", f"holds {len(documents)} rails, not one (railsign.load_documents "
                                              "or the check command read them all)")], "rail file")
    return documents[0]


def load_document(path: str | PathLike) -> dict[str, Any]:
    """The rail document of a JSON file (a rail document, or a bundle holding one rail), validated and normalized.

    Raises FileNotFoundError, or :class:`DocumentInvalid` for a file that is not JSON or not
    a valid rail document (naming each field).
    """
    return parse_document(load_json(path))


def load_documents(path: str | PathLike) -> list[dict[str, Any]]:
    """Every rail document of a JSON file (one for a rail document, each rail of a bundle), validated and normalized."""
    return _documents(load_json(path))


def document_sha256(document: Mapping[str, Any]) -> str:
    """The sha256 of a document's canonical JSON: what a stored revision of it is known by."""
    return _sha256(parse_document(dict(document)))


# --- analysis --------------------------------------------------------------------------------------


def analyze(document: Mapping[str, Any], corners: bool = True, monte_carlo: int | None = None, *, seed: int = 0,
            distribution: str | dict[str, str] = "uniform", rules: Mapping[str, float] | None = None,
            waveforms: bool = True, headroom: bool = True,
            progress: Callable[[float], None] | None = None) -> AnalysisResult:
    """Analyse one switched rail: every figure, check and verdict of the analysis contract.

    Parameters
    ----------
    document : mapping
        A rail document (as written, or as `load_document` returns it); it is validated and
        normalized here.
    corners : bool
        True, the sign-off basis: each check's worst case over the tolerance corners and a
        deterministic search inside the tolerance box. False: the nominal point only, a quick
        look that is not a sign-off verdict.
    monte_carlo : int, optional
        Number of Monte Carlo samples (None or 0: none). A sample worse than the worst case
        is flagged in ``result.monte_carlo.flags``, not folded into the verdict.
    seed, distribution
        The Monte Carlo generator's seed; "uniform" or "normal" (tolerance as 3 sigma,
        truncated) for every tolerance, or per parameter as a dict.
    rules : mapping, optional
        The team's rules over `DEFAULT_RULES` (common practice, not a standard); the
        document's own ``rules`` override them.
    waveforms : bool
        Keep the nominal start-up waveforms (for `waveform_arrays`).
    headroom : bool
        Search the largest load capacitance and the highest limit that still pass.
    progress : callable, optional
        Called with the fraction done, 0 to 1.

    Returns
    -------
    AnalysisResult
        SI units (temperatures in degC); None where a figure does not exist or is unbounded.

    Raises
    ------
    DocumentInvalid
        Bad input, naming each field.
    ValueError
        A bad option (``monte_carlo`` negative, an unknown distribution).
    """
    doc = parse_document(dict(document))
    result = analyze_rail(doc, rules=dict(rules) if rules else None, corners=corners,
                          monte_carlo=monte_carlo or 0, seed=seed, distribution=distribution, waveforms=waveforms,
                          progress=progress, headroom=headroom)
    return AnalysisResult.model_validate(result)


# --- figures ------------------------------------------------------------------------------------------


def check_table(result: AnalysisResult) -> list[dict[str, Any]]:
    """The check records as rows: one flat dict per check, the same keys in every row.

    Columns: id, title, verdict, value, limit, edge, unit, direction, margin, margin_edge,
    basis, nominal_value, nominal_verdict, nominal_margin, corner, found_by, v_s, c, i_limit,
    t_fault (the worst case's point of the tolerance box; None for a nominal analysis or a
    check that does not apply) and detail. ``pandas.DataFrame(rows)`` makes a frame of it.
    """
    rows = []
    for c in result.checks:
        point = c.point
        rows.append({
            "id": c.id, "title": c.title, "verdict": c.verdict, "value": c.value, "limit": c.limit, "edge": c.edge,
            "unit": c.unit, "direction": c.direction, "margin": c.margin, "margin_edge": c.margin_edge,
            "basis": c.basis, "nominal_value": c.nominal.value, "nominal_verdict": c.nominal.verdict,
            "nominal_margin": c.nominal.margin, "corner": c.corner, "found_by": c.found_by,
            "v_s": point.v_s if point else None, "c": point.c if point else None,
            "i_limit": point.i_limit if point else None, "t_fault": point.t_fault if point else None,
            "detail": c.detail,
        })
    return rows


def figure_table(result: AnalysisResult) -> list[dict[str, Any]]:
    """The key figures as rows: id, title, unit, worse ("max"/"min"), nominal, worst, corner, found_by."""
    return [f.model_dump() for f in result.figures]


def _floats(values: list[float | None]) -> np.ndarray:
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def waveform_arrays(result: AnalysisResult) -> dict[str, np.ndarray]:
    """The nominal start-up waveforms as float arrays (NaN where a sample does not exist).

    Keys: t (s), v_out (V), i (A, switch current), v_ds (V), p_fet (W), tj (degC), and
    v_in (V, switch input) and on (switch state) where the result has them.

    Raises
    ------
    ValueError
        The result was computed with ``waveforms=False``.
    """
    wave = result.startup.waveforms
    if wave is None:
        raise ValueError("this result has no waveforms: analyze with waveforms=True")
    return {key: _floats(values) for key, values in wave.model_dump().items() if values is not None}


def corner_arrays(result: AnalysisResult) -> dict[str, np.ndarray]:
    """The tolerance corners as arrays, one element per corner.

    Keys: ``corner`` (names in words) and ``verdict`` (str arrays); each corner parameter
    (v_s, c, i_limit, timer_c, i_charge, v_trip, t_fault) and each key figure id (i_peak,
    tj_peak, ...) as float arrays, NaN where none.

    Raises
    ------
    ValueError
        A nominal analysis (``corners=False``) has no corners.
    """
    if not result.corners:
        raise ValueError("this result has no corners: analyze with corners=True")
    out: dict[str, np.ndarray] = {"corner": np.array([c.name for c in result.corners]),
                                  "verdict": np.array([c.verdict for c in result.corners])}
    for section in ("params", "figures"):
        keys = list(getattr(result.corners[0], section))
        for key in keys:
            out[key] = _floats([getattr(c, section).get(key) for c in result.corners])
    return out

"""The rail design document, schema "railsign.rail/1" (DESIGN.md section 3): its shape and units.

One JSON object fully describes one switched rail. Values are SI numbers or
engineering-notation strings ("680uF", "4.7 mOhm"); after validation every value is an SI
float and every default is filled in, so ``normalize()`` gives the canonical document
that is stored, hashed and analysed.

This schema checks the shape (types, required fields, known keys, choices) and the units.
Every physics rule (positive values, v_min <= v_nom <= v_max, tolerances below 100 %, SOA
points positive and ordered...), every default and every bound lives in the analysis
package (:mod:`server.analysis.document`: ``DEFAULTS``, ``OPTIONAL``, ``BOUNDS``), which
:func:`server.schemas.validation.parse_rail_document` runs after this schema, reporting its
errors on their fields. Titles and hints in the JSON schema come from
:data:`server.analysis.words.FIELD_TITLES`.

Provides :class:`RailDocument`, :class:`Fet` (a part library entry), :func:`normalize`,
:func:`part_document`,
:func:`canonical_json` and :func:`document_sha256`.
"""

from __future__ import annotations

import hashlib
import json
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, model_validator
from pydantic_core import PydanticUndefined

from server.analysis.bank import DIELECTRICS
from server.analysis.document import (AFTER_FAULT, BOUNDS, DEFAULTS, GATE_DRIVES, LOAD_MODELS, OPTIONAL, SCHEMA,
                                     SWITCH_MODES)
from server.analysis.words import FIELD_TITLES
from server.units import parse_quantity

__all__ = [
    "SCHEMA_ID", "Supply", "PathImpedance", "BankGroup", "Load", "Timer", "Switch", "FosterStage", "SoaCurve",
    "Soa", "Fet", "FetGate", "GateDrive", "Environment", "Rules", "RailDocument", "normalize", "part_document",
    "part_data", "RAIL_FET_KEYS", "canonical_json", "document_sha256",
]

SCHEMA_ID = SCHEMA


def _quantity(kind: str) -> BeforeValidator:
    return BeforeValidator(lambda v: parse_quantity(v, kind))


def _optional_quantity(kind: str) -> BeforeValidator:
    return BeforeValidator(lambda v: None if v is None else parse_quantity(v, kind))


Volt = Annotated[float, _quantity("V")]
Amp = Annotated[float, _quantity("A")]
Farad = Annotated[float, _quantity("F")]
Henry = Annotated[float, _quantity("H")]
Ohm = Annotated[float, _quantity("ohm")]
Second = Annotated[float, _quantity("s")]
KelvinPerWatt = Annotated[float, _quantity("K/W")]
Celsius = Annotated[float, _quantity("degC")]
PerKelvin = Annotated[float, _quantity("1/K")]
Fraction = Annotated[float, _quantity("fraction")]
OptVolt = Annotated[float | None, _optional_quantity("V")]
OptAmp = Annotated[float | None, _optional_quantity("A")]
OptSecond = Annotated[float | None, _optional_quantity("s")]
OptWatt = Annotated[float | None, _optional_quantity("W")]
OptFarad = Annotated[float | None, _optional_quantity("F")]
OptVoltPerSecond = Annotated[float | None, _optional_quantity("V/s")]
OptKelvin = Annotated[float | None, _optional_quantity("K")]
OptRatio = Annotated[float | None, _optional_quantity("ratio")]
OptPerKelvin = Annotated[float | None, _optional_quantity("1/K")]
OptJoule = Annotated[float | None, _optional_quantity("J")]
OptOhm = Annotated[float | None, _optional_quantity("ohm")]
Ratio = Annotated[float, _quantity("ratio")]
OptSiemens = Annotated[float | None, _optional_quantity("S")]
OptSquareLaw = Annotated[float | None, _optional_quantity("A/V2")]

_BOUND_KEYWORDS = (("above", "exclusiveMinimum"), ("minimum", "minimum"), ("below", "exclusiveMaximum"),
                   ("maximum", "maximum"))


def _field(path: str) -> Any:
    """The field at a document path: its default from the analysis package (None when optional,
    required otherwise); its title, hint and bounds shown in the JSON schema (checked by the reader)."""
    words = FIELD_TITLES[path]
    bound = BOUNDS.get(path)
    extra = {key: getattr(bound, name) for name, key in _BOUND_KEYWORDS
             if bound is not None and getattr(bound, name) is not None}
    default = DEFAULTS[path] if path in DEFAULTS else (None if path in OPTIONAL else ...)
    return Field(default, title=words.title, description=words.hint or None, json_schema_extra=extra or None)


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)

    @model_validator(mode="before")
    @classmethod
    def _null_takes_the_default(cls, data: Any) -> Any:
        """A field with a default given as null takes its default, as the analysis reader reads it."""
        if not isinstance(data, dict):
            return data
        defaulted = {name for name, f in cls.model_fields.items()
                     if f.default is not None and f.default is not PydanticUndefined}
        return {k: v for k, v in data.items() if not (v is None and k in defaulted)}


class Supply(_Section):
    v_min: Volt = _field("supply.v_min")
    v_nom: Volt = _field("supply.v_nom")
    v_max: Volt = _field("supply.v_max")
    r_source: Ohm = _field("supply.r_source")
    l_source: Henry = _field("supply.l_source")
    i_max: OptAmp = _field("supply.i_max")
    uvlo: OptVolt = _field("supply.uvlo")
    uvlo_filter: OptSecond = _field("supply.uvlo_filter")
    c_in: OptFarad = _field("supply.c_in")
    v_clamp: OptVolt = _field("supply.v_clamp")


class PathImpedance(_Section):
    r: Ohm = _field("path.r")
    l: Henry = _field("path.l")


class BankGroup(_Section):
    refs: str | None = _field("load.bank[].refs")
    count: int = _field("load.bank[].count")
    c_nom: Farad = _field("load.bank[].c_nom")
    c_tol: Fraction = _field("load.bank[].c_tol")
    dielectric: Literal[DIELECTRICS] = _field("load.bank[].dielectric")  # type: ignore[valid-type]
    v_rated: Volt = _field("load.bank[].v_rated")
    esr: Ohm = _field("load.bank[].esr")
    dc_bias: list[tuple[Volt, Fraction]] | None = _field("load.bank[].dc_bias")
    tempco: OptPerKelvin = _field("load.bank[].tempco")
    derating: tuple[Fraction, Fraction] | None = _field("load.bank[].derating")


class Load(_Section):
    c_nom: OptFarad = _field("load.c_nom")
    c_tol: Fraction = _field("load.c_tol")
    esr: Ohm = _field("load.esr")
    model: Literal[LOAD_MODELS] = _field("load.model")  # type: ignore[valid-type]
    i_nom: Amp = _field("load.i_nom")
    v_on: Volt = _field("load.v_on")
    bank: list[BankGroup] | None = _field("load.bank")


class Timer(_Section):
    c: Farad = _field("switch.timer.c")
    c_tol: Fraction = _field("switch.timer.c_tol")
    i_charge: Amp = _field("switch.timer.i_charge")
    i_charge_tol: Fraction = _field("switch.timer.i_charge_tol")
    v_trip: Volt = _field("switch.timer.v_trip")
    v_trip_tol: Fraction = _field("switch.timer.v_trip_tol")
    after_fault: Literal[AFTER_FAULT] = _field("switch.timer.after_fault")  # type: ignore[valid-type]
    retry_off: OptSecond = _field("switch.timer.retry_off")
    retries: OptRatio = _field("switch.timer.retries")


class GateDrive(_Section):
    drive: Literal[GATE_DRIVES] = _field("switch.gate.drive")  # type: ignore[valid-type]
    i_gate: OptAmp = _field("switch.gate.i_gate")
    v_drive: OptVolt = _field("switch.gate.v_drive")
    r_gate: OptOhm = _field("switch.gate.r_gate")
    c_ext: Farad = _field("switch.gate.c_ext")


class Switch(_Section):
    mode: Literal[SWITCH_MODES] = _field("switch.mode")  # type: ignore[valid-type]
    t_on: Second = _field("switch.t_on")
    dvdt: OptVoltPerSecond = _field("switch.dvdt")
    i_limit: OptAmp = _field("switch.i_limit")
    i_limit_tol: Fraction = _field("switch.i_limit_tol")
    p_limit: OptWatt = _field("switch.p_limit")
    timer: Timer | None = _field("switch.timer")
    loop_response: OptSecond = _field("switch.loop_response")
    fast_trip: OptAmp = _field("switch.fast_trip")
    fast_trip_delay: OptSecond = _field("switch.fast_trip_delay")
    foldback: list[tuple[Volt, Amp]] | None = _field("switch.foldback")
    gate: GateDrive | None = _field("switch.gate")


class FosterStage(_Section):
    r: KelvinPerWatt = _field("fet.zth[].r")
    tau: Second = _field("fet.zth[].tau")


class SoaCurve(_Section):
    t_pulse: OptSecond = _field("fet.soa.curves[].t_pulse")
    points: list[tuple[Volt, Amp]] = _field("fet.soa.curves[].points")


class Soa(_Section):
    t_case: Celsius = _field("fet.soa.t_case")
    curves: list[SoaCurve] = _field("fet.soa.curves")


class FetGate(_Section):
    v_th: Volt = _field("fet.gate.v_th")
    k: OptSquareLaw = _field("fet.gate.k")
    g_fs: OptSiemens = _field("fet.gate.g_fs")
    i_gfs: OptAmp = _field("fet.gate.i_gfs")
    c_iss: Farad = _field("fet.gate.c_iss")
    c_rss: Farad = _field("fet.gate.c_rss")


class Fet(_Section):
    """The MOSFET: also the document of a part library entry."""

    name: str = _field("fet.name")
    vds_max: Volt = _field("fet.vds_max")
    id_pulse_max: OptAmp = _field("fet.id_pulse_max")
    rds_on: Ohm = _field("fet.rds_on")
    rds_on_alpha: PerKelvin = _field("fet.rds_on_alpha")
    tj_max: Celsius = _field("fet.tj_max")
    rth_ja: KelvinPerWatt = _field("fet.rth_ja")
    zth: list[FosterStage] = _field("fet.zth")
    zth_points: list[tuple[Second, KelvinPerWatt]] | None = _field("fet.zth_points")
    soa: Soa = _field("fet.soa")
    e_avalanche: OptJoule = _field("fet.e_avalanche")
    rds_on_max: OptOhm = _field("fet.rds_on_max")
    rds_on_curve: list[tuple[Celsius, Ratio]] | None = _field("fet.rds_on_curve")
    count: int = _field("fet.count")
    gate: FetGate | None = _field("fet.gate")


class Environment(_Section):
    t_ambient: Celsius = _field("environment.t_ambient")


class Rules(_Section):
    """Per-rail overrides of the team's limits (DESIGN.md section 5; common practice)."""

    tj_headroom: OptKelvin = _field("rules.tj_headroom")
    soa_margin: OptRatio = _field("rules.soa_margin")
    fault_margin: OptRatio = _field("rules.fault_margin")
    timer_margin: OptRatio = _field("rules.timer_margin")
    vds_derating: OptRatio = _field("rules.vds_derating")
    linear_share: OptRatio = _field("rules.linear_share")


class RailDocument(_Section):
    schema_: Literal[SCHEMA] = Field(  # type: ignore[valid-type]
        SCHEMA, alias="schema", title=FIELD_TITLES["schema"].title)
    name: str = _field("name")
    supply: Supply = _field("supply")
    path: PathImpedance = Field(default_factory=PathImpedance, title=FIELD_TITLES["path"].title)
    load: Load = _field("load")
    switch: Switch = _field("switch")
    fet: Fet = _field("fet")
    environment: Environment = _field("environment")
    rules: Rules = Field(default_factory=Rules, title=FIELD_TITLES["rules"].title)


def normalize(document: RailDocument) -> dict[str, Any]:
    """The canonical JSON-able form: SI floats, defaults filled, overrides left unset omitted."""
    data = document.model_dump(mode="json", by_alias=True)
    data["rules"] = {k: v for k, v in data["rules"].items() if v is not None}
    return _drop_unset(data)


# optional fields added after the first documents and the value that stands for "not given":
# left out of the canonical form, so that a document without them keeps its text and its hash
_LATER_OPTIONAL: dict[tuple[str, str], Any] = {
    ("load", "c_nom"): None, ("load", "bank"): None,
    ("supply", "v_clamp"): None,
    ("switch", "loop_response"): None, ("switch", "fast_trip"): None, ("switch", "fast_trip_delay"): None,
    ("switch", "foldback"): None, ("switch", "gate"): None,
    ("switch.timer", "retries"): None,
    ("fet", "e_avalanche"): None, ("fet", "rds_on_max"): None, ("fet", "rds_on_curve"): None,
    ("fet", "count"): DEFAULTS["fet.count"], ("fet", "gate"): None, ("fet", "zth_points"): None,
}


def _section(data: dict[str, Any], dotted: str) -> Any:
    for key in dotted.split("."):
        data = data.get(key) if isinstance(data, dict) else None
    return data


def _drop_unset(data: dict[str, Any]) -> dict[str, Any]:
    for (section, key), absent in _LATER_OPTIONAL.items():
        sec = _section(data, section)
        if isinstance(sec, dict) and key in sec and sec[key] == absent:
            del sec[key]
    for group in (data.get("load") or {}).get("bank") or ():
        for key in ("refs", "dc_bias", "tempco", "derating"):
            if isinstance(group, dict) and group.get(key) is None:
                group.pop(key, None)
    gate = (data.get("fet") or {}).get("gate")
    if isinstance(gate, dict):  # k or g_fs at i_gfs, whichever was given
        for key in ("k", "g_fs", "i_gfs"):
            if gate.get(key) is None:
                gate.pop(key, None)
    drive = (data.get("switch") or {}).get("gate")
    if isinstance(drive, dict):
        for key in ("i_gate", "v_drive", "r_gate"):
            if drive.get(key) is None:
                drive.pop(key, None)
    return data


# the keys of a rail document's ``fet`` that are the rail's, not the part's: FETs in parallel
RAIL_FET_KEYS = frozenset({"count"})


def part_data(fet: dict[str, Any]) -> dict[str, Any]:
    """A FET document without the rail's own figures: what a library part holds."""
    return {k: v for k, v in fet.items() if k not in RAIL_FET_KEYS}


def part_document(fet: Fet) -> dict[str, Any]:
    """The canonical form of a part library entry: the FET's data without the rail's own figure
    (``count``, the FETs a rail puts in parallel) and without optional data left unset."""
    data = _drop_unset({"fet": fet.model_dump(mode="json")})["fet"]
    data.pop("count", None)
    return data


def canonical_json(data: dict[str, Any]) -> str:
    """Sorted keys, no spaces, no NaN: the text that is hashed."""
    return json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def document_sha256(data: dict[str, Any]) -> str:
    return hashlib.sha256(canonical_json(data).encode()).hexdigest()

"""The rail design document, schema "railsign.rail/1" (DESIGN.md section 3).

One JSON object fully describes one switched rail. Values are SI numbers or
engineering-notation strings ("680uF", "4.7 mOhm"); after validation every value is an SI
float and every default is filled in, so ``normalize()`` gives the canonical document
that is stored, hashed and analysed.

Provides :class:`RailDocument`, :class:`Fet` (a part library entry), :func:`normalize`,
:func:`canonical_json` and :func:`document_sha256`.
"""

from __future__ import annotations

import hashlib
import json
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, model_validator

from server.units import parse_quantity

__all__ = [
    "SCHEMA_ID", "Supply", "PathImpedance", "Load", "Timer", "Switch", "FosterStage", "SoaCurve",
    "Soa", "Fet", "Environment", "Rules", "RailDocument", "normalize", "canonical_json",
    "document_sha256",
]

SCHEMA_ID = "railsign.rail/1"


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
Watt = Annotated[float, _quantity("W")]
KelvinPerWatt = Annotated[float, _quantity("K/W")]
Celsius = Annotated[float, _quantity("degC")]
Kelvin = Annotated[float, _quantity("K")]
VoltPerSecond = Annotated[float, _quantity("V/s")]
PerKelvin = Annotated[float, _quantity("1/K")]
Fraction = Annotated[float, _quantity("fraction")]
Ratio = Annotated[float, _quantity("ratio")]
OptVolt = Annotated[float | None, _optional_quantity("V")]
OptAmp = Annotated[float | None, _optional_quantity("A")]
OptSecond = Annotated[float | None, _optional_quantity("s")]
OptWatt = Annotated[float | None, _optional_quantity("W")]
OptFarad = Annotated[float | None, _optional_quantity("F")]
OptVoltPerSecond = Annotated[float | None, _optional_quantity("V/s")]

class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)


FIELD_MARK = "@"


def _fail(field: str, message: str) -> None:
    """Raise a validation error for ``field`` (a path relative to the model being checked)."""
    raise ValueError(f"{FIELD_MARK}{field}{FIELD_MARK}{message}")


class Supply(_Section):
    v_min: Volt = Field(gt=0)
    v_nom: Volt = Field(gt=0)
    v_max: Volt = Field(gt=0)
    r_source: Ohm = Field(0.0, ge=0)
    l_source: Henry = Field(0.0, ge=0)
    i_max: OptAmp = Field(None, gt=0)
    uvlo: OptVolt = Field(None, gt=0)
    # the upstream UVLO's deglitch time from its datasheet; None: the raw dip is compared
    uvlo_filter: OptSecond = Field(None, ge=0)
    # capacitance at the switch input, which bounds the dip
    c_in: OptFarad = Field(None, gt=0)

    @model_validator(mode="after")
    def _ordered(self) -> "Supply":
        if self.v_min > self.v_max:
            _fail("v_min", f"v_min ({self.v_min:g} V) is above v_max ({self.v_max:g} V): the supply range is upside down")
        if not self.v_min <= self.v_nom <= self.v_max:
            _fail("v_nom", f"v_nom ({self.v_nom:g} V) must lie between v_min ({self.v_min:g} V) and v_max ({self.v_max:g} V)")
        return self


class PathImpedance(_Section):
    r: Ohm = Field(0.0, ge=0)
    l: Henry = Field(0.0, ge=0)


class Load(_Section):
    c_nom: Farad = Field(gt=0)
    c_tol: Fraction = Field(0.0, ge=0, lt=1)
    esr: Ohm = Field(0.0, ge=0)
    model: Literal["none", "resistive", "constant_current", "constant_power"] = "none"
    i_nom: Amp = Field(0.0, ge=0)
    v_on: Volt = Field(0.0, ge=0)

    @model_validator(mode="after")
    def _load_needs(self) -> "Load":
        if self.model != "none" and self.i_nom <= 0:
            _fail("i_nom", f"i_nom must be greater than zero for a {self.model.replace('_', ' ')} load")
        if self.model == "constant_power" and self.v_on <= 0:
            _fail("v_on", "v_on must be greater than zero for a constant-power load: "
                  "a constant-power load at 0 V would draw infinite current")
        return self


class Timer(_Section):
    c: Farad = Field(gt=0)
    c_tol: Fraction = Field(0.0, ge=0, lt=1)
    i_charge: Amp = Field(gt=0)
    i_charge_tol: Fraction = Field(0.0, ge=0, lt=1)
    v_trip: Volt = Field(gt=0)
    v_trip_tol: Fraction = Field(0.0, ge=0, lt=1)
    after_fault: Literal["latch", "retry"] = "latch"
    retry_off: OptSecond = Field(None, gt=0)

    @model_validator(mode="after")
    def _retry_needs_off_time(self) -> "Timer":
        if self.after_fault == "retry" and self.retry_off is None:
            _fail("retry_off", "retry_off (the off time between retries, s) is required when after_fault is 'retry'")
        return self


class Switch(_Section):
    mode: Literal["hard", "slew", "current_limit", "power_limit"]
    t_on: Second = Field(0.0, ge=0)
    dvdt: OptVoltPerSecond = Field(None, gt=0)
    i_limit: OptAmp = Field(None, gt=0)
    i_limit_tol: Fraction = Field(0.0, ge=0, lt=1)
    p_limit: OptWatt = Field(None, gt=0)
    timer: Timer | None = None

    @model_validator(mode="after")
    def _mode_needs(self) -> "Switch":
        needs = {"slew": ["dvdt"], "current_limit": ["i_limit"], "power_limit": ["p_limit", "i_limit"]}
        missing = [f for f in needs.get(self.mode, []) if getattr(self, f) is None]
        if missing:
            _fail(missing[0], f"{' and '.join(missing)} required in {self.mode} mode")
        return self


class FosterStage(_Section):
    r: KelvinPerWatt = Field(gt=0)
    tau: Second = Field(gt=0)


class SoaCurve(_Section):
    t_pulse: OptSecond = Field(None, gt=0, description="pulse width (s); null for the DC curve")
    points: list[tuple[Volt, Amp]] = Field(min_length=2)

    @model_validator(mode="after")
    def _positive_and_ordered(self) -> "SoaCurve":
        label = "DC curve" if self.t_pulse is None else f"curve at {self.t_pulse:g} s"
        for k, (v, i) in enumerate(self.points):
            if v <= 0 or i <= 0:
                _fail(f"points[{k}]", f"{label}: point {k + 1} ({v:g} V, {i:g} A) must have a positive V_ds and I_d "
                      "(the curves are drawn on log-log axes)")
        for k in range(1, len(self.points)):
            (v0, i0), (v1, i1) = self.points[k - 1], self.points[k]
            if v1 <= v0:
                _fail(f"points[{k}]", f"{label}: V_ds must increase from point to point (point {k + 1} at {v1:g} V "
                      f"follows {v0:g} V)")
            if i1 > i0:
                _fail(f"points[{k}]", f"{label}: I_d must not rise with V_ds (point {k + 1} at {i1:g} A follows {i0:g} A)")
        return self


class Soa(_Section):
    t_case: Celsius = 25.0
    curves: list[SoaCurve]

    @model_validator(mode="after")
    def _at_least_two_widths(self) -> "Soa":
        widths = [c.t_pulse for c in self.curves]
        if len(set(widths)) != len(widths):
            _fail("curves", "two SOA curves have the same pulse width: give each pulse width once")
        if len(widths) < 2:
            _fail("curves", f"the SOA needs curves for at least two pulse widths (got {len(widths)}), "
                  "so that allowed time can be interpolated between them")
        return self


class Fet(_Section):
    """The MOSFET: also the document of a part library entry."""

    name: str = Field(min_length=1, max_length=200)
    vds_max: Volt = Field(gt=0)
    id_pulse_max: OptAmp = Field(None, gt=0)
    rds_on: Ohm = Field(gt=0)
    rds_on_alpha: PerKelvin = Field(0.005, ge=0)
    tj_max: Celsius
    rth_ja: KelvinPerWatt = Field(gt=0)
    zth: list[FosterStage] = Field(min_length=1)
    soa: Soa


class Environment(_Section):
    t_ambient: Celsius = 25.0


class Rules(_Section):
    """Per-rail overrides of the team's limits (DESIGN.md section 5; common practice)."""

    tj_headroom: Kelvin | None = Field(None, ge=0)
    soa_margin: Ratio | None = Field(None, ge=1)
    fault_margin: Ratio | None = Field(None, ge=1)
    timer_margin: Ratio | None = Field(None, ge=1)
    vds_derating: Ratio | None = Field(None, gt=0, le=1)


class RailDocument(_Section):
    schema_: Literal["railsign.rail/1"] = Field(SCHEMA_ID, alias="schema")
    name: str = Field(min_length=1, max_length=200)
    supply: Supply
    path: PathImpedance = Field(default_factory=PathImpedance)
    load: Load
    switch: Switch
    fet: Fet
    environment: Environment = Field(default_factory=Environment)
    rules: Rules = Field(default_factory=Rules)

    @model_validator(mode="after")
    def _consistent(self) -> "RailDocument":
        if self.fet.tj_max <= self.environment.t_ambient:
            _fail("fet.tj_max", f"fet.tj_max ({self.fet.tj_max:g} °C) must be above environment.t_ambient "
                  f"({self.environment.t_ambient:g} °C)")
        if self.fet.soa.t_case >= self.fet.tj_max:
            _fail("fet.soa.t_case", f"fet.soa.t_case ({self.fet.soa.t_case:g} °C) must be below fet.tj_max "
                  f"({self.fet.tj_max:g} °C): the SOA curves are measured below the junction limit")
        return self


def normalize(document: RailDocument) -> dict[str, Any]:
    """The canonical JSON-able form: SI floats, defaults filled, overrides left unset omitted."""
    data = document.model_dump(mode="json", by_alias=True)
    data["rules"] = {k: v for k, v in data["rules"].items() if v is not None}
    return data


def canonical_json(data: dict[str, Any]) -> str:
    """Sorted keys, no spaces, no NaN: the text that is hashed."""
    return json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def document_sha256(data: dict[str, Any]) -> str:
    return hashlib.sha256(canonical_json(data).encode()).hexdigest()

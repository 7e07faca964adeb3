"""The analysis result as typed models: what `server.analysis.analyze_rail` returns, and the
stored result the API answers with.

One model per part of the result (DESIGN.md section 4). Every number is SI (temperatures
in degC); ``None`` stands where a figure does not exist or is unbounded. The models forbid
unknown keys, so a test that validates the engine's output against them keeps the two in
step. Results of older engine versions keep the shape of their time: the API answers them
as `LegacyResult` (any keys, marked by their engine version).

Provides :class:`AnalysisResult`, :class:`CheckRecord`, :class:`StoredResult` and the
models of each section.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

__all__ = ["Verdict", "CheckRecord", "NominalReading", "Point", "KeyFigure", "Waveforms", "StartupSection",
           "OnsetPoint", "TurnOffPoint", "ShortCircuitSection", "TimerSection", "RetrySection", "SteadySection", "HeadroomFigure", "Headroom",
           "WorstCaseSummary", "CornerEntry", "MonteCarloCheck", "MonteCarloFlag", "MonteCarlo", "AnalysisResult",
           "LegacyResult", "StoredResult"]

Verdict = Literal["pass", "marginal", "fail", "n/a"]
Number = float | None


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid")


class Point(_Model):
    """A point of the tolerance box."""

    v_s: float = Field(description="supply, V")
    c: float = Field(description="load capacitance, F")
    i_limit: Number = Field(description="current limit, A (none: no limit)")
    t_fault: Number = Field(description="fault-timer trip time, s (none: no timer)")
    rds_on: Number = Field(None, description="the FET's R_DS(on) at 25 degC, ohm (only where the rail gives "
                                             "an R_DS(on) maximum, table or parallel FETs)")


class NominalReading(_Model):
    value: Number
    verdict: Verdict
    margin: Number


class CheckRecord(_Model):
    """One check, computed once: the sign-off reading, its nominal reading and where its worst case lies."""

    id: str = Field(description="stable id, for programs")
    title: str = Field(description="what the check says, for people")
    verdict: Verdict
    value: Number = Field(description="the sign-off value (the worst case; the nominal one for a nominal analysis)")
    limit: Number = Field(description="the team's limit (or the physical one where the check has no team margin)")
    edge: Number = Field(description="the bare physical edge")
    unit: str = Field(description="V, A, degC or ratio")
    direction: Literal[">=", "<="] | None = Field(description="the value must stay at or above (>=) or at or "
                                                              "below (<=) its limit; none for a pass/fail flag")
    margin: Number = Field(description="normalised margin: 1.0 at the team's limit, >= 1 where it passes "
                                       "(none: does not apply, or unbounded)")
    margin_edge: Number = Field(description="the physical edge on the same normalised scale")
    basis: Literal["standard", "common practice", "physical limit"]
    nominal: NominalReading
    corner: str | None = Field(description="the worst case's point of the tolerance box in words")
    found_by: Literal["corner", "search", "nominal"] | None
    point: Point | None
    detail: str = Field(description="why the value reads as it does, in words")
    t_start: Number = Field(None, description="the junction temperature the check starts from, degC (none: the "
                                              "check has no starting temperature, or does not apply)")
    rds_on: Number = Field(None, description="the FET's R_DS(on) at 25 degC at this reading, ohm (only where the "
                                             "rail gives an R_DS(on) maximum, table or parallel FETs; none: the "
                                             "check does not depend on it)")


class KeyFigure(_Model):
    id: str
    title: str
    unit: str
    worse: Literal["max", "min"]
    nominal: Number
    worst: Number
    corner: str | None
    found_by: Literal["corner", "search"] | None


class Waveforms(_Model):
    t: list[Number]
    v_out: list[Number]
    i: list[Number]
    v_ds: list[Number]
    p_fet: list[Number]
    tj: list[Number]
    v_in: list[Number] | None = None
    on: list[Number] | None = None


class StartupSection(_Model):
    """The start-up at the nominal point: what happens, with the fault timer acting."""

    status: str
    status_text: str
    complete: bool
    attempts: int
    t_trip: Number
    i_peak: Number
    t_i_peak: Number
    t_limit: Number
    t_settle: Number
    e_fet: Number
    p_fet_peak: Number
    tj_peak: Number
    v_supply_min: Number
    t_below_uvlo: Number
    dip_unbounded: bool
    uvlo_deglitch: Number
    c_in: Number
    v_final: Number
    v_target: Number
    v_end: Number = Field(description="the output where the run leaves it (after a trip, say), V")
    v_stall: Number
    pulse_t_equiv: Number
    pulse_p_peak: Number
    pulse_e: Number
    pulse_v_ds: Number
    pulse_i: Number
    pulse_tj_start: Number
    soa_i_allowed: Number
    soa_ratio: Number
    t_end: Number
    steps: int
    waveforms: Waveforms | None


class OnsetPoint(_Model):
    """The first microseconds of a short (engine 2.1): the current rising until the loop or the fast trip acts."""

    i_peak: Number = Field(description="peak FET current, A")
    t_act: Number = Field(description="time from the short until the loop or the fast trip acts, s (none: neither)")
    acted_by: Literal["loop", "fast_trip"] | None
    fast_trip_fired: bool
    e_fet: Number = Field(description="FET energy during the onset (fully on), J")
    i_final: Number = Field(description="the current the resistances and Rds(on) bound it to, A")
    rds_on: Number = Field(description="Rds(on) at the starting junction temperature, ohm")
    soa_allowed: Number
    soa_ratio: Number
    t_start: Number = Field(description="junction temperature at the start, degC")


class TurnOffPoint(_Model):
    """The hard turn-off that ends a short (engine 2.1): the overshoot the series inductance drives."""

    event: Literal["fast_trip", "fault_timer"]
    i: Number = Field(description="current in the series inductance when the switch opens, A")
    v_peak: Number = Field(description="peak V_DS, V")
    clamped_by: Literal["input_capacitance", "input_clamp", "breakdown"] | None
    v_clamp: Number = Field(description="the clamp level: the input clamp, or the FET's V_DS rating, V")
    e_half_li2: Number = Field(description="1/2 L I^2, J")
    e_clamp: Number = Field(description="energy the clamp absorbs, J")
    e_fet: Number = Field(description="energy the FET absorbs in breakdown, J")


class ShortCircuitPoint(_Model):
    v_ds: Number
    i: Number
    p: Number
    t_soa: Number
    t_thermal: Number
    t_allow: Number
    t_fault: Number
    margin: Number
    limited_by: Literal["soa", "thermal"] | None
    survives_indefinitely: bool
    corner: str
    t_start: Number = None
    onset: OnsetPoint | None = None
    turn_off: TurnOffPoint | None = None
    i_fet: Number = Field(None, description="the worst of parallel FETs' current, A (team rule linear_share)")


class ShortCircuitSection(_Model):
    """The output short circuit at the nominal point, and at its check's worst case."""

    applies: bool
    v_ds: Number = None
    i: Number = None
    p: Number = None
    t_soa: Number = None
    t_thermal: Number = None
    t_allow: Number = None
    t_fault: Number = None
    margin: Number = None
    limited_by: Literal["soa", "thermal"] | None = None
    survives_indefinitely: bool | None = None
    worst: ShortCircuitPoint | None = None
    t_start: Number = Field(None, description="junction temperature the short starts from (the steady state), degC")
    onset: OnsetPoint | None = None
    turn_off: TurnOffPoint | None = None
    i_fet: Number = Field(None, description="the worst of parallel FETs' current, A (team rule linear_share)")


class TimerSection(_Model):
    t_fault_min: float
    t_fault_nom: float
    t_fault_max: float
    t_limit_worst: Number
    t_limit_corner: str | None
    startup_margin: Number
    trip_not_before: Number = Field(description="timer_margin x the worst-case regulation time, s")
    trip_by: Number = Field(description="the worst-case time the FET survives a short circuit / fault_margin, s")
    t_allow_worst: Number
    c_lo: Number
    c_hi: Number
    c_window: list[Number] | None
    c_suggested: Number
    window_note: str | None


class RetrySection(_Model):
    duty: Number
    p_avg: Number
    tj_peak: Number
    tj_valley: Number
    period: Number
    cooldown_ratio: Number = Field(None, description="off time / on time of the retry train")
    retries: int | None = Field(None, description="retries before latching (none: endless)")
    pulses: int | None = Field(None, description="pulses of the train (1 + retries; none: endless)")
    t_start: Number = Field(None, description="junction temperature the train starts from, degC")


class SteadySection(_Model):
    i: Number
    p_fet: Number
    tj: Number
    v_drop: Number
    stable: bool
    i_fet: Number = Field(None, description="the hottest of parallel FETs' current, A (current divider)")
    beyond_data: bool | None = Field(None, description="the junction would leave the part's R_DS(on) data")
    rds_on: Number = Field(None, description="the FET's R_DS(on) at 25 degC at the nominal point, ohm")


class FetSection(_Model):
    """The FET data the result used (only where the rail gives an R_DS(on) maximum, table or parallel FETs)."""

    count: int
    rds_on: float
    rds_on_max: Number
    rds_on_curve: list[list[float]] | None
    rds_data: str = Field(description="where the part's R_DS(on) data over temperature ends, in words")
    t_data_high: float = Field(description="the highest junction temperature the R_DS(on) data covers, degC")
    linear_share: float = Field(description="share of the current the worst FET carries while regulating")
    conduction_share: float = Field(description="largest share of the current one FET carries fully on")
    conduction_share_note: str
    linear_share_note: str


class Excluded(_Model):
    id: str
    title: str


class HeadroomFigure(_Model):
    title: str
    unit: str
    value: Number
    present: Number
    status: Literal["found", "fails", "unbounded", "fails_everywhere", "not_settled", "not_applicable",
                    "not_computed"]
    check: str | None
    check_title: str | None
    note: str
    excluded: list[Excluded] | None = None
    trials: int | None = None


class Headroom(_Model):
    c_max: HeadroomFigure
    limit_max: HeadroomFigure
    load_max: HeadroomFigure | None = None  # with a foldback current limit only


class SearchBudget(_Model):
    quasi_random_points: int
    walkers: int
    compass_rounds: int
    compass_step: float
    seed: int
    parameters: list[str]


class WorstCaseSummary(_Model):
    basis: Literal["worst case", "nominal"]
    corners: int
    search_points: int
    budget: SearchBudget | None
    found_by_search: list[str]


class CornerEntry(_Model):
    name: str
    params: dict[str, Number]
    figures: dict[str, Number]
    verdict: Verdict
    worst_for: list[str]


class Percentiles(_Model):
    p01: float
    p05: float
    p50: float
    p95: float
    p99: float
    min: float
    max: float


class Histogram(_Model):
    edges: list[float]
    counts: list[int]
    total: int


class Beaten(_Model):
    samples: int
    margin: Number
    verdict: Verdict
    worst_case_margin: Number
    worst_case_verdict: Verdict
    point: str


class MonteCarloCheck(_Model):
    title: str
    unit: str
    sense: str
    applies: int
    fail_share: float
    marginal_share: float
    pass_share: float
    value: Percentiles | None
    margin: Percentiles | None
    margin_edge: Number
    worst_case_margin: Number
    histogram: Histogram | None
    beaten: Beaten | None


class MonteCarloFlag(Beaten):
    check: str
    title: str


class MonteCarlo(_Model):
    n: int
    seed: int
    distributions: dict[str, Literal["uniform", "normal"]]
    yield_: float = Field(alias="yield")
    yield_ci95: list[float]
    yield_no_fail: float
    yield_no_fail_ci95: list[float]
    checks: dict[str, MonteCarloCheck]
    flags: list[MonteCarloFlag]
    flag_tolerance: float

    model_config = ConfigDict(extra="forbid", populate_by_name=True, serialize_by_alias=True)


class BankGroupFigures(_Model):
    """One group of a capacitor bank as the result reads it (F, V, ohm; the fraction of nominal at the
    nominal supply on its DC-bias curve)."""

    refs: str | None
    dielectric: str = Field(description="the dielectric in words")
    count: int
    c_each: float
    c_total: float = Field(description="the group's nominal total at 0 V (tolerance aside), F")
    c_at_v_nom: float
    fraction_at_v_nom: float
    c_effective: float = Field(description="charge-equivalent capacitance Q(v_nom) / v_nom, F")
    v_rated: float
    esr: float = Field(description="the group's ESR: its capacitors in parallel, ohm")
    c_tol: float
    derating: list[float] | None
    has_curve: bool


class BankSection(_Model):
    """A capacitor bank's C(v) at nominal and at the low and high corners, over 0 V to the supply maximum."""

    v: list[float]
    c_nominal: list[float]
    c_low: list[float]
    c_high: list[float]
    groups: list[BankGroupFigures]
    c_at_v_nom: float
    fraction_at_v_nom: float = Field(description="c_at_v_nom as a fraction of the total at 0 V")
    c_effective: float
    c_total: float
    v_nom: float
    notes: list[str]


class AnalysisResult(_Model):
    """The whole result of one analysis of one rail revision."""

    engine_version: str
    name: str
    verdict: Verdict
    basis: Literal["worst case", "nominal"] = Field(description="worst case: the sign-off basis; nominal: a quick "
                                                                "look that is not a sign-off verdict")
    signoff: bool
    checks: list[CheckRecord]
    figures: list[KeyFigure]
    startup: StartupSection
    short_circuit: ShortCircuitSection
    timer: TimerSection | None
    retry: RetrySection | None
    steady: SteadySection
    headroom: Headroom
    worst_case: WorstCaseSummary
    corners: list[CornerEntry] | None = None
    monte_carlo: MonteCarlo | None = None
    fet: FetSection | None = None
    bank: BankSection | None = None
    rules: dict[str, float]
    conventions: list[str]
    notes: list[str]
    caution: str


class LegacyResult(BaseModel):
    """A result stored by an older engine version, in the shape of its time."""

    model_config = ConfigDict(extra="allow")
    engine_version: str


class StoredResult(_Model):
    """A stored result: which revision and engine computed it, and the result itself."""

    id: int
    rail_id: int | None
    revision: int | None
    sha256: str
    engine_version: str
    options: dict[str, Any]
    verdict: str
    duration_s: float
    created_at: str
    current_engine: bool = Field(description="false: computed by an older engine version (outdated)")
    result: Annotated[Union[AnalysisResult, LegacyResult], Field(union_mode="left_to_right")] | None = None

    @model_validator(mode="after")
    def _current_engine_reads_as_analysis_result(self) -> "StoredResult":
        """A result of the current engine never passes as a legacy one: a key the engine renamed fails here."""
        if self.current_engine and isinstance(self.result, LegacyResult):
            try:
                AnalysisResult.model_validate(self.result.model_dump())
            except ValidationError as exc:
                raise ValueError(f"a result of the current engine that is no AnalysisResult: {exc}") from None
        return self

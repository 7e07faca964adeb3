"""Words for people: the title, unit kind and hint of every rail-document field.

Provides
--------
FieldWords
    A field's title, its unit kind (a key of ``units.KIND_SYMBOLS``; None for text, choices
    and sections) and a one-line hint.
FIELD_TITLES
    Every field path of the rail document (schema ``railsign.rail/1``, DESIGN.md section 3)
    to its `FieldWords`. List items are written ``[]``: ``fet.zth[].r``; their titles hold
    ``{0}``, ``{1}`` for the 1-based item numbers.
field_title(path), field_words(path)
    The title (or the words) of a concrete path, indices numbered for people:
    ``"fet.soa.curves[2].points[0]"`` -> ``"MOSFET SOA curve 3, point 1"``.
RULE_TITLES, rule_title(name)
    The titles of the team rules (DESIGN.md section 5).
PARAM_WORDS
    The words for the toleranced parameters of a corner (``"v_s"`` -> ``"supply"``).

Paths name fields where a program reads (JSON, API errors); titles are what a person
reads. An error reads "Supply minimum (supply.v_min): must be above 0 V".
"""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = ["FieldWords", "FIELD_TITLES", "RULE_TITLES", "PARAM_WORDS", "field_title", "field_words",
           "generic_path", "rule_title"]


@dataclass(frozen=True)
class FieldWords:
    """How a field reads: ``title`` (may hold ``{0}``, ``{1}`` for item numbers), unit ``kind``, ``hint``."""

    title: str
    kind: str | None = None
    hint: str = ""


W = FieldWords
FIELD_TITLES: dict[str, FieldWords] = {
    "document": W("Rail document"),
    "schema": W("Document schema", None, 'the document\'s version; "railsign.rail/1" when absent'),
    "name": W("Rail name", None, "the rail's name on its board, e.g. VOUT_12V"),
    # supply
    "supply": W("Supply"),
    "supply.v_min": W("Supply minimum", "V", "lowest voltage of the upstream supply"),
    "supply.v_nom": W("Supply nominal", "V", "nominal voltage of the upstream supply"),
    "supply.v_max": W("Supply maximum", "V",
                      "highest voltage of the upstream supply; the short circuit is taken at it"),
    "supply.r_source": W("Source resistance", "ohm", "output resistance of the upstream supply"),
    "supply.l_source": W("Source inductance", "H", "inductance of the upstream supply and its wiring"),
    "supply.i_max": W("Supply current capability", "A", "what the upstream supply can deliver; blank: not checked"),
    "supply.uvlo": W("Upstream UVLO threshold", "V",
                     "supply voltage below which something upstream drops out; blank: none"),
    "supply.uvlo_filter": W("UVLO deglitch time (from the upstream part's datasheet)", "s",
                            "how long the dip must last to trip the upstream UVLO; blank: none, the raw dip is "
                            "compared"),
    "supply.c_in": W("Input capacitance at the switch", "F",
                     "capacitance at the switch input, which bounds the dip; blank: none"),
    "supply.v_clamp": W("Input clamp (TVS) voltage", "V",
                        "clamp at the switch input that limits the overshoot when the switch turns off hard; "
                        "blank: none, the FET's breakdown takes it"),
    # path
    "path": W("Path (traces, connector, sense resistor)"),
    "path.r": W("Path resistance", "ohm", "traces, connector and sense resistor between supply and switch"),
    "path.l": W("Path inductance", "H", "inductance of the traces and connector"),
    # load
    "load": W("Load"),
    "load.c_nom": W("Load capacitance", "F", "bulk capacitance at the switch output, nominal"),
    "load.c_tol": W("Load capacitance tolerance", "fraction", "e.g. 20 % or 0.2"),
    "load.esr": W("Load capacitor ESR", "ohm", "equivalent series resistance of the bulk capacitance"),
    "load.model": W("Load model", None, "none, resistive, constant current or constant power"),
    "load.i_nom": W("Load current at nominal supply", "A", "the current the load draws at the nominal supply"),
    "load.v_on": W("Load turn-on voltage", "V", "the load draws nothing below it; needed for constant power"),
    "load.bank": W("Capacitor bank", None,
                   "groups of capacitors on the output; replaces the load capacitance, its tolerance and ESR; "
                   "blank: one capacitance"),
    "load.bank[]": W("Capacitor group {0}", None, "identical capacitors: count, value, dielectric, rating, ESR"),
    "load.bank[].refs": W("Capacitor group {0} reference designators", None, "e.g. C12, C14-C20; blank: none"),
    "load.bank[].count": W("Capacitor group {0} count", "ratio", "a whole number of identical capacitors"),
    "load.bank[].c_nom": W("Capacitor group {0} value", "F", "nominal capacitance of one capacitor"),
    "load.bank[].c_tol": W("Capacitor group {0} tolerance", "fraction", "e.g. 10 % or 0.1"),
    "load.bank[].dielectric": W("Capacitor group {0} dielectric", None,
                                "C0G, X5R, X7R, aluminium electrolytic, polymer, film or other"),
    "load.bank[].v_rated": W("Capacitor group {0} voltage rating", "V", "rated voltage of one capacitor"),
    "load.bank[].esr": W("Capacitor group {0} ESR", "ohm", "equivalent series resistance of one capacitor"),
    "load.bank[].dc_bias": W("Capacitor group {0} DC-bias curve", None,
                             "[DC voltage (V), capacitance as a fraction of nominal] points, voltage rising, the "
                             "fraction not rising; blank: no derating with voltage"),
    "load.bank[].dc_bias[]": W("Capacitor group {0} DC-bias curve, point {1}", None, "[V, fraction of nominal]"),
    "load.bank[].tempco": W("Capacitor group {0} temperature coefficient", "1/K",
                            "change of capacitance per kelvin from 25 \u00b0C, taken at the ambient; blank: none"),
    "load.bank[].derating": W("Capacitor group {0} derating range", None,
                              "[low, high] fractions of nominal at working voltage where no DC-bias curve is "
                              "known, e.g. [0.4, 0.8]; blank: none"),
    # switch
    "switch": W("Switch"),
    "switch.mode": W("Turn-on mode", None, "hard, slew, current limit or power limit"),
    "switch.t_on": W("Turn-on time", "s", "hard mode: time for the switch resistance to fall to R_DS(on); 0: instant"),
    "switch.dvdt": W("Output slew rate", "V/s", "slew mode: the controlled output ramp, e.g. 5 V/ms"),
    "switch.i_limit": W("Current limit", "A", "current limit and power limit modes"),
    "switch.i_limit_tol": W("Current limit tolerance", "fraction", "e.g. 10 % or 0.1"),
    "switch.p_limit": W("Power limit", "W", "power limit mode: the FET power held during the start"),
    "switch.loop_response": W("Current loop response time", "s",
                              "time from the current passing the limit to the loop regulating it; blank: not "
                              "given, the onset of a short is not evaluated"),
    "switch.fast_trip": W("Fast-trip threshold", "A",
                          "current at which the fast-trip comparator turns the switch off; blank: no fast trip"),
    "switch.fast_trip_delay": W("Fast-trip delay", "s", "comparator delay from the datasheet; needed with a fast trip"),
    "switch.timer": W("Fault timer", None, "blank: no fault timer"),
    "switch.timer.c": W("Timer capacitor", "F", "the capacitor the timer charges"),
    "switch.timer.c_tol": W("Timer capacitor tolerance", "fraction", "e.g. 10 % or 0.1"),
    "switch.timer.i_charge": W("Timer charge current", "A", "the current that charges the timer capacitor"),
    "switch.timer.i_charge_tol": W("Timer charge current tolerance", "fraction", "e.g. 20 % or 0.2"),
    "switch.timer.v_trip": W("Timer trip voltage", "V", "the timer trips when its capacitor reaches it"),
    "switch.timer.v_trip_tol": W("Timer trip voltage tolerance", "fraction", "e.g. 5 % or 0.05"),
    "switch.timer.after_fault": W("After a fault", None, "latch off, or retry after the off time"),
    "switch.timer.retry_off": W("Off time between retries", "s", "needed when the timer retries"),
    "switch.timer.retries": W("Retries before latching", "ratio",
                              "a whole number; blank: retries without end"),
    "switch.foldback": W("Foldback current limit", None,
                         "[V_DS (V), current limit (A)] pairs, V_DS rising, the current not rising; flat beyond "
                         "the ends; blank: the constant current limit"),
    "switch.foldback[]": W("Foldback current limit, point {0}", None, "[V_DS (V), current limit (A)]"),
    "switch.gate": W("Gate drive", None,
                     "the controller's drive of the FET gate; replaces the turn-on time and slew rate; blank: none"),
    "switch.gate.drive": W("Gate drive kind", None, "current (a charge pump) or voltage (through a gate resistor)"),
    "switch.gate.i_gate": W("Gate drive current", "A", "current drive: the current into the gate, e.g. 10 µA"),
    "switch.gate.v_drive": W("Gate drive voltage", "V",
                             "voltage drive: the driver's voltage measured from ground, e.g. the supply + 10 V"),
    "switch.gate.r_gate": W("Gate resistance", "ohm", "voltage drive: resistance between driver and gate"),
    "switch.gate.c_ext": W("External gate capacitor", "F", "from gate to ground; slows the output ramp; 0: none"),
    # MOSFET
    "fet": W("MOSFET"),
    "fet.name": W("MOSFET name", None, "an invented or in-house name of the part"),
    "fet.vds_max": W("MOSFET drain-source voltage rating", "V", "V_DS(max) from the datasheet"),
    "fet.id_pulse_max": W("MOSFET pulsed drain current rating", "A", "blank: not checked"),
    "fet.e_avalanche": W("MOSFET single-pulse avalanche energy rating", "J",
                         "E_AS from the datasheet; blank: not checked"),
    "fet.rds_on": W("MOSFET R_DS(on) at T_j 25 \u00b0C", "ohm",
                    "on-resistance at a junction temperature of 25 \u00b0C"),
    "fet.rds_on_alpha": W("R_DS(on) temperature coefficient", "1/K", "linear rise of R_DS(on) with T_j, e.g. 0.5 %/K"),
    "fet.rds_on_max": W("MOSFET R_DS(on) maximum at T_j 25 \u00b0C", "ohm",
                        "datasheet maximum; blank: no spread (the typical value only)"),
    "fet.rds_on_curve": W("R_DS(on) against junction temperature", None,
                          "[T_j (\u00b0C), R_DS(on) / R_DS(on) at 25 \u00b0C] points from the datasheet curve, "
                          "T_j rising; blank: the linear coefficient up to T_j(max)"),
    "fet.rds_on_curve[]": W("R_DS(on) against junction temperature, point {0}", None,
                            "[T_j (\u00b0C), ratio]"),
    "fet.count": W("Identical MOSFETs in parallel", "ratio", "a whole number; 1: one MOSFET"),
    "fet.tj_max": W("MOSFET maximum junction temperature", "degC", "T_j(max) from the datasheet"),
    "fet.rth_ja": W("MOSFET thermal resistance, junction to ambient", "K/W", "as mounted on the board"),
    "fet.zth": W("Foster stages (junction to ambient)", None, "one r (K/W), tau (s) pair per stage"),
    "fet.zth[]": W("Foster stage {0}", None, "r (K/W) and tau (s)"),
    "fet.zth[].r": W("Foster stage {0} resistance", "K/W", "thermal resistance of the stage"),
    "fet.zth[].tau": W("Foster stage {0} time constant", "s", "thermal time constant of the stage"),
    "fet.gate": W("MOSFET gate data", None, "needed with a gate drive; blank: none"),
    "fet.gate.v_th": W("MOSFET gate threshold voltage", "V", "V_GS(th), where the channel starts to conduct"),
    "fet.gate.k": W("MOSFET square-law constant", "A/V2",
                    "I_D = k/2 (V_GS - V_th)^2 in saturation; or give g_fs at a current"),
    "fet.gate.g_fs": W("MOSFET forward transconductance", "S", "g_fs from the datasheet, at the current below"),
    "fet.gate.i_gfs": W("Drain current of the transconductance", "A", "the I_D the datasheet states g_fs at"),
    "fet.gate.c_iss": W("MOSFET input capacitance", "F", "C_iss = C_gs + C_gd"),
    "fet.gate.c_rss": W("MOSFET reverse transfer capacitance", "F", "C_rss = C_gd, gate to drain"),
    "fet.zth_points": W("Zth curve points the Foster stages were fitted to", None,
                        "the datasheet's single-pulse Zth curve (junction to case) as [t (s), Zth (K/W)] points, "
                        "t rising; kept with the stages, the analysis uses the stages; blank: none"),
    "fet.zth_points[]": W("Zth curve point {0}", None, "[t (s), Zth (K/W)]"),
    "fet.soa": W("MOSFET SOA", None, "the safe operating area chart"),
    "fet.soa.t_case": W("Case temperature of the SOA curves", "degC", "the case temperature the chart is drawn at"),
    "fet.soa.curves": W("MOSFET SOA curves", None, "one curve per pulse width, at least two; null pulse width: DC"),
    "fet.soa.curves[]": W("MOSFET SOA curve {0}", None, "a pulse width and its V_DS, I_D points"),
    "fet.soa.curves[].t_pulse": W("MOSFET SOA curve {0} pulse width", "s", "null or DC for the DC curve"),
    "fet.soa.curves[].points": W("MOSFET SOA curve {0} points", None, "[V_DS, I_D] pairs, V_DS rising"),
    "fet.soa.curves[].points[]": W("MOSFET SOA curve {0}, point {1}", None, "[V_DS (V), I_D (A)]"),
    # environment
    "environment": W("Environment"),
    "environment.t_ambient": W("Worst-case high ambient temperature", "degC",
                               "the highest ambient the board sees; every check starts from it"),
    # team rules (DESIGN.md section 5; common practice, not a standard)
    "rules": W("Rule overrides", None, "blank: the team's rule; common practice, not a standard"),
    "rules.tj_headroom": W("Junction temperature headroom", "K",
                           "start-up, retry and steady T_j stay this far below T_j(max)"),
    "rules.soa_margin": W("Start-up SOA margin", "ratio", "allowed / actual current of the start-up pulse"),
    "rules.fault_margin": W("Short-circuit time margin", "ratio", "time the FET survives / longest fault time"),
    "rules.timer_margin": W("Fault timer start-up margin", "ratio",
                            "shortest fault time / longest time regulating at start-up"),
    "rules.vds_derating": W("V_DS derating", "ratio", "supply maximum / MOSFET V_DS rating, at most"),
    "rules.linear_share": W("Linear-mode share of parallel MOSFETs", "ratio",
                            "share of the current the worst MOSFET carries while regulating; 1: one carries it all "
                            "(common practice, no source)"),
}
del W

RULE_TITLES: dict[str, str] = {path.removeprefix("rules."): w.title for path, w in FIELD_TITLES.items()
                               if path.startswith("rules.")}

# the toleranced parameters of a corner or a Monte Carlo sample, in words
PARAM_WORDS: dict[str, str] = {
    "v_s": "supply",
    "c": "load C",
    "i_limit": "current limit",
    "timer_c": "timer C",
    "i_charge": "timer charge current",
    "v_trip": "timer trip voltage",
    "t_fault": "fault timer",
    "rds_on": "MOSFET R_DS(on)",
}

_INDEX = re.compile(r"\[(\d+)\]")


def generic_path(path: str) -> str:
    """``"fet.soa.curves[2].points[0]"`` -> ``"fet.soa.curves[].points[]"`` (the key in `FIELD_TITLES`)."""
    return _INDEX.sub("[]", path)


def field_words(path: str) -> FieldWords | None:
    """The words of a concrete document path (indices numbered from 1), or None for an unknown path."""
    words = FIELD_TITLES.get(generic_path(path))
    if words is None:
        return None
    numbers = [int(i) + 1 for i in _INDEX.findall(path)]
    return FieldWords(words.title.format(*numbers) if numbers else words.title, words.kind, words.hint)


def field_title(path: str) -> str:
    """The title of a rail-document path for people; an unknown path is returned as it is.

    ``"supply.v_min"`` -> ``"Supply minimum"``, ``"fet.zth[1].r"`` -> ``"Foster stage 2
    resistance"``, ``"fet.soa.curves[2].points[0]"`` -> ``"MOSFET SOA curve 3, point 1"``.
    """
    words = field_words(path or "document")
    return path if words is None else words.title


def rule_title(name: str) -> str:
    """The title of a team rule (``"timer_margin"`` -> ``"Fault timer start-up margin"``)."""
    return RULE_TITLES.get(name, name)

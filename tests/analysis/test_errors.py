"""Error paths: bad documents name the field; unsolvable cases say so."""

from __future__ import annotations

import math

import pytest

from server.analysis import AnalysisError, DocumentError, analyze_rail
from server.analysis.circuit import circuit_rows
from server.analysis.document import read_rail
from server.analysis.soa import soa_curve_warnings
from server.analysis.words import field_title
from server.analysis.startup import STATUS_NO_CONVERGENCE, STATUS_STALLED, simulate_startup

from .rail_documents import efuse_12v, simple_doc


def _set(doc, path, value):
    keys = path.split(".")
    d = doc
    for k in keys[:-1]:
        d = d[k]
    if value is _DELETE:
        del d[keys[-1]]
    else:
        d[keys[-1]] = value
    return doc


_DELETE = object()

BAD = [
    ("load.c_nom", 0.0, "load.c_nom"),
    ("load.c_nom", -1e-3, "load.c_nom"),
    ("supply.v_min", 13.0, "supply.v_min"),          # above v_max
    ("supply.v_nom", float("nan"), "supply.v_nom"),
    ("supply.r_source", float("inf"), "supply.r_source"),
    ("supply.v_max", "12 V", "supply.v_max"),         # units are the schema's job: SI numbers here
    ("supply.v_max", True, "supply.v_max"),
    ("load.c_tol", 1.5, "load.c_tol"),
    ("load.model", "motor", "load.model"),
    ("switch.mode", "soft", "switch.mode"),
    ("switch.i_limit", None, "switch.i_limit"),       # required in current_limit mode
    ("switch.timer.after_fault", "retry", "switch.timer.retry_off"),
    ("switch.timer.c", 0.0, "switch.timer.c"),
    ("fet.tj_max", 50.0, "fet.tj_max"),               # below t_ambient
    ("fet.zth", [], "fet.zth"),
    ("fet.zth", [{"r": 1.0, "tau": -1.0}], "fet.zth[0].tau"),
    ("fet.name", "", "fet.name"),
    ("environment", _DELETE, "environment"),
    ("rules", {"soa_margin": 0.9}, "rules.soa_margin"),
    ("rules", {"made_up": 1.0}, "rules.made_up"),
    ("schema", "railsign.rail/9", "schema"),
]


@pytest.mark.parametrize("path, value, field", BAD)
def test_bad_document_names_the_field(path, value, field):
    doc = _set(efuse_12v(), path, value)
    with pytest.raises(DocumentError) as exc:
        analyze_rail(doc)
    assert exc.value.field == field
    # the field in words first, then its path
    assert str(exc.value).startswith(f"{field_title(field)} ({field}): ") or str(exc.value).startswith(f"{field}: ")
    assert isinstance(exc.value, ValueError)


def test_soa_points_must_be_positive_and_ordered():
    doc = efuse_12v()
    doc["fet"]["soa"]["curves"][1]["points"][1] = [0.0, 10.0]
    with pytest.raises(DocumentError) as exc:
        read_rail(doc)
    assert exc.value.field == "fet.soa.curves[1].points[1]"
    doc = efuse_12v()
    doc["fet"]["soa"]["curves"][2]["points"] = [[5.0, 10.0], [2.0, 20.0]]
    with pytest.raises(DocumentError, match="increase") as exc:
        read_rail(doc)
    assert exc.value.field == "fet.soa.curves[2].points[1]"


def test_soa_needs_two_pulse_widths_and_reads_crossing_curves_with_a_warning():
    doc = efuse_12v()
    doc["fet"]["soa"]["curves"] = doc["fet"]["soa"]["curves"][:1]
    with pytest.raises(DocumentError, match="two pulse widths") as exc:
        read_rail(doc)
    assert exc.value.field == "fet.soa.curves"
    doc = efuse_12v()
    doc["fet"]["soa"]["curves"][4]["points"] = [[0.2, 500.0], [40.0, 100.0]]  # 100 ms above 10 ms
    rail = read_rail(doc)  # computable: read as the conservative envelope, and said so
    assert soa_curve_warnings(rail.fet)


@pytest.mark.parametrize("mode, missing, extra", [
    ("slew", "switch.dvdt", {"dvdt": None}),
    ("current_limit", "switch.i_limit", {"i_limit": None}),
    ("power_limit", "switch.p_limit", {"i_limit": 5.0, "p_limit": None}),
])
def test_mode_requires_its_parameter(mode, missing, extra):
    with pytest.raises(DocumentError) as exc:
        analyze_rail(simple_doc(mode=mode, **extra))
    assert exc.value.field == missing
    assert f"is required in {mode.replace('_', ' ')} mode" in str(exc.value)


def test_constant_power_load_needs_v_on():
    with pytest.raises(DocumentError) as exc:
        analyze_rail(simple_doc(load="constant_power", i_nom=2.0, v_on=0.0))
    assert exc.value.field == "load.v_on"


def test_bad_arguments_raise_value_error():
    with pytest.raises(ValueError, match="monte_carlo"):
        analyze_rail(efuse_12v(), monte_carlo=-1)
    with pytest.raises(ValueError, match="distribution"):
        analyze_rail(efuse_12v(), distribution="lognormal")


def test_step_cap_reports_no_convergence():
    rail = read_rail(efuse_12v())
    cz = circuit_rows(rail, v_s=[12.0], c=[470e-6])
    fig = simulate_startup(cz, max_steps=10)
    assert fig.status[0] == STATUS_NO_CONVERGENCE
    # the figures of what was computed up to t_end, not NaN
    assert 0.0 < fig.t_end[0] < 1e-4 and fig.steps[0] == 10
    assert math.isfinite(fig.i_peak[0]) and math.isfinite(fig.tj_peak[0]) and math.isfinite(fig.e_fet[0])
    assert math.isnan(fig.t_limit[0]) and math.isnan(fig.t_settle[0])  # neither exists for an unfinished start


def test_unstable_constant_power_load_fails_as_could_not_settle():
    # A constant-power load is a negative incremental resistance -v^2/P; behind 10 uH with
    # 1 uF and almost no damping the output oscillates for ever (the small-signal
    # instability of a constant-power load; R. D. Middlebrook, "Input filter
    # considerations in design and application of switching regulators", IEEE IAS 1976).
    # A design that cannot work gets a verdict, never an error.
    doc = simple_doc(mode="hard", v=48.0, c=1e-6, r=1e-3, l=10e-6, i_limit=None, load="constant_power",
                     i_nom=200.0 / 48.0, v_on=30.0)
    res = analyze_rail(doc, headroom=False)
    assert res["verdict"] == "fail"
    first = res["checks"][0]
    assert first["id"] == "startup_complete" and first["verdict"] == "fail"
    # the oscillation either never settles or heats the FET past destruction first: both are
    # a failing start with its reason, never an error
    assert "Could not settle" in first["detail"] or "would be destroyed" in first["detail"]


def test_current_limit_below_the_load_stalls_and_fails():
    # 2 A limit into a resistive load that needs 3 A at 12 V: the output stalls at
    # I R = 8 V (C dv/dt = I - v / R reaches 0), a physical fact, reported as a failed check.
    doc = simple_doc(mode="current_limit", v=12.0, c=1e-3, load="resistive", i_nom=3.0, i_limit=2.0)
    rail = read_rail(doc)
    fig = simulate_startup(circuit_rows(rail, v_s=[12.0], c=[1e-3]))
    assert fig.status[0] == STATUS_STALLED
    assert fig.v_stall[0] == pytest.approx(8.0, rel=1e-2)
    res = analyze_rail(doc)
    assert res["verdict"] == "fail"
    first = res["checks"][0]
    assert first["id"] == "startup_complete" and first["verdict"] == "fail"
    assert res["startup"]["status"] == "stalled" and res["startup"]["i_peak"] is None


def test_analysis_error_is_not_a_document_error():
    assert not issubclass(AnalysisError, ValueError)
    assert issubclass(DocumentError, ValueError)

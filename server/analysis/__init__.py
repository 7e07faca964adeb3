"""railsign analysis: the pure computation of a switched rail's protection margins.

NumPy and SciPy only; no web, database, file or network I/O. Entry points:

analyze_rail(doc, *, rules=None, corners=False, monte_carlo=0, seed=0,
             distribution="uniform", waveforms=True, progress=None, headroom=True) -> dict
    Every figure, check and verdict of DESIGN.md section 4 for a rail document.
format_report(result, doc) -> str
    The result as a readable text report.
derated_soa_curves(fet, t_ambient), soa_allowed_time(fet, v_ds, i_d, t_ambient)
    SOA helpers for the chart pages.
zth(stages, t)
    Foster transient thermal impedance.
e12_values(), e_series(name), values_between(lo, hi, series), round_to_series(x, ...)
    IEC 60063 preferred values.
ENGINE_VERSION, DEFAULT_RULES, RULE_DESCRIPTIONS, CHECKS
    Versions, team rules with their meaning and basis, and the check catalogue.
FIELD_TITLES, field_title(path), PARAM_WORDS (module ``words``)
    The title, unit kind and hint of every rail-document field; corner parameters in words.
quantity(value, kind), eng(x, unit), temp(x) (module ``units``)
    The one formatter of figures for people: 470 µF, 4.7 mΩ, 125.0 °C, 5 V/ms, 20 %.
DocumentError (a ValueError with ``.field``), AnalysisError
"""

from .checks import CHECKS
from .engine import CAUTION, ENGINE_VERSION, analyze_rail
from .errors import AnalysisError, DocumentError
from .eseries import e12_values, e_series, round_to_series, values_between
from .report import format_report
from .rules import DEFAULT_RULES, RULE_DESCRIPTIONS
from .soa import derated_soa_curves, soa_allowed_time
from .thermal import zth
from .units import eng, quantity, temp
from .words import FIELD_TITLES, PARAM_WORDS, field_title

__all__ = [
    "ENGINE_VERSION",
    "DEFAULT_RULES",
    "RULE_DESCRIPTIONS",
    "CHECKS",
    "CAUTION",
    "AnalysisError",
    "DocumentError",
    "FIELD_TITLES",
    "PARAM_WORDS",
    "field_title",
    "quantity",
    "eng",
    "temp",
    "analyze_rail",
    "format_report",
    "derated_soa_curves",
    "soa_allowed_time",
    "zth",
    "e12_values",
    "e_series",
    "values_between",
    "round_to_series",
]

"""The analysis reads the same numbers as the stored reading of a fixed set of rails.

A guard for changes of the code that must not change a number (a reorganisation, a speed-up):
every demo rail (`server/demo.py`) and every example rail file (`examples/rails/*.json`) is
analysed on the sign-off basis (corners, the worst-case search, the headroom search, the
nominal waveforms) with a seeded Monte Carlo of a few samples, and as a nominal quick look
(headroom on the nominal point, no waveforms). The whole result is walked and compared with
`data/result_identity.json`: every float to 1e-5 relative, everything else (keys, words,
verdicts, counts, None) equal. Why 1e-5: builds of numpy and scipy, and the vector
units of the processor they run on, differ in the last bits of their functions; the
integrator's step control, event location and the headroom bisection carry such a difference
into the figures. Measured between two machines (same numpy 2.4.6 and scipy 1.17.1, another
processor): 5,718 floats differ, the largest by 2.4e-6 (the headroom search's capacitance,
found by bisection to its own tolerance), every other by at most 4.2e-7 (a settling time).
1e-5 still catches any change of method, which moves figures by far more.

The stored reading is the engine's own earlier output, not an outside reference: a change
that is meant to change numbers rewrites it on purpose, and its commit says why::

    .venv/bin/python -m tests.analysis.test_result_identity --write
"""

from __future__ import annotations

import copy
import json
import math
import sys
from pathlib import Path

import pytest

import railsign
from server.analysis import analyze_rail
from server.demo import BOARDS, FETS

ROOT = Path(__file__).resolve().parents[2]
STORED = Path(__file__).resolve().parent / "data" / "result_identity.json"
RTOL = 1e-5
MC_SAMPLES = 8


def rail_documents() -> dict[str, dict]:
    """Every demo rail with its part, and every example rail file, normalized, by name."""
    docs = {}
    for _, _, rails in BOARDS:
        for doc, part in rails:
            docs[f"demo/{doc['name']}"] = railsign.parse_document({**copy.deepcopy(doc),
                                                                    "fet": copy.deepcopy(FETS[part])})
    for path in sorted((ROOT / "examples" / "rails").glob("*.json")):
        docs[f"examples/{path.name}"] = railsign.load_document(path)
    return docs


def cases() -> list[tuple[str, str, dict]]:
    """(case id, rail name, analyze_rail options): each rail on the sign-off basis with a seeded
    Monte Carlo (the distributions alternate), and as a nominal quick look."""
    out = []
    for k, name in enumerate(rail_documents()):
        out.append((f"{name} signoff", name, {"monte_carlo": MC_SAMPLES, "seed": 100 + k,
                                               "distribution": ("uniform", "normal")[k % 2]}))
        out.append((f"{name} nominal", name, {"corners": False, "waveforms": False}))
    return out


def analyse_all() -> dict[str, dict]:
    docs = rail_documents()
    return {case: analyze_rail(docs[name], **options) for case, name, options in cases()}


def differences(expected, actual, path: str = "$") -> list[str]:
    """Where ``actual`` differs from ``expected``: floats beyond RTOL relative, anything else unequal."""
    if isinstance(expected, float) and isinstance(actual, float):
        if math.isclose(expected, actual, rel_tol=RTOL, abs_tol=1e-18):
            return []
        return [f"{path}: {actual!r} != {expected!r}"]
    if isinstance(expected, dict) and isinstance(actual, dict):
        if list(expected) != list(actual):
            return [f"{path}: keys {list(actual)} != {list(expected)}"]
        return [d for key in expected for d in differences(expected[key], actual[key], f"{path}.{key}")]
    if isinstance(expected, list) and isinstance(actual, list):
        if len(expected) != len(actual):
            return [f"{path}: {len(actual)} items != {len(expected)}"]
        return [d for j, (e, a) in enumerate(zip(expected, actual)) for d in differences(e, a, f"{path}[{j}]")]
    if type(expected) is not type(actual) or expected != actual:
        return [f"{path}: {actual!r} != {expected!r}"]
    return []


def count_numbers(obj) -> int:
    if isinstance(obj, dict):
        return sum(count_numbers(v) for v in obj.values())
    if isinstance(obj, list):
        return sum(count_numbers(v) for v in obj)
    return int(isinstance(obj, (int, float)) and not isinstance(obj, bool))


@pytest.fixture(scope="module")
def stored() -> dict:
    return json.loads(STORED.read_text())


@pytest.fixture(scope="module")
def results() -> dict:
    # through JSON, as a stored result travels: the comparison sees what a reader would
    return json.loads(json.dumps(analyse_all(), allow_nan=False))


def test_the_stored_reading_covers_every_rail_and_case(stored):
    assert list(stored) == [case for case, _, _ in cases()]
    assert len(rail_documents()) == sum(len(rails) for _, _, rails in BOARDS) + len(
        list((ROOT / "examples" / "rails").glob("*.json")))
    assert count_numbers(stored) > 30_000
    assert all(stored[f"{name} signoff"]["monte_carlo"]["n"] == MC_SAMPLES for name in rail_documents())


def test_every_number_of_every_result_is_the_stored_one(stored, results):
    found = differences(stored, results)
    assert found == [], f"{len(found)} differences, the first: " + "\n".join(found[:20])


def test_the_comparison_finds_a_changed_number_key_and_word(stored):
    case = next(iter(stored))
    i_peak = stored[case]["startup"]["i_peak"]
    assert isinstance(i_peak, float) and i_peak > 0
    changed = copy.deepcopy(stored[case])
    changed["verdict"] = "different"
    changed["startup"]["i_peak"] = i_peak * (1.0 + 1e-4)
    changed["steady"]["extra"] = 0.0
    found = differences(stored[case], changed)
    assert [f.split(":")[0] for f in found] == ["$.verdict", "$.startup.i_peak", "$.steady"]
    within = copy.deepcopy(stored[case])
    within["startup"]["i_peak"] = i_peak * (1.0 + 1e-6)
    assert differences(stored[case], within) == []
    assert differences({"n": 1}, {"n": 1.0}) != []


def main(argv: list[str]) -> int:
    if argv != ["--write"]:
        print("usage: python -m tests.analysis.test_result_identity --write", file=sys.stderr)
        return 2
    data = analyse_all()
    STORED.parent.mkdir(parents=True, exist_ok=True)
    STORED.write_text(json.dumps(data, allow_nan=False, indent=0, separators=(",", ":")) + "\n")
    print(f"{STORED.relative_to(ROOT)}: {len(data)} results of {len(rail_documents())} rails, "
          f"{count_numbers(data)} numbers")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

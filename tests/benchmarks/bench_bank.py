"""Benchmark of capacitor banks: run as ``python tests/benchmarks/bench_bank.py``.

A rail with a 40-capacitor bank (invented: 2 electrolytics, 30 X7R ceramics with a DC-bias curve,
8 X5R ceramics; three groups) against the same rail with one capacitance of the bank's total and
the groups' ESRs in parallel, side by side in the same run: the nominal analysis, the sign-off
worst case (corners and search, no headroom search) and a Monte Carlo of 10,000 samples (medians),
with the ratios. The same for the 40 capacitors as 40 groups of their own (every one a branch of
the transient), the most the bank can cost.

Not collected by pytest (the name does not start with ``test_``).
"""

from __future__ import annotations

import copy
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from server.analysis import analyze_rail  # noqa: E402
from server.analysis.bank import bank_esr, bank_total  # noqa: E402
from server.analysis.document import read_rail  # noqa: E402
from tests.analysis import rail_documents as rd  # noqa: E402

CURVE = [[0.0, 1.0], [4.0, 0.85], [8.0, 0.62], [12.0, 0.45], [16.0, 0.36], [25.0, 0.25]]  # invented


def grouped() -> list[dict]:
    return [{"count": 2, "c_nom": 330e-6, "c_tol": 0.2, "dielectric": "electrolytic", "v_rated": 25.0, "esr": 0.08},
            {"count": 30, "c_nom": 22e-6, "c_tol": 0.1, "dielectric": "x7r", "v_rated": 25.0, "esr": 0.004,
             "dc_bias": CURVE},
            {"count": 8, "c_nom": 4.7e-6, "c_tol": 0.1, "dielectric": "x5r", "v_rated": 16.0, "esr": 0.008}]


def one_by_one() -> list[dict]:
    out = []
    for g in grouped():
        for k in range(g["count"]):
            out.append({**copy.deepcopy(g), "count": 1, "c_nom": g["c_nom"] * (1.0 + 0.001 * k)})
    return out


def with_bank(groups: list[dict]) -> dict:
    doc = rd.efuse_12v()
    doc["load"] = {k: v for k, v in doc["load"].items() if k not in ("c_nom", "c_tol", "esr")}
    doc["load"]["bank"] = groups
    return doc


def single_of(doc: dict) -> dict:
    rail = read_rail(doc)
    out = copy.deepcopy(doc)
    out["load"].pop("bank")
    out["load"].update(c_nom=bank_total(rail.load.bank, rail.t_ambient), c_tol=0.2, esr=bank_esr(rail.load.bank))
    return out


def median_time(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def figures(doc: dict) -> tuple[float, float, float]:
    nominal = median_time(lambda: analyze_rail(doc, corners=False, headroom=False, waveforms=False), 9)
    worst = median_time(lambda: analyze_rail(doc, headroom=False, waveforms=False), 3)
    mc = median_time(lambda: analyze_rail(doc, corners=False, headroom=False, waveforms=False, monte_carlo=10_000), 1)
    return nominal, worst, mc


def main() -> None:
    print("A rail with a 40-capacitor bank against one capacitance of the bank's total (median; same run)")
    print(f"  {'variant':34s} {'nominal':>10s} {'worst case':>11s} {'MC 10k':>9s}   ratios to one capacitance")
    for name, groups in (("3 groups (2 + 30 + 8 capacitors)", grouped()), ("40 groups of one capacitor", one_by_one())):
        doc = with_bank(groups)
        base = figures(single_of(doc))
        bank = figures(doc)
        print(f"  {'one capacitance':34s} {base[0] * 1e3:8.1f} ms {base[1] * 1e3:8.0f} ms {base[2]:7.2f} s")
        ratios = " ".join(f"{a / b:5.2f}" for a, b in zip(bank, base))
        print(f"  {name:34s} {bank[0] * 1e3:8.1f} ms {bank[1] * 1e3:8.0f} ms {bank[2]:7.2f} s   {ratios}")


if __name__ == "__main__":
    main()

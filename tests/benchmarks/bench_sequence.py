"""Benchmark of the board power-up sequence: run as ``python tests/benchmarks/bench_sequence.py``.

Prints, for boards of 4, 12 and 50 invented rails on three shared supplies (12 V, 5 V with
source inductance and bus capacitance, 48 V; eFuse, slew, load-switch and hot-swap rails, a
third of them enabled at times, the others by another rail's power-good), the time of the whole
analysis (the coupled time line at nominal and at the supply-low corner, both corners stacked
in one run, then the checks and the decimated series; median of 3), the steps of the time
line and the time per step.

Not collected by pytest (the name does not start with ``test_``).
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from server.analysis.sequence import analyze_sequence  # noqa: E402
from tests.analysis import rail_documents as rd  # noqa: E402

MAKERS = [(rd.efuse_12v, "p12"), (rd.slew_12v_demo, "p12"), (rd.load_switch_5v, "p5"), (rd.hotswap_48v, "p48")]
SUPPLIES = [
    {"id": "p12", "name": "12 V", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.02, "i_max": 20.0},
    {"id": "p5", "name": "5 V", "v_nom": 5.0, "v_min": 4.75, "r_source": 0.01, "l_source": 50e-9, "c_bus": 220e-6,
     "i_max": 10.0},
    {"id": "p48", "name": "48 V", "v_nom": 48.0, "v_min": 40.0, "r_source": 0.05, "i_max": 20.0},
]


def board(n: int) -> dict:
    rails = []
    for k in range(n):
        make, supply = MAKERS[k % 4]
        enable = ({"at": 2e-3 * k} if k % 3 == 0 or k < 4 else
                  {"after": rails[k - 4]["id"], "threshold": 0.8, "delay": 1e-3})
        rails.append({"id": f"r{k}", "rail": make(), "supply": supply, "enable": enable})
    return {"schema": "railsign.sequence/1", "name": f"{n} rails", "supplies": SUPPLIES, "rails": rails}


def main() -> None:
    for n in (4, 12, 50):
        doc = board(n)
        times, result = [], None
        for _ in range(3):
            start = time.perf_counter()
            result = analyze_sequence(doc)
            times.append(time.perf_counter() - start)
        steps = result["corners"][0]["steps"]
        median = statistics.median(times)
        print(f"{n:3d} rails: {median:7.2f} s (nominal + supply-low), {steps} steps, "
              f"{median / steps * 1e3:.3f} ms per step, verdict {result['verdict']}")


if __name__ == "__main__":
    main()

"""Running ngspice in batch mode on the circuit of a rail, for comparisons.

The netlist models the same circuit as the analysis: ideal supply, series resistance and
inductance, the input capacitance at the switch input (optional, charged to the supply at
t = 0), the switch as a behavioural current source (B-source) whose current is the smaller
of the fully-on current v_ds / R_sw(t) and the regulation reference, a capacitor with its
ESR, and a resistive load. ngspice integrates it with its own Gear method and
step control (ngspice manual, chapter 15 "Transient analysis"; B-sources chapter 5.1).
"""

from __future__ import annotations

import math
import shutil
import subprocess
from pathlib import Path

import numpy as np

__all__ = ["NGSPICE", "ngspice_missing_message", "simulate_ngspice", "simulate_ngspice_sequence", "longest_time_below"]

NGSPICE = shutil.which("ngspice")


def ngspice_missing_message() -> str:
    return "ngspice is not installed: install the Debian package `ngspice` (apt-get install ngspice)"


def _n(x) -> str:
    """A number for the netlist (plain Python float repr)."""
    return repr(float(x))


def _netlist(*, v, r, l, c, esr, r_load, mode, rds, i_limit, dvdt, t_on, r_off, t_stop, t_max, out_file, c_in=None):
    lines = ["* railsign reference circuit", f"V1 vs 0 DC {_n(v)}"]
    node = "vs"
    if r > 0:
        lines.append(f"R1 vs n1 {_n(r)}")
        node = "n1"
    if l > 0:
        lines.append(f"L1 {node} sw {_n(l)} IC=0")
    else:
        lines.append(f"Rz {node} sw 1e-12")
    if c_in:
        lines.append(f"Cin sw 0 {_n(c_in)} IC={_n(v)}")
    lines.append("Vsense sw swx DC 0")
    if t_on > 0:
        a, b = math.log(r_off), math.log(rds) - math.log(r_off)
        rsw = f"exp({_n(a)} + {_n(b)} * min(time / {_n(t_on)}, 1))"
    else:
        rsw = f"{_n(rds)}"
    full = f"V(swx,out) / ({rsw})"
    refs = []
    if i_limit is not None:
        refs.append(f"{_n(i_limit)}")
    if mode == "slew":
        load_i = f"V(out) / {_n(r_load)}" if r_load is not None else "0"
        refs.append(f"{_n(c * dvdt)} + {load_i}")
    expr = full
    for ref in refs:
        expr = f"min({expr}, {ref})"
    lines.append(f"B1 swx out I = {expr}")
    if esr > 0:
        lines.append(f"Resr out x {_n(esr)}")
        lines.append(f"C1 x 0 {_n(c)} IC=0")
    else:
        lines.append(f"C1 out 0 {_n(c)} IC=0")
    if r_load is not None:
        lines.append(f"Rload out 0 {_n(r_load)}")
    lines += [
        ".options reltol=1e-6 abstol=1e-12 vntol=1e-9 method=gear maxord=2 itl4=100",
        ".control",
        f"tran {_n(t_max)} {_n(t_stop)} 0 {_n(t_max)} uic",
        f"wrdata {out_file} i(vsense) v(out) v(swx)",
        "quit",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def simulate_ngspice(tmp_path: Path, *, t_stop: float, points: int = 40000, **circuit) -> dict:
    """Run ngspice -b on the circuit and return its waveform and figures.

    Returns
    -------
    dict
        ``t``, ``i``, ``v_out``, ``v_in``, ``v_ds`` arrays, and ``i_peak`` (A), ``e_fet`` (J,
        trapezoidal integral of v_ds i), ``t_limit`` (s, time during which the
        regulation reference is below the fully-on current), ``v_in_min`` (V, the lowest
        switch-input voltage).
    """
    if NGSPICE is None:
        raise RuntimeError(ngspice_missing_message())
    out_file = "wave.txt"
    net = _netlist(t_stop=t_stop, t_max=t_stop / points, out_file=out_file, **circuit)
    (tmp_path / "rail.cir").write_text(net)
    proc = subprocess.run([NGSPICE, "-b", "rail.cir"], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    if proc.returncode != 0 or not (tmp_path / out_file).exists():
        raise RuntimeError(f"ngspice failed: {proc.stdout[-2000:]} {proc.stderr[-2000:]}")
    data = np.loadtxt(tmp_path / out_file)
    t, i, v_out, v_sw = data[:, 0], data[:, 1], data[:, 3], data[:, 5]
    v_ds = v_sw - v_out
    p = v_ds * i
    # regulating where the fully-on current exceeds the regulation reference
    rds = circuit["rds"]
    t_on = circuit["t_on"]
    if t_on > 0:
        r_sw = np.exp(math.log(circuit["r_off"]) + np.minimum(t / t_on, 1.0) * (math.log(rds) - math.log(circuit["r_off"])))
    else:
        r_sw = np.full_like(t, rds)
    ref = np.full_like(t, np.inf)
    if circuit.get("i_limit") is not None:
        ref = np.minimum(ref, circuit["i_limit"])
    if circuit["mode"] == "slew":
        load_i = v_out / circuit["r_load"] if circuit.get("r_load") is not None else 0.0
        ref = np.minimum(ref, circuit["c"] * circuit["dvdt"] + load_i)
    limited = (v_ds / r_sw) > ref * (1.0 + 1e-4)
    dt = np.diff(t)
    t_limit = float(np.sum(dt * 0.5 * (limited[1:].astype(float) + limited[:-1].astype(float))))
    return {
        "t": t, "i": i, "v_out": v_out, "v_in": v_sw, "v_ds": v_ds, "v_in_min": float(v_sw.min()),
        "i_peak": float(i.max()),
        "e_fet": float(np.sum(dt * 0.5 * (p[1:] + p[:-1]))),
        "t_limit": t_limit,
    }


def longest_time_below(t: np.ndarray, v: np.ndarray, level: float) -> float:
    """Longest continuous time (s) a sampled waveform stays below ``level`` (V), the
    waveform linear between samples and the crossings interpolated."""
    below = v < level
    best, start = 0.0, (t[0] if below[0] else None)
    for k in range(1, t.size):
        if below[k] == below[k - 1]:
            continue
        tc = t[k - 1] + (t[k] - t[k - 1]) * (v[k - 1] - level) / (v[k - 1] - v[k])
        if below[k]:
            start = tc
        else:
            best = max(best, tc - start)
            start = None
    if start is not None:
        best = max(best, t[-1] - start)
    return best


def _sequence_netlist(*, v, r, c_bus, rails, t_stop, t_max, out_file):
    """Several switched rails on one source: ideal v behind r (and c_bus on the shared bus), each rail a
    B-source switch that conducts forward only from its enable instant t_en (the step function u()), its resistance
    falling log-linearly from r_off to rds over t_on, its current capped at i_limit; then its capacitor
    (with esr) and its resistive load."""
    lines = ["* railsign board sequence reference circuit", f"V1 vs 0 DC {_n(v)}",
             "Vsrc vs vs2 DC 0", f"R1 vs2 bus {_n(r)}"]
    if c_bus:
        lines.append(f"Cbus bus 0 {_n(c_bus)} IC={_n(v)}")
    probes = ["i(vsrc)", "v(bus)"]
    for k, rail in enumerate(rails):
        ten = _n(rail["t_en"])
        if rail.get("t_on", 0.0) > 0:
            a, b = math.log(rail["r_off"]), math.log(rail["rds"]) - math.log(rail["r_off"])
            rsw = f"exp({_n(a)} + {_n(b)} * min(max(time - {ten}, 0) / {_n(rail['t_on'])}, 1))"
        else:
            rsw = _n(rail["rds"])
        expr = f"V(bus,o{k}) / ({rsw})"
        if rail.get("i_limit") is not None:
            expr = f"min({expr}, {_n(rail['i_limit'])})"
        lines.append(f"Vs{k} bus b{k} DC 0")
        lines.append(f"B{k} b{k} o{k} I = u(time - {ten}) * max({expr}, 0)")
        if rail.get("esr", 0.0) > 0:
            lines += [f"Re{k} o{k} x{k} {_n(rail['esr'])}", f"C{k} x{k} 0 {_n(rail['c'])} IC=0"]
        else:
            lines.append(f"C{k} o{k} 0 {_n(rail['c'])} IC=0")
        if rail.get("r_load") is not None:
            lines.append(f"Rl{k} o{k} 0 {_n(rail['r_load'])}")
        probes += [f"i(vs{k})", f"v(o{k})"]
    lines += [
        ".options reltol=1e-6 abstol=1e-12 vntol=1e-9 method=gear maxord=2 itl4=100",
        ".control",
        f"tran {_n(t_max)} {_n(t_stop)} 0 {_n(t_max)} uic",
        f"wrdata {out_file} {' '.join(probes)}",
        "quit",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def simulate_ngspice_sequence(tmp_path: Path, *, t_stop: float, points: int = 40000, **circuit) -> dict:
    """Run ngspice -b on several switched rails sharing one source (`_sequence_netlist`).

    Returns
    -------
    dict
        ``t``, ``i_src`` (the source current), ``v_bus``, and per rail lists ``i`` and ``v_out``.
    """
    if NGSPICE is None:
        raise RuntimeError(ngspice_missing_message())
    out_file = "wave.txt"
    net = _sequence_netlist(t_stop=t_stop, t_max=t_stop / points, out_file=out_file, **circuit)
    (tmp_path / "board.cir").write_text(net)
    proc = subprocess.run([NGSPICE, "-b", "board.cir"], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    if proc.returncode != 0 or not (tmp_path / out_file).exists():
        raise RuntimeError(f"ngspice failed: {proc.stdout[-2000:]} {proc.stderr[-2000:]}")
    data = np.loadtxt(tmp_path / out_file)
    n = len(circuit["rails"])
    return {"t": data[:, 0], "i_src": data[:, 1], "v_bus": data[:, 3],
            "i": [data[:, 5 + 4 * k] for k in range(n)], "v_out": [data[:, 7 + 4 * k] for k in range(n)]}

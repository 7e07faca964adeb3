"""Running ngspice in batch mode on the circuit of a rail, for comparisons.

The netlist models the same circuit as the analysis: ideal supply, series resistance and
inductance, the input capacitance at the switch input (optional, charged to the supply at
t = 0), the switch as a behavioural current source (B-source) whose current is the smaller
of the fully-on current v_ds / R_sw(t) and the regulation reference, a capacitor with its
ESR, and a resistive load. ngspice integrates it with its own Gear method and
step control (ngspice manual, chapter 15 "Transient analysis"; B-sources chapter 5.1).

With ``gate`` the switch is instead ngspice's built-in level-1 MOSFET (Shichman-Hodges;
ngspice manual, chapter 11 "MOSFETs", LEVEL=1: VTO, KP, LAMBDA=0, no oxide thickness so no
intrinsic capacitances) as a source follower, body tied to the source, W = L, with explicit
linear capacitors gate-source, gate-drain and gate-ground around it, driven by a gate
current source or a drive voltage to ground through a gate resistor.
"""

from __future__ import annotations

import math
import shutil
import subprocess
from pathlib import Path

import numpy as np

__all__ = ["NGSPICE", "ngspice_missing_message", "simulate_ngspice", "simulate_turn_off", "simulate_ngspice_sequence",
           "longest_time_below"]

NGSPICE = shutil.which("ngspice")


def ngspice_missing_message() -> str:
    return "ngspice is not installed: install the Debian package `ngspice` (apt-get install ngspice)"


def _n(x) -> str:
    """A number for the netlist (plain Python float repr)."""
    return repr(float(x))


def _gate_lines(gate: dict, v: float) -> list[str]:
    """The level-1 MOSFET between swx (drain) and out (source) and its gate network."""
    lines = [f".model nfet NMOS (LEVEL=1 VTO={_n(gate['v_th'])} KP={_n(gate['k'])} LAMBDA=0)",
             # the initial node voltages (behind a series inductance the drain node has none of its own)
             f".ic v(g)=0 v(swx)={_n(v)} v(out)=0",
             "M1 swx g out out nfet W=1u L=1u",
             f"Cgs g out {_n(gate['c_gs'])} IC=0",
             # the gate-drain capacitor starts charged to -v (gate at 0 V, drain at the supply)
             f"Cgd g swx {_n(gate['c_gd'])} IC={_n(-v)}"]
    if gate.get("c_ext"):
        lines.append(f"Cext g 0 {_n(gate['c_ext'])} IC=0")
    if gate.get("i_gate") is not None:
        lines.append(f"Ig 0 g DC {_n(gate['i_gate'])}")
    else:
        lines.append(f"Vdrv drv 0 DC {_n(gate['v_drive'])}")
        lines.append(f"Rg drv g {_n(gate['r_gate'])}")
    return lines


OPTIONS = ".options reltol=1e-6 abstol=1e-12 vntol=1e-9 method=gear maxord=2 itl4=100"
# ngspice's start from the initial conditions of the level-1 MOSFET at cut-off sometimes ends in
# "timestep too small" for one value and not for a neighbour's: these are tried in turn, and a
# run that still aborts fails the test
GATE_OPTIONS = (OPTIONS, OPTIONS.replace("reltol=1e-6", "reltol=1e-5"), OPTIONS + " gmin=1e-11")


def _bank_lines(bank: list[dict]) -> list[str]:
    """A capacitor bank at the output: per group its ESR and either a linear capacitor (``c``) or a
    charge ``q`` (an expression in the branch voltage written ``{v}``). The charge is the usual
    charge-based nonlinear capacitor of circuit simulation: a B-source makes a node's voltage
    equal to q(v), a 1 F capacitor on that node carries dq/dt, and a current-controlled current
    source draws that current from the branch (ngspice manual, chapters 4 and 5: B, F and V
    sources)."""
    lines = []
    for k, g in enumerate(bank):
        node = f"b{k}"
        lines.append(f"Rb{k} out {node} {_n(g['esr']) if g.get('esr', 0.0) > 0 else '1e-12'}")
        if g.get("q") is not None:
            lines += [f"Bq{k} q{k} 0 V = {g['q'].format(v=f'V({node})')}",
                      f"Cq{k} q{k} qx{k} 1 IC=0",
                      f"Vq{k} qx{k} 0 DC 0",
                      f"Fq{k} {node} 0 Vq{k} 1"]
        else:
            lines.append(f"Cb{k} {node} 0 {_n(g['c'])} IC=0")
    return lines


def _netlist(*, v, r, l, c, esr, r_load, mode, rds, i_limit, dvdt, t_on, r_off, t_stop, t_max, out_file, c_in=None,
             gate=None, options=OPTIONS, bank=None):
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
    if gate is None:
        lines.append(f"B1 swx out I = {expr}")
    else:
        lines += _gate_lines(gate, v)
    if bank is not None:
        lines += _bank_lines(bank)
    elif esr > 0:
        lines.append(f"Resr out x {_n(esr)}")
        lines.append(f"C1 x 0 {_n(c)} IC=0")
    else:
        lines.append(f"C1 out 0 {_n(c)} IC=0")
    if r_load is not None:
        lines.append(f"Rload out 0 {_n(r_load)}")
    lines += [
        options,
        ".control",
        f"tran {_n(t_max)} {_n(t_stop)} 0 {_n(t_max)} uic",
        f"wrdata {out_file} i(vsense) v(out) v(swx)" + (" v(g)" if gate is not None else ""),
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
    for options in (GATE_OPTIONS if circuit.get("gate") is not None else (OPTIONS,)):
        net = _netlist(t_stop=t_stop, t_max=t_stop / points, out_file=out_file, options=options, **circuit)
        (tmp_path / "rail.cir").write_text(net)
        proc = subprocess.run([NGSPICE, "-b", "rail.cir"], cwd=tmp_path, capture_output=True, text=True,
                              timeout=120)
        aborted = "aborted" in proc.stdout + proc.stderr
        if proc.returncode == 0 and not aborted and (tmp_path / out_file).exists():
            break
    else:
        raise RuntimeError(f"ngspice failed: {proc.stdout[-2000:]} {proc.stderr[-2000:]}")
    data = np.loadtxt(tmp_path / out_file)
    t, i, v_out, v_sw = data[:, 0], data[:, 1], data[:, 3], data[:, 5]
    v_ds = v_sw - v_out
    p = v_ds * i
    dt = np.diff(t)
    if circuit.get("gate") is not None:
        return {"t": t, "i": i, "v_out": v_out, "v_in": v_sw, "v_ds": v_ds, "v_g": data[:, 7],
                "i_peak": float(i.max()), "e_fet": float(np.sum(dt * 0.5 * (p[1:] + p[:-1])))}
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
    t_limit = float(np.sum(dt * 0.5 * (limited[1:].astype(float) + limited[:-1].astype(float))))
    return {
        "t": t, "i": i, "v_out": v_out, "v_in": v_sw, "v_ds": v_ds, "v_in_min": float(v_sw.min()),
        "i_peak": float(i.max()),
        "e_fet": float(np.sum(dt * 0.5 * (p[1:] + p[:-1]))),
        "t_limit": t_limit,
    }


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


def _turn_off_netlist(*, v, r, l, i0, v_in0, c_in, v_clamp, t_stop, t_max, out_file) -> str:
    """The switch opening with current i0 in the series inductance: the supply behind r and l
    into the switch input, which holds the input capacitance (optional, at v_in0) and a clamp
    to v_clamp (a steep diode in series with a DC source: the TVS, or the FET's breakdown with
    the output shorted). The switch itself is open from t = 0."""
    lines = ["* railsign turn-off circuit", f"V1 vs 0 DC {_n(v)}"]
    node = "vs"
    if r > 0:
        lines.append(f"R1 vs n1 {_n(r)}")
        node = "n1"
    lines.append(f"L1 {node} sw {_n(l)} IC={_n(i0)}")
    # without input capacitance a small one keeps the node defined (its charge is negligible: 10 pF)
    lines.append(f"Cin sw 0 {_n(c_in if c_in else 1e-11)} IC={_n(v_in0)}")
    lines += [f"Vcl clx 0 DC {_n(v_clamp)}", "Vm sw swm DC 0", "Dcl swm clx DCLAMP",
              ".model DCLAMP D(IS=1e-14 N=0.02 RS=0)"]
    lines += [
        ".options reltol=1e-6 abstol=1e-12 vntol=1e-9 method=gear maxord=2 itl4=200",
        ".control",
        f"tran {_n(t_max)} {_n(t_stop)} 0 {_n(t_max)} uic",
        f"wrdata {out_file} v(sw) i(vm) i(l1)",
        "quit",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def simulate_turn_off(tmp_path: Path, *, t_stop: float, points: int = 40000, **circuit) -> dict:
    """Run ngspice -b on the turn-off circuit (`_turn_off_netlist`).

    Returns
    -------
    dict
        ``t``, ``v_in``, ``i_clamp``, ``i_l`` arrays; ``v_peak`` (V, the highest switch-input
        voltage: V_DS with the output shorted) and ``e_clamp`` (J, trapezoidal integral of
        v_in i_clamp).
    """
    if NGSPICE is None:
        raise RuntimeError(ngspice_missing_message())
    out_file = "off.txt"
    net = _turn_off_netlist(t_stop=t_stop, t_max=t_stop / points, out_file=out_file, **circuit)
    (tmp_path / "off.cir").write_text(net)
    proc = subprocess.run([NGSPICE, "-b", "off.cir"], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    if proc.returncode != 0 or not (tmp_path / out_file).exists():
        raise RuntimeError(f"ngspice failed: {proc.stdout[-2000:]} {proc.stderr[-2000:]}")
    data = np.loadtxt(tmp_path / out_file)
    t, v_in, i_cl, i_l = data[:, 0], data[:, 1], data[:, 3], data[:, 5]
    p = v_in * i_cl
    dt = np.diff(t)
    return {"t": t, "v_in": v_in, "i_clamp": i_cl, "i_l": i_l, "v_peak": float(v_in.max()),
            "e_clamp": float(np.sum(dt * 0.5 * (p[1:] + p[:-1])))}

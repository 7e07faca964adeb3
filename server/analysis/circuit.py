"""The switched-rail circuit as rows of parameters, one row per corner or sample.

Provides
--------
Circuit
    Per-row circuit parameters (supply, series R and L, capacitor, current limit) and the
    parameters all rows share (load model, switch mode, FET, Foster network).
circuit_rows(rail, *, v_s, c, i_limit=None, t_fault=None)
    Build a `Circuit` for a rail with per-row supply voltage, capacitance, current limit
    and fault-timer trip time.

The circuit: an ideal supply v_s with r_source and l_source, the path (r, l), the node at
the switch input with the input capacitance c_in to ground (optional), the switch, and at
the output a capacitor c with series esr in parallel with the load. The load draws
nothing below v_on; above it, resistive: v / R with R = v_nom / i_nom; constant current:
i_nom; constant power: P / v with P = v_nom * i_nom.

Every method here is a few lines of circuit algebra: Kirchhoff's laws and Ohm's law, the
quadratic of a constant-power load behind a resistance (any circuit-analysis textbook, e.g.
C. K. Alexander and M. N. O. Sadiku, "Fundamentals of Electric Circuits", chapters 2-4).

A foldback limit (``fold``: the document's nominal points) makes the limit a function of
V_DS, scaled per row by ``i_lim / i_lim_nom`` (`foldback`). A gate drive (``gate``: a
`GateModel`) makes the switch a source-follower N-channel FET whose gate is a state of the
integrator (`integrator`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from .bank import BankShape, bank_shape
from .document import Rail
from .foldback import foldback_limit
from .thermal import RdsTemperature, foster_arrays, rds_temperature

__all__ = ["NO_LIMIT", "R_OFF", "GateModel", "Circuit", "circuit_rows"]

NO_LIMIT = 1e30  # A or W: stands for "no limit" (kept finite so arithmetic stays clean)
R_OFF = 1e6  # ohm: switch resistance at the start of a hard turn-on ramp


@dataclass(frozen=True)
class GateModel:
    """The gate of a source-follower N-channel FET and its drive (SI units).

    ``i_g0``, ``g_g``: the drive as a Norton source into the gate node,
    i_gate = i_g0 - g_g v_g (current drive: i_g0 = i_gate, g_g = 0; voltage drive from ground:
    i_g0 = v_drive / r_gate, g_g = 1 / r_gate). ``c_gs`` gate-source (source at the output),
    ``c_gd`` gate-drain (drain at the switch input), ``c_ext`` gate to ground. ``v_th``
    threshold, ``k`` square-law constant: I_D = k/2 (V_GS - V_th)^2 in saturation.
    """

    i_g0: float
    g_g: float
    c_gs: float
    c_gd: float
    c_ext: float
    v_th: float
    k: float

    @property
    def c_total(self) -> float:
        return self.c_gs + self.c_gd + self.c_ext


def gate_model(rail: Rail) -> GateModel | None:
    """The rail's `GateModel`, or None without a gate drive."""
    drive, part = rail.switch.gate, rail.fet.gate
    if drive is None or part is None:
        return None
    if drive.drive == "current":
        i_g0, g_g = drive.i_gate, 0.0
    else:
        i_g0, g_g = drive.v_drive / drive.r_gate, 1.0 / drive.r_gate
    return GateModel(i_g0=i_g0, g_g=g_g, c_gs=part.c_gs, c_gd=part.c_gd, c_ext=drive.c_ext, v_th=part.v_th,
                     k=part.k)


@dataclass(frozen=True)
class Circuit:
    """Rows of circuit parameters (arrays of shape (n,)) and shared parameters.

    Attributes (units)
    ------------------
    v_s : supply voltage, V.  r : r_source + path r, ohm.  l : l_source + path l, H.
    c : output capacitance, F.  esr : capacitor series resistance, ohm.
    i_lim : current limit, A (``NO_LIMIT`` where there is none).
    load, i_nom (A), v_on (V), v_nom (V): the load model.
    mode, t_on (s), dvdt (V/s), p_lim (W): the switch.
    rds_on (ohm at 25 degC, per row: the switch's, i.e. the parallel FETs' together), alpha
    (1/K), rds_t (the Rds(on) ratio against Tj, `thermal.RdsTemperature`), r_th (K/W: the
    Foster network of the FET that carries the largest share, scaled by that share), tau_th
    (s), t_amb (degC), tj_max (degC): the FET.
    t_fault : per row, the regulation time after which the fault timer turns the switch
    off, s (``inf``: no timer acting). after_fault : "latch", "retry" or "none"; retry_off :
    off time before a retry, s; attempts : the most attempts of a retrying switch (1 + its
    retries before latching), None: the integrator's own cap.
    c_in : capacitance at the switch input, F (0.0: none). uvlo : the upstream
    undervoltage lockout threshold, V (nan: none).
    fold : the foldback points (V_DS V, nominal current A), or None; i_lim_nom : the
    nominal limit that scales them (A). gate : the `GateModel`, or None.
    bank : the capacitor bank's shared data (`bank.BankShape`: DC-bias tables, group ESRs), or
    None: one capacitor ``c`` with ``esr``. bank_c : per row and group, the group's capacitance
    at 0 V (F, shape (n, groups)); ``c`` is then their sum and ``esr`` the groups' ESRs in
    parallel (for estimates; the transient reads the groups).
    """

    v_s: np.ndarray
    r: np.ndarray
    l: np.ndarray
    c: np.ndarray
    esr: np.ndarray
    i_lim: np.ndarray
    load: str
    i_nom: float
    v_on: float
    v_nom: float
    mode: str
    t_on: float
    dvdt: float
    p_lim: float
    rds_on: np.ndarray
    alpha: float
    r_th: np.ndarray = field(repr=False)
    tau_th: np.ndarray = field(repr=False)
    t_amb: float = 25.0
    tj_max: float = 150.0
    t_fault: np.ndarray | None = field(default=None, repr=False)
    after_fault: str = "none"
    retry_off: float = math.inf
    attempts: int | None = None
    c_in: float = 0.0
    uvlo: float = math.nan
    rds_t: RdsTemperature | None = field(default=None, repr=False)
    fold: tuple[tuple[float, float], ...] | None = None
    i_lim_nom: float = NO_LIMIT
    gate: GateModel | None = None
    bank: BankShape | None = field(default=None, repr=False)
    bank_c: np.ndarray | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        if self.t_fault is None:
            object.__setattr__(self, "t_fault", np.full(self.v_s.shape, np.inf))
        object.__setattr__(self, "rds_on", np.broadcast_to(np.asarray(self.rds_on, dtype=float),
                                                           self.v_s.shape).copy())
        if self.rds_t is None:
            object.__setattr__(self, "rds_t", RdsTemperature(self.alpha, math.inf))

    @property
    def n(self) -> int:
        return self.v_s.shape[0]

    @property
    def has_limit(self) -> bool:
        """Whether the switch can regulate (slew, a current limit or a power limit)."""
        return self.mode in ("slew", "power_limit") or bool(np.any(self.i_lim < NO_LIMIT)) or self.fold is not None

    def take(self, rows: np.ndarray) -> "Circuit":
        """The same circuit restricted to ``rows`` (index or boolean array)."""
        return replace(
            self,
            v_s=self.v_s[rows], r=self.r[rows], l=self.l[rows], c=self.c[rows],
            esr=self.esr[rows], i_lim=self.i_lim[rows], t_fault=self.t_fault[rows], rds_on=self.rds_on[rows],
            bank_c=None if self.bank_c is None else self.bank_c[rows],
        )

    # -- load ---------------------------------------------------------------

    @property
    def r_load(self) -> float:
        """Resistive load, ohm."""
        return self.v_nom / self.i_nom if self.i_nom > 0 else np.inf

    @property
    def p_load(self) -> float:
        """Constant-power load, W."""
        return self.v_nom * self.i_nom

    def load_current(self, v):
        """Load current at output voltage ``v`` (V), A."""
        v = np.asarray(v, dtype=float)
        if self.load == "none":
            return np.zeros_like(v)
        on = v > self.v_on
        if self.load == "resistive":
            return np.where(on, v / self.r_load, 0.0)
        if self.load == "constant_current":
            return np.where(on, self.i_nom, 0.0)
        return np.where(on, self.p_load / np.maximum(v, self.v_on), 0.0)

    # -- DC operating point ---------------------------------------------------

    def final_output(self, tj) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """DC operating point with the switch fully on at junction temperature ``tj``.

        Parameters
        ----------
        tj : float or ndarray
            Junction temperature, degC (sets Rds(on)).

        Returns
        -------
        v_out : ndarray
            Output voltage, V.
        i : ndarray
            Load current, A.
        ok : ndarray of bool
            False where no operating point exists (a constant-power load asking for
            more than v_s^2 / (4 R), or a load that would sit below its v_on).
        """
        rt = self.r + self.rds_on * self.rds_t.ratio(tj)
        v = self.v_s
        if self.load == "none":
            return v.copy(), np.zeros_like(v), np.ones(v.shape, bool)
        if self.load == "resistive":
            i = v / (rt + self.r_load)
        elif self.load == "constant_current":
            i = np.full_like(v, self.i_nom)
        else:
            disc = v * v - 4.0 * rt * self.p_load
            root = np.sqrt(np.maximum(disc, 0.0))
            i = 2.0 * self.p_load / (v + root)  # smaller root, stable form
            ok_p = disc >= 0.0
            vo = v - rt * i
            return vo, i, ok_p & (vo > self.v_on)
        vo = v - rt * i
        return vo, i, vo > self.v_on

    def fold_scale(self) -> np.ndarray:
        """Per row, the factor on the foldback curve's nominal currents: i_lim / i_lim_nom."""
        return self.i_lim / self.i_lim_nom

    def current_limit(self, v_out) -> np.ndarray:
        """The current limit at output voltage ``v_out`` (V; shape (..., n)), A: i_lim, or the
        foldback curve at V_DS = v_s - v_out - r i (the drop in the series resistance taken
        with one fixed-point step from the curve at v_s - v_out, which is exact on the flat
        parts and errs by r times the slope's change otherwise)."""
        v_out = np.asarray(v_out, dtype=float)
        if self.fold is None:
            return np.broadcast_to(self.i_lim, v_out.shape[-1:]) * np.ones_like(v_out)
        scale = self.fold_scale()
        vd = np.maximum(self.v_s - v_out, 0.0)
        i0 = scale * foldback_limit(self.fold, vd)
        return scale * foldback_limit(self.fold, np.maximum(vd - self.r * i0, 0.0))

    def limit_reference(self, v_out) -> np.ndarray:
        """Current the switch allows while regulating, at output voltage ``v_out``, A."""
        v_out = np.asarray(v_out, dtype=float)
        ref = self.current_limit(v_out)
        if self.mode == "slew" and self.gate is None:
            ref = np.minimum(ref, self.c * self.dvdt + self.load_current(v_out))
        elif self.mode == "power_limit":
            vd = np.maximum(self.v_s - v_out, 0.0)
            disc = vd * vd - 4.0 * self.r * self.p_lim
            ip = np.where(disc > 0, 2.0 * self.p_lim / (vd + np.sqrt(np.maximum(disc, 0.0))), NO_LIMIT)
            ref = np.minimum(ref, ip)
        return ref


def bank_rows(rail: Rail, c: np.ndarray, mult=None) -> tuple[BankShape | None, np.ndarray | None]:
    """The bank's shared data and each row's group capacitances at 0 V (F, shape (n, groups)):
    the groups' nominal totals times the row's multipliers (``mult``, shape (n, groups); None:
    nominal), scaled so that they add up to the row's ``c`` (a capacitance searched as a whole
    scales every group alike). (None, None) without a bank."""
    groups = rail.load.bank
    if groups is None:
        return None, None
    shape = bank_shape(groups, rail.t_ambient)
    n = c.shape[0]
    m = np.ones((n, shape.n_groups)) if mult is None else np.broadcast_to(np.asarray(mult, float), (n, shape.n_groups))
    raw = shape.nominal * m
    return shape, raw * (c / raw.sum(axis=1))[:, None]


def circuit_rows(rail: Rail, *, v_s, c, i_limit=None, t_fault=None, rds=None, share: float = 1.0,
                 bank=None) -> Circuit:
    """Build the circuit rows of a rail.

    Parameters
    ----------
    rail : Rail
    v_s : array_like, shape (n,)
        Supply voltage per row, V.
    c : array_like, shape (n,)
        Output capacitance per row, F.
    i_limit : array_like, shape (n,), optional
        Current limit per row, A (default: the rail's nominal limit, or none).
    t_fault : array_like, shape (n,), optional
        Regulation time per row after which the fault timer turns the switch off, s
        (default ``inf``: the start-up runs as if no timer acted).
    rds : array_like, shape (n,), optional
        Rds(on) at 25 degC of each FET per row, ohm (default the part's typical
        ``rds_on``); the switch conducts through ``fet.count`` of them in parallel.
    share : float
        The share of the switch's current the worst FET carries (1: one FET, or the linear
        share of parallel FETs): its junction is followed, so the Foster network, given per
        FET, is scaled by it (the rise of share * P through r equals that of P through
        share * r: superposition of a linear network).
    bank : array_like, shape (n, groups), optional
        With a capacitor bank: each group's capacitance relative to its nominal per row (the
        corners and the Monte Carlo set them; default nominal), scaled to add up to ``c``.

    Returns
    -------
    Circuit
    """
    v_s = np.atleast_1d(np.asarray(v_s, dtype=float))
    n = v_s.shape[0]
    full = lambda x: np.full(n, float(x))  # noqa: E731
    sw = rail.switch
    if i_limit is None:
        i_limit = full(sw.i_limit if sw.i_limit is not None else NO_LIMIT)
    r_th, tau_th = foster_arrays(rail.fet.zth)
    if share != 1.0:
        r_th = r_th * share
    count = rail.fet.count
    rds = np.full(n, rail.fet.rds_on) if rds is None else np.broadcast_to(np.asarray(rds, dtype=float), (n,))
    if count != 1:
        rds = rds / count
    if t_fault is None:
        t_fault = np.inf
    timer = sw.timer
    c = np.broadcast_to(np.asarray(c, dtype=float), (n,)).copy()
    shape, bank_c = bank_rows(rail, c, bank)
    return Circuit(
        v_s=v_s,
        r=full(rail.supply.r_source + rail.path.r),
        l=full(rail.supply.l_source + rail.path.l),
        c=c,
        esr=full(rail.load.esr),
        i_lim=np.broadcast_to(np.asarray(i_limit, dtype=float), (n,)).copy(),
        load=rail.load.model,
        i_nom=rail.load.i_nom,
        v_on=rail.load.v_on,
        v_nom=rail.supply.v_nom,
        mode=sw.mode,
        t_on=sw.t_on,
        dvdt=sw.dvdt or 0.0,
        p_lim=sw.p_limit if sw.p_limit is not None else NO_LIMIT,
        rds_on=rds,
        alpha=rail.fet.rds_on_alpha,
        rds_t=rds_temperature(rail.fet),
        r_th=r_th,
        tau_th=tau_th,
        t_amb=rail.t_ambient,
        tj_max=rail.fet.tj_max,
        t_fault=np.broadcast_to(np.asarray(t_fault, dtype=float), (n,)).copy(),
        after_fault=timer.after_fault if timer is not None else "none",
        retry_off=timer.retry_off if (timer is not None and timer.retry_off is not None) else math.inf,
        attempts=(timer.retries + 1) if (timer is not None and timer.retries is not None) else None,
        c_in=rail.supply.c_in or 0.0,
        uvlo=rail.supply.uvlo if rail.supply.uvlo is not None else math.nan,
        fold=sw.foldback,
        i_lim_nom=sw.i_limit if sw.i_limit is not None else NO_LIMIT,
        gate=gate_model(rail),
        bank=shape,
        bank_c=bank_c,
    )

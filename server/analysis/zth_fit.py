"""Foster stages fitted to a datasheet's transient thermal impedance curve, and the board stage.

Provides
--------
fit_zth(points, n_stages, rth_ja=None, board_tau=None)
    Fit ``n_stages`` Foster stages to single-pulse Zth points (junction to case, as datasheets
    give them) and, with ``rth_ja``, add the board stage so that Zth at long times is rth_ja.
fit_foster(t, z, n_stages)
    The bounded least-squares fit alone: stages (r, tau) by increasing tau.
board_stage(fitted_total, rth_ja, tau=None)
    The mounting stage: r = rth_ja - fitted total, tau given or `BOARD_TAU_DEFAULT`.
zth_deviation(stages, points)
    How far stored stages lie from the points they were fitted to (largest relative difference).
ZthFit
    The result: the points, the fitted stages, the error at every point and the largest, the
    board stage and every stage for the part document (``fet.zth``).
FIT_STAGES, BOARD_TAU_DEFAULT, BOARD_TAU_WORDS, METHOD

Method
------
The Foster network's step response is Zth(t) = sum_i r_i (1 - exp(-t / tau_i)) (the Foster
form of JEDEC JESD51-14 and of MOSFET datasheets; `thermal.zth`). The 2 N unknowns are fitted
by bounded nonlinear least squares (scipy.optimize.least_squares, trust-region reflective)
in log r and log tau, which keeps every r and tau positive, with the residual
log(Zth_fit(t_k) / Zth_k) at every point: a relative error, so that the microsecond decades
weigh as much as the seconds. Starting values: the time constants log-spaced over the time
range of the points, each r the rise of the (log-interpolated) curve between the geometric
midpoints of neighbouring time constants; three spreads of the time constants are tried
(the data's range, a decade wider at each end, half a decade narrower) and the best fit
kept. Time constants are bounded to three decades beyond the points' time range, the r to
ten times the curve's last value (a stage cannot be larger than the curve it makes).

The board stage: a datasheet's Zth is junction to case (the case held at a fixed
temperature); mounted on a board, junction to ambient at long times is R_th(j-a), so one
more stage r_b = R_th(j-a) - sum r_i is added. Its time constant is the user's or
`BOARD_TAU_DEFAULT` (10 s: the order of the thermal time constant of a power MOSFET's
copper area on an FR-4 board, seconds to minutes; common practice, no source). A shorter
board time constant gives a higher Zth at every time, so it is the cautious choice when in
doubt.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import least_squares

from .document import read_zth_points
from .errors import DocumentError
from .units import quantity

__all__ = ["FIT_STAGES", "BOARD_TAU_DEFAULT", "BOARD_TAU_WORDS", "METHOD", "ZthFit", "fit_zth", "fit_foster",
           "board_stage", "zth_deviation"]

FIT_STAGES = (2, 3, 4, 5, 6)  # the number of stages one may fit
BOARD_TAU_DEFAULT = 10.0  # s; common practice, no source (see the module's docstring)
BOARD_TAU_WORDS = ("10 s when none is given: the order of the thermal time constant of a power MOSFET's copper "
                   "area on an FR-4 board (common practice, no source); a shorter one is the cautious choice")
METHOD = ("Foster stages fitted by bounded least squares on the logarithm of Zth at each point (relative error, "
          "every decade weighs alike; scipy.optimize.least_squares); the board stage makes Zth at long times equal "
          "R_th junction-ambient")
_SPREADS = (0.0, np.log(10.0), -0.5 * np.log(10.0))  # widening of the log-spaced starting time constants
_TAU_ROOM = np.log(1e3)  # time constants may lie up to three decades beyond the points
_TOL = 1e-14


@dataclass(frozen=True)
class ZthFit:
    """A Foster fit of Zth points.

    ``points``: the (t s, Zth K/W) points; ``stages``: the fitted (r K/W, tau s) by increasing
    tau; ``errors``: Zth_fit / Zth - 1 at every point; ``board``: the board stage (r, tau) or
    None when no R_th junction-ambient was given; ``board_tau_default``: its tau is
    `BOARD_TAU_DEFAULT`.
    """

    points: tuple[tuple[float, float], ...]
    stages: tuple[tuple[float, float], ...]
    errors: tuple[float, ...]
    rth_ja: float | None = None
    board: tuple[float, float] | None = None
    board_tau_default: bool = False

    @property
    def fitted_total(self) -> float:
        """Sum of the fitted r: Zth of the fitted stages at long times, K/W."""
        return float(sum(r for r, _ in self.stages))

    @property
    def largest_error(self) -> float:
        """The largest |Zth_fit / Zth - 1| over the points."""
        return float(max(abs(e) for e in self.errors))

    @property
    def largest_error_at(self) -> float:
        """The time of the point with the largest error, s."""
        k = int(np.argmax(np.abs(self.errors)))
        return self.points[k][0]

    @property
    def all_stages(self) -> tuple[tuple[float, float], ...]:
        """The stages for the part document (``fet.zth``): the fitted ones, then the board stage."""
        return self.stages + ((self.board,) if self.board is not None else ())

    def curve(self, t: Any, *, board: bool = False) -> np.ndarray:
        """Zth of the fitted stages (with ``board``: and the board stage) at times ``t``, K/W."""
        stages = self.all_stages if board else self.stages
        r = np.array([s[0] for s in stages])
        tau = np.array([s[1] for s in stages])
        return np.sum(r * -np.expm1(-np.asarray(t, dtype=float)[..., None] / tau), axis=-1)

    def as_dict(self) -> dict[str, Any]:
        """Plain numbers (SI): for JSON, the pages and the command line."""
        return {"points": [list(p) for p in self.points],
                "stages": [{"r": r, "tau": tau} for r, tau in self.stages],
                "fitted_total": self.fitted_total, "errors": list(self.errors),
                "largest_error": self.largest_error, "largest_error_at": self.largest_error_at,
                "rth_ja": self.rth_ja,
                "board_stage": None if self.board is None else {"r": self.board[0], "tau": self.board[1]},
                "board_tau_default": self.board_tau_default,
                "zth": [{"r": r, "tau": tau} for r, tau in self.all_stages], "method": METHOD}


def _model(p: np.ndarray, t: np.ndarray, n: int) -> np.ndarray:
    """Zth at times t of the stages with log r = p[:n], log tau = p[n:]."""
    return np.sum(np.exp(p[:n]) * -np.expm1(-t[:, None] / np.exp(p[n:])), axis=1)


def _start(lt: np.ndarray, z: np.ndarray, n: int, spread: float) -> np.ndarray:
    """Starting log r, log tau: tau log-spaced over the (widened) time range, r the curve's rise between
    the geometric midpoints of neighbouring time constants."""
    ltau = np.linspace(lt[0] - spread, lt[-1] + spread, n)
    edges = np.concatenate([[-np.inf], 0.5 * (ltau[1:] + ltau[:-1]), [np.inf]])
    rise = np.diff(np.interp(edges, lt, z, left=0.0, right=z[-1]))
    return np.concatenate([np.log(np.maximum(rise, z[-1] * 1e-3)), ltau])


def fit_foster(t: Any, z: Any, n_stages: int) -> tuple[tuple[tuple[float, float], ...], np.ndarray]:
    """Fit ``n_stages`` Foster stages to Zth points by bounded least squares on log Zth.

    Parameters
    ----------
    t : array_like, shape (m,)
        Times, s, strictly increasing and positive.
    z : array_like, shape (m,)
        Zth at those times, K/W, positive.
    n_stages : int
        Number of stages (m >= 2 n_stages).

    Returns
    -------
    stages : tuple of (r K/W, tau s)
        By increasing tau.
    errors : ndarray, shape (m,)
        Zth_fit / Zth - 1 at every point.

    Notes
    -----
    See the module's Method: residual log(Zth_fit / Zth), parameters log r and log tau with
    bounds (scipy.optimize.least_squares, method "trf"), three starting spreads.
    """
    t = np.asarray(t, dtype=float)
    z = np.asarray(z, dtype=float)
    n = int(n_stages)
    lt, lz = np.log(t), np.log(z)
    lower = np.concatenate([np.full(n, np.log(z[-1]) - 40.0), np.full(n, lt[0] - _TAU_ROOM)])
    upper = np.concatenate([np.full(n, np.log(10.0 * z[-1])), np.full(n, lt[-1] + _TAU_ROOM)])
    best = None
    for spread in _SPREADS:
        p0 = np.clip(_start(lt, z, n, spread), lower + 1e-9, upper - 1e-9)
        res = least_squares(lambda p: np.log(_model(p, t, n)) - lz, p0, bounds=(lower, upper), method="trf",
                            xtol=_TOL, ftol=_TOL, gtol=_TOL, max_nfev=400 * n)
        if best is None or res.cost < best.cost:
            best = res
    r, tau = np.exp(best.x[:n]), np.exp(best.x[n:])
    order = np.argsort(tau)
    stages = tuple((float(r[k]), float(tau[k])) for k in order)
    return stages, _model(best.x, t, n) / z - 1.0


def board_stage(fitted_total: float, rth_ja: float, tau: float | None = None) -> tuple[tuple[float, float], bool]:
    """The board (mounting) stage: ((r, tau), tau is the default).

    r = rth_ja - fitted_total, so that Zth at long times equals R_th junction-ambient; tau the
    given one or `BOARD_TAU_DEFAULT` (common practice, no source).

    Raises
    ------
    DocumentError
        On ``fet.rth_ja`` when it is not above the fitted total (no board stage can make Zth
        reach it), on ``fit.board_tau`` when the time constant is not positive.
    """
    if not rth_ja > fitted_total:
        raise DocumentError("fet.rth_ja", f"must be above the fitted junction-to-case total "
                                          f"({quantity(fitted_total, 'K/W')}) for a board stage to be added "
                                          f"(got {quantity(rth_ja, 'K/W')}): check R_th junction-ambient and the "
                                          "Zth points")
    if tau is not None and not (np.isfinite(tau) and tau > 0):
        raise DocumentError("fit.board_tau", f"the board stage's time constant must be above 0 s (got {tau:g} s)")
    return (float(rth_ja - fitted_total), float(BOARD_TAU_DEFAULT if tau is None else tau)), tau is None


def fit_zth(points: Any, n_stages: int, rth_ja: float | None = None, board_tau: float | None = None) -> ZthFit:
    """Foster stages fitted to single-pulse Zth points, and the board stage.

    Parameters
    ----------
    points : list of [t s, Zth K/W]
        The datasheet's curve read as points (junction to case); checked as ``fet.zth_points``
        (positive, t strictly increasing, Zth not falling).
    n_stages : int
        Stages to fit, one of `FIT_STAGES` (2 to 6); at least 2 n_stages points are needed.
    rth_ja : float, optional
        R_th junction-ambient as mounted, K/W: adds the board stage (must be above the fitted
        total).
    board_tau : float, optional
        The board stage's time constant, s; `BOARD_TAU_DEFAULT` when None.

    Returns
    -------
    ZthFit

    Raises
    ------
    DocumentError
        Naming the field: ``fet.zth_points``, ``fit.stages``, ``fet.rth_ja`` or ``fit.board_tau``.
    """
    pts = read_zth_points(points)
    if isinstance(n_stages, bool) or not isinstance(n_stages, (int, np.integer)) or n_stages not in FIT_STAGES:
        raise DocumentError("fit.stages", f"the number of Foster stages to fit must be one of "
                                          f"{', '.join(map(str, FIT_STAGES))} (got {n_stages!r})")
    if len(pts) < 2 * n_stages:
        raise DocumentError("fet.zth_points", f"needs at least {2 * n_stages} points to fit {n_stages} stages "
                                              f"(2 unknowns a stage; got {len(pts)})")
    t = np.array([p[0] for p in pts])
    z = np.array([p[1] for p in pts])
    stages, errors = fit_foster(t, z, n_stages)
    fit = ZthFit(points=pts, stages=stages, errors=tuple(float(e) for e in errors))
    if rth_ja is None:
        return fit
    board, default = board_stage(fit.fitted_total, float(rth_ja), board_tau)
    return ZthFit(points=pts, stages=stages, errors=fit.errors, rth_ja=float(rth_ja), board=board,
                  board_tau_default=default)


def zth_deviation(stages: Any, points: Any) -> dict[str, float]:
    """How far a part's stages lie below and above the Zth points they were fitted to.

    ``stages``: every Foster stage of the part (dicts ``{"r", "tau"}`` or (r, tau) pairs), the
    board stage included; ``points``: [[t s, Zth K/W], ...] (junction to case). Below the points
    is the side that matters (a lower Zth reads a cooler junction); above them the board stage
    lifts the curve where the case is no longer held at a fixed temperature.

    Returns
    -------
    dict
        ``below``: the largest 1 - Zth_stages / Zth (0 when never below) and ``below_at`` its
        time, s; ``above``: the largest Zth_stages / Zth - 1 (0 when never above) and
        ``above_at``.
    """
    rs, taus = zip(*[(s["r"], s["tau"]) if isinstance(s, dict) else s for s in stages])
    t = np.array([p[0] for p in points], dtype=float)
    z = np.array([p[1] for p in points], dtype=float)
    ratio = np.sum(np.array(rs) * -np.expm1(-t[:, None] / np.array(taus)), axis=1) / z
    low, high = int(np.argmin(ratio)), int(np.argmax(ratio))
    return {"below": float(max(0.0, 1.0 - ratio[low])), "below_at": float(t[low]),
            "above": float(max(0.0, ratio[high] - 1.0)), "above_at": float(t[high])}

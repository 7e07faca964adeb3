"""Downsampling of a start-up waveform for storage and plotting, keeping its extremes.

Provides
--------
decimate(wave, max_points=2000)
    At most ``max_points`` samples of every signal, keeping in each time bucket the first
    and last sample and the minimum and maximum of every signal, so that peaks and dips
    survive (min/max-preserving decimation, the usual technique of digital oscilloscopes'
    peak-detect mode; common practice, no source).
"""

from __future__ import annotations

import numpy as np

__all__ = ["SIGNALS", "decimate"]

SIGNALS = ("v_out", "v_in", "i", "v_ds", "p_fet", "tj", "on")


def decimate(wave: dict, max_points: int = 2000) -> dict:
    """Downsample a waveform to at most ``max_points`` samples, keeping the extremes.

    Parameters
    ----------
    wave : dict
        ``{"t": [...], "v_out": [...], "v_in": [...], "i": [...], "v_ds": [...],
        "p_fet": [...], "tj": [...], "on": [...]}`` of equal length (s, V, V, A, V, W, degC,
        1/0); signals of `SIGNALS` it lacks are left out.
    max_points : int
        Largest number of samples kept (>= 2 * (2 + 2 * len(SIGNALS))).

    Notes
    -----
    A switching instant is recorded as two samples at the same time (before and after).

    Returns
    -------
    dict
        Same keys, lists of floats, time ascending.
    """
    t = np.asarray(wave["t"], dtype=float)
    n = t.size
    names = tuple(k for k in SIGNALS if k in wave)
    if n <= max_points:
        return {k: [float(x) for x in wave[k]] for k in ("t",) + names}
    per_bucket = 2 + 2 * len(names)
    buckets = max(max_points // per_bucket, 1)
    edges = np.linspace(0, n, buckets + 1).astype(int)
    keep = [0, n - 1]
    sig = {k: np.asarray(wave[k], dtype=float) for k in names}
    for a, b in zip(edges[:-1], edges[1:]):
        if b <= a:
            continue
        keep += [a, b - 1]
        for s in sig.values():
            seg = s[a:b]
            keep += [a + int(np.argmin(seg)), a + int(np.argmax(seg))]
    idx = np.unique(np.asarray(keep))
    if idx.size > max_points:  # cannot happen with the bucket count above; keep the contract anyway
        idx = idx[np.linspace(0, idx.size - 1, max_points).astype(int)]
    out = {"t": t[idx].tolist()}
    for k, s in sig.items():
        out[k] = s[idx].tolist()
    return out

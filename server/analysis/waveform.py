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

SIGNALS = ("v_out", "i", "v_ds", "p_fet", "tj")


def decimate(wave: dict, max_points: int = 2000) -> dict:
    """Downsample a waveform to at most ``max_points`` samples, keeping the extremes.

    Parameters
    ----------
    wave : dict
        ``{"t": [...], "v_out": [...], "i": [...], "v_ds": [...], "p_fet": [...],
        "tj": [...]}`` of equal length (s, V, A, V, W, degC).
    max_points : int
        Largest number of samples kept (>= 2 * (2 + 2 * len(SIGNALS))).

    Returns
    -------
    dict
        Same keys, lists of floats, time ascending.
    """
    t = np.asarray(wave["t"], dtype=float)
    n = t.size
    if n <= max_points:
        return {k: [float(x) for x in wave[k]] for k in ("t",) + SIGNALS}
    per_bucket = 2 + 2 * len(SIGNALS)
    buckets = max(max_points // per_bucket, 1)
    edges = np.linspace(0, n, buckets + 1).astype(int)
    keep = [0, n - 1]
    sig = {k: np.asarray(wave[k], dtype=float) for k in SIGNALS}
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

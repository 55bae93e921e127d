"""Weighted sums of autocorrelations and MSDs of several series, blocked FFTs, bounded lag.

When only lags up to ``max_lag`` (k) are needed and the series are long, the series is cut
into blocks of ``B`` samples. For short lags (k at most a quarter of the transform) each
block is transformed once and correlated with itself, and the pairs that straddle a block
boundary are added from the k samples either side of it (a transform of ~2k points); for
long lags each block is correlated with itself plus the next k samples. The spectra of all
blocks and all (weighted) components are summed in the frequency domain, so one inverse FFT
gives the result. Each FFT has ~2^16 points,
which runs about 2.7x faster per point than one giant FFT on this class of machine and keeps
memory bounded by a batch of blocks.

The result is exact (to rounding): every pair (t, t + k) with t + k < N is counted once.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy import fft as _fft

__all__ = ["weighted_autocorrelation", "weighted_msd"]

_TARGET_FFT = 1 << 16
#: Blocks transformed per call: keeps every temporary below ~16 MB, so the allocator
#: reuses memory instead of faulting in fresh pages for each batch.
_BLOCKS_PER_BATCH = 4


def _lag_sums(
    x: Sequence[np.ndarray],
    weights: np.ndarray,
    max_lag: int,
    workers: int,
    mix: np.ndarray | None = None,
    offset: np.ndarray | None = None,
) -> np.ndarray:
    """sum_c w_c sum_t y_c(t) y_c(t+k), k = 0..max_lag, with y = mix @ x - offset.

    `x` holds C_in rows of N samples (views are fine: nothing of size N is allocated);
    `mix` (C x C_in, default identity) and `offset` (C, default 0) are applied block by
    block. A few blocks of ~2^16 samples are transformed at a time, so every temporary is a
    few MB and is reused by the allocator instead of being faulted in afresh.
    """
    c_in, n = len(x), len(x[0])
    if mix is None:
        mix = np.eye(c_in)
    k = max_lag
    nfft = _fft.next_fast_len(max(min(_TARGET_FFT, n + k), 2 * (k + 1)), real=True)
    b = nfft - k  # block length: block + k following samples fit without wrap-around
    nblocks = -(-n // b)
    sel = np.flatnonzero(np.asarray(weights) != 0.0)
    w = np.asarray(weights, dtype=np.float64)[sel]
    m = np.asarray(mix, dtype=np.float64)[sel]
    off = None if offset is None else np.asarray(offset, dtype=np.float64)[sel, None]
    acc = np.zeros(nfft // 2 + 1, dtype=np.complex128)
    # Short lags (k <= nfft / 4): each block is transformed once and correlated with itself;
    # the pairs that straddle a block boundary (t in block j, t + k in block j + 1) come
    # from the k samples either side of each boundary, a transform of 2 k points. Long
    # lags: each block is correlated with itself plus the next k samples (two transforms).
    short = 4 * k <= nfft
    nbd = _fft.next_fast_len(2 * k, real=True) if short and k > 0 else 0
    cross = np.zeros(nbd // 2 + 1, dtype=np.complex128) if nbd else None
    per = _BLOCKS_PER_BATCH
    raw = np.zeros((c_in, per * b + k))
    for j0 in range(0, nblocks, per):
        j1 = min(nblocks, j0 + per)
        start, stop = j0 * b, min(n, j1 * b + k)
        valid = stop - start
        for i in range(c_in):
            raw[i, :valid] = x[i][start:stop]
        raw[:, valid:] = 0.0
        y = m @ raw[:, : (j1 - j0) * b + k]
        if off is not None:
            y[:, :valid] -= off
        # heads: blocks of b samples (zero-padded to nfft)
        heads = y[:, : (j1 - j0) * b].reshape(len(sel), j1 - j0, b)
        fa = _fft.rfft(heads, n=nfft, axis=-1, workers=workers)
        if short:
            acc += np.einsum("c,cbf->f", w, fa.real**2 + fa.imag**2)
            if cross is not None:
                # the k samples before and after the end of each block of the batch
                win = np.lib.stride_tricks.sliding_window_view(y, 2 * k, axis=1)[:, b - k:: b]
                win = win[:, : j1 - j0]
                ff = _fft.rfft(win[..., :k], n=nbd, axis=-1, workers=workers)
                fs = _fft.rfft(win[..., k:], n=nbd, axis=-1, workers=workers)
                fs *= np.conj(ff)
                cross += np.einsum("c,cbf->f", w, fs)
            continue
        # tails: the same blocks plus the k samples after each
        tails = np.lib.stride_tricks.sliding_window_view(y, b + k, axis=1)[:, ::b]
        fb = _fft.rfft(tails, n=nfft, axis=-1, workers=workers)
        fb *= np.conj(fa)
        acc += np.einsum("c,cbf->f", w, fb)
    out = _fft.irfft(acc, n=nfft, workers=workers)[: k + 1]
    if cross is not None:
        # straddling pairs at lag q: sum_t f(t) s(t + q - k), index (q - k) mod nbd
        xc = _fft.irfft(cross, n=nbd, workers=workers)
        out += xc[(np.arange(k + 1) - k) % nbd]
    return out


def weighted_autocorrelation(
    x: np.ndarray | Sequence[Sequence[np.ndarray]],
    weights: np.ndarray,
    *,
    max_lag: int,
    workers: int = 2,
    mix: np.ndarray | None = None,
    offset: np.ndarray | None = None,
) -> np.ndarray:
    """Weighted sum over components of autocovariances, divided by the number of pairs.

    Parameters
    ----------
    x : ndarray, shape (S, C, N), or S sequences of C 1-D arrays of length N
        S independent series of C components each (means already removed if wanted).
        Rows given as separate arrays (views, for example) are not copied.
    weights : ndarray, shape (C,)
        Weight of each component's autocorrelation in the sum.
    max_lag : int
        Largest lag, in samples (< N).
    workers : int
        Threads for scipy.fft.
    mix : ndarray, shape (C, C_in), optional
        Correlate the linear combinations ``mix @ x`` of the C_in input rows instead of the
        rows themselves (computed block by block, never for the whole series).
    offset : ndarray, shape (C,), optional
        Subtracted from each combination before correlating.

    Returns
    -------
    ndarray, shape (S, max_lag + 1)
        ``sum_c w_c (1/(N-k)) sum_{t=0}^{N-k-1} y_c(t) y_c(t+k)``, y = mix @ x - offset.
    """
    series = _as_rows(x)
    weights = np.asarray(weights, dtype=np.float64)
    out = np.empty((len(series), max_lag + 1))
    for i, rows in enumerate(series):
        n = len(rows[0])
        c = len(rows) if mix is None else np.shape(mix)[0]
        if weights.shape != (c,):
            raise ValueError(f"weights must have shape ({c},), got {weights.shape}")
        if not 0 <= max_lag < n:
            raise ValueError(f"max_lag must lie in [0, {n - 1}], got {max_lag}")
        pairs = n - np.arange(max_lag + 1)
        out[i] = _lag_sums(rows, weights, max_lag, workers, mix, offset) / pairs
    return out


def _as_rows(x: np.ndarray | Sequence[Sequence[np.ndarray]]) -> list[list[np.ndarray]]:
    """S series of C equal-length 1-D float64 rows, without copying contiguous input."""
    if isinstance(x, np.ndarray):
        if x.ndim != 3:
            raise ValueError(f"x must have shape (series, components, samples), got {x.shape}")
        return [[np.asarray(r, dtype=np.float64) for r in xi] for xi in x]
    out = []
    for xi in x:
        rows = [np.asarray(r, dtype=np.float64) for r in xi]
        if not rows or any(r.ndim != 1 or r.shape != rows[0].shape for r in rows):
            raise ValueError("each series must be C one-dimensional rows of equal length")
        out.append(rows)
    return out


def weighted_msd(
    x: np.ndarray, weights: np.ndarray, *, max_lag: int, workers: int = 2
) -> np.ndarray:
    """Weighted sum over components of mean-squared displacements, all time origins.

    MSD_c(k) = (1/(N-k)) sum_t (x_c(t+k) - x_c(t))^2, computed as the sum-of-squares term
    minus twice the lag sum, with each component's mean removed first (the MSD does not
    depend on it, and removing it avoids cancellation at short lags).

    Parameters
    ----------
    x : ndarray, shape (S, C, N)
        Trajectories (for the Helfand moment: the time integral of the stress).
    weights : ndarray, shape (C,)
        Weight of each component.
    max_lag : int
        Largest lag, in samples (< N).
    workers : int
        Threads for scipy.fft.

    Returns
    -------
    ndarray, shape (S, max_lag + 1)
    """
    x = np.asarray(x, dtype=np.float64)
    if x.ndim != 3:
        raise ValueError(f"x must have shape (series, components, samples), got {x.shape}")
    s, _, n = x.shape
    weights = np.asarray(weights, dtype=np.float64)
    if not 0 <= max_lag < n:
        raise ValueError(f"max_lag must lie in [0, {n - 1}], got {max_lag}")
    lags = np.arange(max_lag + 1)
    pairs = n - lags
    out = np.empty((s, max_lag + 1))
    for i in range(s):
        xi = x[i] - x[i].mean(axis=1, keepdims=True)
        sq = np.einsum("c,cn->n", weights, xi * xi)
        csum = np.concatenate([[0.0], np.cumsum(sq)])
        # sum_{t<N-k} x(t)^2 + sum_{t>=k} x(t)^2
        head = csum[n - lags]
        tail = csum[n] - csum[lags]
        out[i] = (head + tail - 2.0 * _lag_sums(xi, weights, max_lag, workers)) / pairs
    out[:, 0] = 0.0  # exactly, not to rounding
    return out

"""Streaming viscosity: each piece's correlations from chunks, in bounded memory.

The in-memory estimators transform every independent piece (a replica, or a segment of a
long run) whole: for a 10^8-sample run cut into 20 pieces that is a padded FFT of 10^7
points per component, and the pressure tensor itself must be in memory. Here every piece is
read in chunks of :data:`CHUNK` samples (views of the series' rows: for a memory-mapped
series only the chunk is resident) and fed to
:class:`~transport.stats.StreamingCorrelator`, which gives the lag sums up to the maximum
lag exactly (to rounding) with memory ``O(components * (block + max_lag))``.

Two quantities per piece, the same as the in-memory path computes:

* Green–Kubo: the weighted autocorrelation of the traceless stress (offsets subtracted,
  mean not removed), divided by the number of pairs, as
  :func:`~transport.stats.weighted_autocorrelation`.
* Einstein (Helfand): the weighted mean-squared displacement of the Helfand moment
  ``G(t)``, the trapezoid time integral of the traceless stress, as
  :func:`~transport.stats.weighted_msd` computes it on the whole piece. With ``h = G - m``
  (``m`` the piece mean of ``G``) and ``R(k) = sum_{t<N-k} h_t h_{t+k}`` from the
  streaming correlator (mean removed in one pass),

      (N - k) MSD(k) = sum_{t<N-k} h_t^2 + sum_{t>=k} h_t^2 - 2 R(k)
                     = 2 Q - (sum of h^2 over the last k) - (over the first k) - 2 R(k),

  ``Q = sum h^2``; the first and last ``max_lag`` values of ``G`` are kept for the two
  partial sums. ``G`` is carried across chunk boundaries (last value and last stress).

The results are placed in the preparation (``_Prepared.acfs`` and ``.helfand_msd``); the
estimators then proceed exactly as in memory, so cutoffs, fits, windows and error bars are
the same functions of the same numbers.

References
----------
.. [1] W. H. Press, S. A. Teukolsky, W. T. Vetterling and B. P. Flannery, *Numerical
   Recipes*, 3rd ed. (Cambridge, 2007): correlation of long data in pieces by FFT.
.. [2] E. Helfand, Phys. Rev. 119, 1 (1960); B. Hess, J. Chem. Phys. 116, 209 (2002).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ._memory import release_pages
from ._pieces import _TRACELESS, _Piece, _Prepared
from ._threads import thread_map
from .stats import StreamingCorrelator

__all__ = ["CHUNK", "LONG_LAG", "streamed_preparation"]

#: Samples per chunk read from a piece (6 rows x 2^20 float64 = 48 MB per chunk copy).
CHUNK = 1 << 20


#: Lags above which each component is transformed alone, in blocks of 2 max_lag new samples,
#: and the pieces are correlated one after the other: the padded FFT of a block is then
#: 4 max_lag points of one component, not 6 max_lag points of all six (at 10^8 rows a
#: slow stress tail gave max_lag = 2.5x10^6 samples: 6 x 15x10^6-point transforms in each
#: of two threads, about 4 GB).
LONG_LAG = 1 << 14


def _block_size(max_lag: int) -> int | None:
    """New samples per FFT block: the correlator's default for short lags, else 2 max_lag
    (work per sample 2x the default's, memory a third)."""
    return None if max_lag <= LONG_LAG else 2 * max_lag


class _Each:
    """One :class:`StreamingCorrelator` per component (FFT work memory of one series)."""

    def __init__(self, c: int, k: int, normalization: str, subtract_mean: bool,
                 block: int | None) -> None:
        self.parts = [StreamingCorrelator(1, k, normalization=normalization,  # type: ignore[arg-type]
                                          subtract_mean=subtract_mean, block_size=block,
                                          workers=1) for _ in range(c)]

    def update(self, y: np.ndarray) -> None:
        for part, row in zip(self.parts, y, strict=True):
            part.update(row[None, :])

    def result(self) -> np.ndarray:
        return np.concatenate([part.result() for part in self.parts])


def _piece_sums(pc: _Piece, weights: np.ndarray, max_lag: int, dt: float,
                green_kubo: bool, einstein: bool) -> tuple[np.ndarray | None,
                                                           np.ndarray | None]:
    """Weighted ACF (per pair) and Helfand MSD (times prefactor / 2) of one piece."""
    used = np.flatnonzero(weights > 0)
    w = weights[used]
    mix = _TRACELESS[used]
    off = pc.offset[used][:, None]
    n = pc.stress[0].shape[0]
    k = max_lag
    c = len(used)
    block = _block_size(k)
    acorr = _Each(c, k, "pairs", False, block) if green_kubo else None
    gcorr = _Each(c, k, "none", True, block) if einstein else None
    g_last = np.zeros(c)
    y_last: np.ndarray | None = None
    shift: np.ndarray | None = None
    s1 = np.zeros(c)  # sum of (G - shift)
    s2 = np.zeros(c)  # sum of (G - shift)^2
    head = np.empty((c, min(k, n)))
    tail = np.empty((c, 0))
    for lo in range(0, n, CHUNK):
        hi = min(n, lo + CHUNK)
        y = mix @ np.stack([r[lo:hi] for r in pc.stress]) - off
        release_pages(pc.stress[0])  # the rows of a series share one mapping
        if acorr is not None:
            acorr.update(y)
        if gcorr is None:
            continue
        # Helfand moment: trapezoid integral carried over the chunk boundary
        inc = np.empty_like(y)
        if y_last is None:
            inc[:, 0] = 0.0
        else:
            inc[:, 0] = 0.5 * (y_last + y[:, 0]) * dt
        inc[:, 1:] = 0.5 * (y[:, 1:] + y[:, :-1]) * dt
        g = np.cumsum(inc, axis=1)
        g += g_last[:, None]
        g_last = g[:, -1].copy()
        y_last = y[:, -1].copy()
        gcorr.update(g)
        if shift is None:
            shift = g.mean(axis=1)
        d = g - shift[:, None]
        s1 += d.sum(axis=1)
        s2 += np.einsum("cn,cn->c", d, d)
        if lo < head.shape[1]:
            take = min(head.shape[1] - lo, hi - lo)
            head[:, lo:lo + take] = g[:, :take]
        tail = np.concatenate([tail, g[:, -k:]], axis=1)[:, -k:] if k else tail
    acf = None if acorr is None else w @ acorr.result()
    msd = None
    if gcorr is not None and shift is not None:
        m = shift + s1 / n  # mean of G
        q = s2 - n * (s1 / n) ** 2  # sum of (G - m)^2
        lags = np.arange(k + 1)
        hsq = (head - m[:, None]) ** 2
        tsq = (tail - m[:, None]) ** 2
        first = np.zeros((c, k + 1))
        np.cumsum(hsq, axis=1, out=first[:, 1:])
        last = np.zeros((c, k + 1))
        np.cumsum(tsq[:, ::-1], axis=1, out=last[:, 1:])
        raw = 2.0 * q[:, None] - first - last - 2.0 * gcorr.result()
        msd = (w @ raw) / (n - lags) * pc.prefactor / 2.0
        msd[0] = 0.0  # exactly, as in memory
    return acf, msd


def streamed_preparation(prep: _Prepared, weights: np.ndarray, *, green_kubo: bool,
                         einstein: bool) -> _Prepared:
    """The preparation with each piece's ACF and Helfand MSD computed chunk by chunk.

    Parameters
    ----------
    prep : _Prepared
        Pieces, sampling interval (internal time unit) and maximum lag (samples).
    weights : ndarray, shape (6,)
        Daivis–Evans weights of the traceless components.
    green_kubo, einstein : bool
        Which quantities to compute.

    Returns
    -------
    _Prepared
        `prep` with ``acfs`` (pieces x lags, internal pressure^2) and/or ``helfand_msd``
        (pieces x lags, viscosity x time, internal units) set.
    """
    # one piece per thread (FFTs and array work release the GIL): memory is one chunk's
    # work per thread
    res = thread_map(lambda pc: _piece_sums(pc, weights, prep.max_lag, prep.dt, green_kubo,
                                            einstein), prep.pieces,
                     workers=1 if prep.max_lag > LONG_LAG else None)
    acfs = [a for a, _ in res]
    msds = [m for _, m in res]
    shape = (len(prep.pieces), prep.max_lag + 1)
    return replace(
        prep,
        acfs=np.array(acfs).reshape(shape) if green_kubo else None,
        helfand_msd=np.array(msds).reshape(shape) if einstein else None,
    )

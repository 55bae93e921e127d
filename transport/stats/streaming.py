"""Exact autocorrelation up to a maximum lag, in bounded memory, over chunks of a series.

For series too long to hold in memory (or to transform in one piece), the samples are fed in
chunks of any size to :class:`StreamingCorrelator`. It keeps only the last ``max_lag``
samples between chunks, so memory is ``O(n_series * (block + max_lag))`` whatever the
length of the series, and the answer equals (to rounding) that of
:func:`~transport.stats.autocorrelation` on the whole series for every lag ``<= max_lag``,
with the same normalisations and mean removal.

Algorithm (overlap of ``K = max_lag`` samples)
    New samples are cut into blocks of ``B`` samples. Block ``j`` is transformed together with
    the ``K`` samples before it (the *tail*), segment ``s = [tail, block]``. The lag sums of
    ``s`` count every pair ``(t, t+k)`` whose later sample lies in the block, plus the pairs
    lying wholly inside the tail, which were already counted with the previous block and are
    subtracted (the autocorrelation of the tail alone, a short transform). Each pair of the
    series is therefore counted exactly once. At the very start the tail is zeros, which
    adds nothing. Blocks are transformed in batches (several segments per FFT call).

Block size
    Each segment is zero padded to ``L = next_fast_len(B + 2K)`` with ``L`` near 2^17
    points by default: on a two-core machine a batch of 2^16-2^18-point FFTs runs about 2.7x
    faster per point than one giant FFT of the whole series (the large transform is
    memory-bound), so blocked correlation is both bounded in memory and faster.

Mean removal in one pass
    The global mean is unknown until the last chunk. The raw lag sums ``R(k)`` of the data
    are accumulated and the mean is removed at the end with the exact identity

        sum_{t=0}^{N-1-k} (x_t - m)(x_{t+k} - m)
            = R(k) - m [(S - tail_k) + (S - head_k)] + (N - k) m^2,

    where ``S`` is the sum of all samples, ``head_k`` the sum of the first ``k`` samples and
    ``tail_k`` the sum of the last ``k`` (the first and last ``K`` samples are kept). To
    avoid cancellation when the mean is large compared with the fluctuations, every sample
    is first shifted by the mean of the first chunk (any constant works; it only has to be
    close to the mean).

References
----------
.. [1] W. H. Press, S. A. Teukolsky, W. T. Vetterling and B. P. Flannery, *Numerical
   Recipes*, 3rd ed. (Cambridge, 2007): overlap-add/overlap-save
   convolution of long data in pieces and correlation by FFT.
.. [2] M. P. Allen and D. J. Tildesley, *Computer Simulation of Liquids*, 2nd ed. (Oxford,
   2017).
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import scipy.fft as sfft
from numpy.lib.stride_tricks import sliding_window_view
from numpy.typing import ArrayLike

from .correlation import Normalization, _check_normalization, _normalize, _power_inplace

__all__ = ["StreamingCorrelator", "streaming_autocorrelation"]

#: Default padded length of one block's FFT (points).
_TARGET_FFT = 2**17
#: Largest number of points transformed in one batched FFT call (bounds work memory).
_BATCH_POINTS = 2**22


class StreamingCorrelator:
    """Exact autocorrelation up to `max_lag` of long series fed in chunks.

    Parameters
    ----------
    n_series : int
        Number of series correlated side by side (each with itself).
    max_lag : int
        Largest lag, in samples (>= 0).
    normalization : {"pairs", "length", "none"}
        Divide lag ``k`` by ``N - k``, by ``N``, or not at all (as in
        :func:`~transport.stats.autocorrelation`).
    subtract_mean : bool
        Remove each series' global mean (in one pass, see the module notes).
    block_size : int, optional
        New samples per block; default makes each padded FFT about 2^17 points (at least
        ``4 * max_lag`` samples per block).
    workers : int, optional
        Threads for :mod:`scipy.fft`.

    Notes
    -----
    Memory: a few arrays of ``n_series * min(chunk, 2^22)`` float64 plus ``O(n_series *
    max_lag)``, independent of the length of the series. Cost: about ``2 (1 + 2K/B)`` real
    FFTs of ``L`` points per ``B`` samples.

    References
    ----------
    .. [1] W. H. Press et al., *Numerical Recipes*, 3rd ed. (2007): FFT correlation.

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> x = rng.standard_normal(1000)
    >>> sc = StreamingCorrelator(1, max_lag=5)
    >>> for piece in np.array_split(x, 7):
    ...     sc.update(piece)
    >>> from transport.stats import autocorrelation
    >>> bool(np.allclose(sc.result()[0], autocorrelation(x, max_lag=5)))
    True
    """

    def __init__(
        self,
        n_series: int,
        max_lag: int,
        *,
        normalization: Normalization = "pairs",
        subtract_mean: bool = True,
        block_size: int | None = None,
        workers: int | None = None,
    ) -> None:
        _check_normalization(normalization)
        if isinstance(n_series, bool) or int(n_series) != n_series or n_series < 1:
            raise ValueError(f"`n_series` must be a positive integer; got {n_series!r}")
        if isinstance(max_lag, bool) or int(max_lag) != max_lag or max_lag < 0:
            raise ValueError(f"`max_lag` must be a non-negative integer; got {max_lag!r}")
        k = int(max_lag)
        if block_size is None:
            length = sfft.next_fast_len(max(_TARGET_FFT, 6 * k + 1), real=True)
            block = length - 2 * k
        else:
            if isinstance(block_size, bool) or int(block_size) != block_size or block_size < 1:
                raise ValueError(f"`block_size` must be a positive integer; got {block_size!r}")
            block = int(block_size)
            length = sfft.next_fast_len(block + 2 * k, real=True)
        self.n_series = int(n_series)
        self.max_lag = k
        self.normalization = normalization
        self.subtract_mean = bool(subtract_mean)
        self.block_size = block
        self.fft_length = length
        self.workers = workers
        self._tail_length = sfft.next_fast_len(2 * k + 1, real=True)
        s = self.n_series
        self._shift: np.ndarray | None = None
        self._tail = np.zeros((s, k))  # last K processed (shifted) samples
        self._pending = np.zeros((s, 0))  # shifted samples not yet in a full block
        self._raw = np.zeros((s, k + 1))  # raw lag sums of the shifted samples
        self._head = np.zeros((s, k))  # first K shifted samples
        self._sum = np.zeros(s)
        self._n = 0

    @property
    def n_samples(self) -> int:
        """Number of samples per series received so far."""
        return self._n

    # ---- feeding ------------------------------------------------------------------------
    def update(self, chunk: ArrayLike) -> None:
        """Add the next samples.

        Parameters
        ----------
        chunk : array_like, shape (n_series, m) or (m,) when ``n_series == 1``
            The next ``m`` samples of every series (any ``m >= 0``), in any unit ``u``.
        """
        c = np.asarray(chunk, dtype=np.float64)
        if c.ndim == 1 and self.n_series == 1:
            c = c[None, :]
        if c.ndim != 2 or c.shape[0] != self.n_series:
            raise ValueError(
                f"`chunk` must have shape ({self.n_series}, m); got shape {c.shape}"
            )
        if c.shape[1] == 0:
            return
        if not np.isfinite(c).all():
            raise ValueError("`chunk` contains a non-finite value")
        if self._shift is None:
            self._shift = c.mean(axis=1, keepdims=True) if self.subtract_mean else np.zeros(
                (self.n_series, 1)
            )
        y = c - self._shift
        k = self.max_lag
        if self._n < k:
            take = min(k - self._n, y.shape[1])
            self._head[:, self._n : self._n + take] = y[:, :take]
        self._sum += y.sum(axis=1)
        self._n += y.shape[1]

        data = np.concatenate([self._pending, y], axis=1) if self._pending.size else y
        n_full = data.shape[1] // self.block_size
        per_call = max(1, _BATCH_POINTS // (self.fft_length * self.n_series))
        done = 0
        while done < n_full:
            nb = min(per_call, n_full - done)
            part = data[:, done * self.block_size : (done + nb) * self.block_size]
            self._raw += self._segments_sum(self._tail, part, nb)
            self._tail = self._last(self._tail, part)
            done += nb
        self._pending = np.array(data[:, n_full * self.block_size :], copy=True)

    def _last(self, tail: np.ndarray, part: np.ndarray) -> np.ndarray:
        """Last K samples of ``[tail, part]``."""
        k = self.max_lag
        if k == 0:
            return tail
        if part.shape[1] >= k:
            return np.array(part[:, -k:], copy=True)
        return np.concatenate([tail, part], axis=1)[:, -k:]

    def _segments_sum(self, tail: np.ndarray, part: np.ndarray, nb: int) -> np.ndarray:
        """Raw lag sums of pairs whose later sample is in `part` (nb blocks; the last may be
        shorter than a block)."""
        k = self.max_lag
        b = self.block_size
        z = np.concatenate([tail, part], axis=1)
        seg_len = min(k + b, z.shape[1])
        if nb == 1:
            windows = z[:, None, :]
        else:
            windows = sliding_window_view(z, seg_len, axis=-1)[:, ::b][:, :nb]
        spec = sfft.rfft(windows, n=self.fft_length, axis=-1, workers=self.workers)
        _power_inplace(spec)
        full = sfft.irfft(spec, n=self.fft_length, axis=-1, workers=self.workers,
                          overwrite_x=True)
        raw = full[..., : k + 1].sum(axis=1)
        del spec, full
        if k > 0:
            # pairs wholly inside each segment's leading tail were counted before
            tails = sliding_window_view(z[:, : (nb - 1) * b + k], k, axis=-1)[:, ::b][:, :nb]
            tspec = sfft.rfft(tails, n=self._tail_length, axis=-1, workers=self.workers)
            _power_inplace(tspec)
            tfull = sfft.irfft(tspec, n=self._tail_length, axis=-1, workers=self.workers,
                               overwrite_x=True)
            raw -= tfull[..., : k + 1].sum(axis=1)
        return raw

    # ---- result -------------------------------------------------------------------------
    def result(self) -> np.ndarray:
        """The autocorrelation of everything received so far (state is not changed).

        Returns
        -------
        ndarray, shape (n_series, max_lag + 1)
            Lags ``0 .. max_lag``, in ``u^2`` (float64).

        Raises
        ------
        ValueError
            If fewer than ``max_lag + 1`` samples were received.
        """
        n, k = self._n, self.max_lag
        if n < k + 1:
            raise ValueError(
                f"need at least max_lag + 1 = {k + 1} samples per series; got {n}"
            )
        raw = self._raw.copy()
        tail = self._tail
        if self._pending.shape[1]:
            raw += self._segments_sum(self._tail, self._pending, 1)
            tail = self._last(self._tail, self._pending)
        if self.subtract_mean:
            s = self._sum
            m = (s / n)[:, None]
            head_k = np.zeros((self.n_series, k + 1))
            np.cumsum(self._head, axis=1, out=head_k[:, 1:])
            tail_k = np.zeros((self.n_series, k + 1))
            np.cumsum(tail[:, ::-1], axis=1, out=tail_k[:, 1:])
            pairs = np.arange(n, n - k - 1, -1, dtype=np.float64)
            raw -= m * ((s[:, None] - tail_k) + (s[:, None] - head_k))
            raw += pairs * m * m
        return _normalize(raw, n, self.normalization)


def streaming_autocorrelation(
    chunks: Iterable[ArrayLike],
    *,
    max_lag: int,
    normalization: Normalization = "pairs",
    subtract_mean: bool = True,
    block_size: int | None = None,
    workers: int | None = None,
) -> np.ndarray:
    """Autocorrelation up to `max_lag` of series given as an iterable of chunks.

    Parameters
    ----------
    chunks : iterable of array_like, each of shape (n_series, m_i) or (m_i,)
        Consecutive pieces of the series (1-D pieces mean one series). Consumed once.
    max_lag, normalization, subtract_mean, block_size, workers
        As in :class:`StreamingCorrelator`.

    Returns
    -------
    ndarray, shape (n_series, max_lag + 1)
        As :meth:`StreamingCorrelator.result`.

    References
    ----------
    .. [1] W. H. Press et al., *Numerical Recipes*, 3rd ed. (2007): FFT correlation.
    """
    corr: StreamingCorrelator | None = None
    for chunk in chunks:
        c = np.asarray(chunk)
        if corr is None:
            corr = StreamingCorrelator(
                1 if c.ndim == 1 else c.shape[0], max_lag, normalization=normalization,
                subtract_mean=subtract_mean, block_size=block_size, workers=workers,
            )
        corr.update(c)
    if corr is None:
        raise ValueError("`chunks` is empty")
    return corr.result()

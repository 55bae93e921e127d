"""Mean-squared displacement of many particles by FFT, in chunks of particles.

For one particle with positions ``r(t)``, ``t = 0 .. N-1``,

    MSD(k) = 1/(N-k) sum_{t=0}^{N-1-k} |r(t+k) - r(t)|^2
           = 1/(N-k) [ S1(k) - 2 S2(k) ],
    S1(k)  = sum_{t=0}^{N-1-k} |r(t)|^2 + sum_{t=k}^{N-1} |r(t)|^2   (cumulative sums),
    S2(k)  = sum_{t=0}^{N-1-k} r(t) . r(t+k)                          (an autocorrelation, FFT),

which costs O(N log N) per particle instead of O(N^2). Each particle's mean position is
subtracted first: the MSD does not change under a constant shift, and without the shift the
two terms, each of order ``|r|^2``, cancel to a relative error of ~1e-11 at short lags.

Particles are processed in chunks (converted to float64 one chunk at a time, so float32 or
memory-mapped positions never exist whole in float64), which bounds memory.

References
----------
.. [1] M. P. Allen and D. J. Tildesley, *Computer Simulation of Liquids*, 2nd ed. (Oxford,
   2017): time correlation functions by FFT. Writing the MSD as the sum-of-squares
   term minus twice the position autocorrelation is common practice.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import scipy.fft as sfft
from numpy.typing import ArrayLike

from .._threads import available_cpus, thread_map
from .correlation import _check_max_lag, _power_inplace

__all__ = ["msd", "msd_per_particle"]

#: Default memory budget of one chunk's FFT work arrays, in bytes.
_CHUNK_BYTES = 256 * 2**20


def _check_positions(positions: ArrayLike) -> np.ndarray:
    p = positions if isinstance(positions, np.ndarray) else np.asarray(positions)
    if p.ndim != 3:
        raise ValueError(
            "`positions` must have shape (n_frames, n_particles, n_dims); got shape "
            f"{p.shape}"
        )
    if p.shape[0] < 2 or p.shape[1] < 1 or p.shape[2] < 1:
        raise ValueError(f"`positions` needs at least 2 frames and 1 particle; got {p.shape}")
    if not np.issubdtype(p.dtype, np.floating):
        p = np.asarray(p, dtype=np.float64)
    return p


def _checked_chunks(
    positions: ArrayLike, max_lag: int | None, chunk_size: int | None, workers: int | None
) -> tuple[int, int, Iterator[tuple[int, int, np.ndarray]]]:
    """Validate the arguments shared by :func:`msd` and :func:`msd_per_particle`.

    Returns ``(n_particles, k, chunks)``: the largest lag ``k`` and the (lazy) chunks of
    :func:`_chunks`.
    """
    p = _check_positions(positions)
    k = _check_max_lag(max_lag, p.shape[0])
    return p.shape[1], k, _chunks(p, k, chunk_size, workers)


def _chunks(
    p: np.ndarray, max_lag: int | None, chunk_size: int | None, workers: int | None
) -> Iterator[tuple[int, int, np.ndarray]]:
    """Yield ``(first, stop, msd)`` with msd of particles ``first:stop``, shape (m, K+1)."""
    n_frames, n_part, n_dim = p.shape
    k = _check_max_lag(max_lag, n_frames)
    length = sfft.next_fast_len(n_frames + k, real=True)
    if chunk_size is None:
        per_particle = n_dim * length * 8 * 4  # padded input, spectrum (2x), output
        chunk_size = max(1, _CHUNK_BYTES // per_particle)
    elif isinstance(chunk_size, bool) or int(chunk_size) != chunk_size or chunk_size < 1:
        raise ValueError(f"`chunk_size` must be a positive integer; got {chunk_size!r}")
    chunk_size = int(chunk_size)
    pairs = np.arange(n_frames, n_frames - k - 1, -1, dtype=np.float64)
    lags = np.arange(k + 1)
    for first in range(0, n_part, chunk_size):
        stop = min(first + chunk_size, n_part)
        # (frames, m, dims) -> (m, dims, frames), float64, each particle's mean removed
        r = np.array(p[:, first:stop, :], dtype=np.float64).transpose(1, 2, 0)
        r -= r.mean(axis=-1, keepdims=True)
        sq = np.einsum("mdt,mdt->mt", r, r)
        cum = np.zeros((stop - first, n_frames + 1))
        np.cumsum(sq, axis=-1, out=cum[:, 1:])
        s1 = cum[:, n_frames - lags] + (cum[:, n_frames, None] - cum[:, lags])
        spec = sfft.rfft(r, n=length, axis=-1, workers=workers)
        del r
        _power_inplace(spec)
        spec = spec.sum(axis=1)  # sum over dimensions before the inverse transform
        s2 = sfft.irfft(spec, n=length, axis=-1, workers=workers, overwrite_x=True)
        del spec
        out = (s1 - 2.0 * s2[:, : k + 1]) / pairs
        out[:, 0] = 0.0  # exact by definition; removes rounding at lag 0
        yield first, stop, out


def msd_per_particle(
    positions: ArrayLike,
    *,
    max_lag: int | None = None,
    chunk_size: int | None = None,
    workers: int | None = None,
) -> np.ndarray:
    """Mean-squared displacement of every particle, averaged over time origins, by FFT.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_particles, n_dims)
        Unwrapped positions on a uniform time axis, in a length unit ``l`` (float32 or
        float64; a :class:`numpy.memmap` is read one chunk of particles at a time).
    max_lag : int, optional
        Largest lag in frames (default ``n_frames - 1``).
    chunk_size : int, optional
        Particles per chunk; default keeps each chunk's FFT work arrays near 256 MB.
    workers : int, optional
        Threads for :mod:`scipy.fft`.

    Returns
    -------
    ndarray, shape (n_particles, max_lag + 1)
        ``MSD_i(k)`` in ``l^2`` (float64), lag 0 exactly 0.

    References
    ----------
    .. [1] M. P. Allen and D. J. Tildesley, *Computer Simulation of Liquids*, 2nd ed. (2017).

    Examples
    --------
    >>> r = np.array([[[0.0]], [[1.0]], [[3.0]]])  # one particle moving in 1-D
    >>> msd_per_particle(r).round(12)
    array([[0. , 2.5, 9. ]])
    """
    n_part, k, chunks = _checked_chunks(positions, max_lag, chunk_size, workers)
    out = np.empty((n_part, k + 1))
    for first, stop, block in chunks:
        out[first:stop] = block
    return out


def _particle_blocks(idx: np.ndarray, size: int) -> list[slice | np.ndarray]:
    """Blocks of at most `size` particle indices: slices where `idx` is a run of
    consecutive indices (views, no gather), index arrays otherwise."""
    if idx.size and idx[-1] - idx[0] == idx.size - 1:
        a = int(idx[0])
        return [slice(a + i, a + min(i + size, idx.size)) for i in range(0, idx.size, size)]
    return [idx[i:i + size] for i in range(0, idx.size, size)]


def msd(
    positions: ArrayLike,
    *,
    max_lag: int | None = None,
    chunk_size: int | None = None,
    workers: int | None = None,
    particles: ArrayLike | None = None,
    shift: ArrayLike | None = None,
) -> np.ndarray:
    """Mean-squared displacement averaged over particles and time origins, by FFT.

    Parameters
    ----------
    positions, max_lag, chunk_size
        As in :func:`msd_per_particle` (the array may be float32 or a memmap; it is read
        one block of particles at a time and never copied whole).
    workers : int, optional
        Threads, each transforming its share of the particle blocks with a buffer of its
        own (default: the CPUs available). The sums are added in a fixed order, so a
        result depends on the thread count only at the level of rounding (~1e-16).
    particles : array_like of int, optional
        Indices of the particles to average over (default: all).
    shift : array_like, shape (n_frames, n_dims), optional
        A displacement common to all particles, subtracted from every position first (for
        example the system's centre-of-mass drift).

    Returns
    -------
    ndarray, shape (max_lag + 1,)
        ``MSD(k) = mean_i MSD_i(k)`` in ``l^2`` (float64), lag 0 exactly 0.

    Notes
    -----
    The inverse transform is linear, so the power spectra of all particles and coordinates
    are summed first and transformed back once, and the squared norms are summed over
    particles before their cumulative sums. Each particle's mean position is subtracted
    before the transform (without it the two terms cancel to ~1e-11 relative error at short
    lags).

    References
    ----------
    .. [1] M. P. Allen and D. J. Tildesley, *Computer Simulation of Liquids*, 2nd ed. (2017).
    """
    p = _check_positions(positions)
    n, n_part, n_dim = p.shape
    k = _check_max_lag(max_lag, n)
    idx = (np.arange(n_part) if particles is None
           else np.unique(np.asarray(particles, dtype=np.intp)))
    if idx.size == 0 or idx[0] < 0 or idx[-1] >= n_part:
        raise ValueError(f"`particles` must be indices in [0, {n_part - 1}], at least one")
    length = sfft.next_fast_len(n + k, real=True)
    if chunk_size is None:
        chunk_size = max(1, _CHUNK_BYTES // (n_dim * length * 8 * 4))
    elif isinstance(chunk_size, bool) or int(chunk_size) != chunk_size or chunk_size < 1:
        raise ValueError(f"`chunk_size` must be a positive integer; got {chunk_size!r}")
    size = int(chunk_size)
    sh = None
    if shift is not None:
        sh = np.asarray(shift, dtype=np.float64)
        if sh.shape != (n, n_dim):
            raise ValueError(f"`shift` must have shape ({n}, {n_dim}); got {sh.shape}")
        # its mean goes with each particle's mean: only its variation matters
        sh = np.ascontiguousarray((sh - sh.mean(axis=0)).T)
    blocks = _particle_blocks(idx, size)
    n_threads = min(len(blocks), available_cpus() if workers is None else max(1, workers))

    def sums(group: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Squared norms per frame and summed power spectrum of some particle blocks."""
        buf = np.zeros((min(size, idx.size), n_dim, length))  # zero tail = padding
        sq = np.zeros(n)
        power = np.zeros(2 * (length // 2 + 1))  # interleaved re^2, im^2 of the spectrum
        for j in group:
            src = p[:, blocks[j], :]  # (frames, m, dims)
            m = src.shape[1]
            v = buf[:m, :, :n]
            if sh is None:
                v[...] = src.transpose(1, 2, 0)
            else:
                np.subtract(src.transpose(1, 2, 0), sh, out=v)
            v -= v.mean(axis=-1, keepdims=True)
            sq += np.einsum("mdt,mdt->t", v, v)
            spec = sfft.rfft(buf[:m], axis=-1, workers=1)
            flat = spec.view(np.float64).reshape(m * n_dim, -1)
            power += np.einsum("ij,ij->j", flat, flat)
        return sq, power

    # contiguous groups of blocks, one per thread (numpy and scipy.fft release the GIL),
    # summed in a fixed order
    parts = thread_map(sums, np.array_split(np.arange(len(blocks)), n_threads),
                       workers=n_threads)
    sq = np.sum([a for a, _ in parts], axis=0)
    power = np.sum([b for _, b in parts], axis=0)
    s2 = sfft.irfft(power[0::2] + power[1::2], n=length, workers=workers)[: k + 1]
    cum = np.concatenate([[0.0], np.cumsum(sq)])
    lags = np.arange(k + 1)
    s1 = cum[n - lags] + (cum[n] - cum[lags])
    out = (s1 - 2.0 * s2) / ((n - lags) * float(idx.size))
    out[0] = 0.0  # exact by definition; removes rounding at lag 0
    return out

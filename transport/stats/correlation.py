"""FFT auto- and cross-correlation of one or many series.

Conventions used throughout :mod:`transport.stats`:

* Series run along the **last axis**; any leading axes are a batch transformed together.
* Only non-negative lags are returned: ``c_xy(k) = sum_t x(t) y(t + k)`` for
  ``k = 0 .. max_lag``; negative lags of a cross-correlation are ``c_yx(k)`` (swap the
  arguments).
* ``normalization`` names what the raw sum of lag ``k`` is divided by:

  ``"pairs"``
      the number of pairs ``N - k`` (the unbiased "adjusted" estimate; the covariance the
      Green–Kubo integral needs),
  ``"length"``
      the series length ``N`` (the biased, positive-semidefinite estimate),
  ``"none"``
      nothing (raw sums).

The linear (non-circular) correlation is obtained by zero padding to a fast length
``L >= N + max_lag`` (:func:`scipy.fft.next_fast_len`), so that no wrapped-around products
reach the lags returned.

References
----------
.. [1] W. H. Press, S. A. Teukolsky, W. T. Vetterling and B. P. Flannery, *Numerical
   Recipes*, 3rd ed. (Cambridge, 2007): correlation by FFT with zero padding.
.. [2] M. P. Allen and D. J. Tildesley, *Computer Simulation of Liquids*, 2nd ed. (Oxford,
   2017): time correlation functions by FFT.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import scipy.fft as sfft
from numpy.typing import ArrayLike

__all__ = ["NORMALIZATIONS", "Normalization", "autocorrelation", "cross_correlation"]

Normalization = Literal["pairs", "length", "none"]
#: Accepted values of the ``normalization`` argument.
NORMALIZATIONS: tuple[str, ...] = ("pairs", "length", "none")


def _check_normalization(normalization: str) -> None:
    if normalization not in NORMALIZATIONS:
        raise ValueError(
            f"`normalization` must be one of {', '.join(map(repr, NORMALIZATIONS))}; "
            f"got {normalization!r}"
        )


def _check_max_lag(max_lag: int | None, n: int) -> int:
    if max_lag is None:
        return n - 1
    if isinstance(max_lag, bool) or int(max_lag) != max_lag or not 0 <= max_lag <= n - 1:
        raise ValueError(
            f"`max_lag` must be an integer in [0, {n - 1}] for series of {n} samples; "
            f"got {max_lag!r}"
        )
    return int(max_lag)


def _as_series(x: ArrayLike, name: str) -> np.ndarray:
    a = np.asarray(x)
    if a.ndim == 0 or a.shape[-1] < 1:
        raise ValueError(f"`{name}` must have at least one sample along the last axis; "
                         f"got shape {a.shape}")
    if not np.issubdtype(a.dtype, np.number) or np.iscomplexobj(a):
        raise ValueError(f"`{name}` must be real numbers; got dtype {a.dtype}")
    return a


def _finite_1d(x: ArrayLike, name: str, minimum: int, noun: str = "samples") -> np.ndarray:
    """`x` as a 1-D float64 array of at least `minimum` finite values, else ValueError."""
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != 1 or a.size < minimum:
        raise ValueError(f"`{name}` must be 1-D with at least {minimum} {noun}; got shape "
                         f"{a.shape}")
    if not np.isfinite(a).all():
        raise ValueError(f"`{name}` contains a non-finite value")
    return a


def _normalize(raw: np.ndarray, n: int, normalization: str) -> np.ndarray:
    """Divide raw lag sums (last axis = lag) in place as `normalization` says."""
    if normalization == "pairs":
        raw /= np.arange(n, n - raw.shape[-1], -1, dtype=np.float64)
    elif normalization == "length":
        raw /= n
    return raw


def _padded(a: np.ndarray, length: int, subtract_mean: bool) -> np.ndarray:
    """Float64 copy of `a` (minus its mean along the last axis) zero padded to `length`.

    One pass over the data: the mean is subtracted while copying into the padded buffer
    (whose zero pages cost nothing until touched)."""
    n = a.shape[-1]
    buf = np.zeros((*a.shape[:-1], length))
    if subtract_mean:
        np.subtract(a, a.mean(axis=-1, keepdims=True, dtype=np.float64), out=buf[..., :n])
    else:
        buf[..., :n] = a
    return buf


def _power_inplace(spec: np.ndarray) -> np.ndarray:
    """Replace a complex spectrum by ``|X|^2`` (imaginary part 0), in place."""
    v = spec.view(np.float64)
    re = v[..., 0::2]
    im = v[..., 1::2]
    np.multiply(re, re, out=re)
    np.multiply(im, im, out=im)
    re += im
    im[...] = 0.0
    return spec


def autocorrelation(
    x: ArrayLike,
    *,
    max_lag: int | None = None,
    normalization: Normalization = "pairs",
    subtract_mean: bool = True,
    workers: int | None = None,
) -> np.ndarray:
    """Autocorrelation of one series or a batch of series, by FFT.

    ``c(k) = sum_{t=0}^{N-1-k} x(t) x(t+k) / norm(k)`` with ``x`` the series minus its mean
    when `subtract_mean` is True.

    Parameters
    ----------
    x : array_like, shape (..., N)
        The series along the last axis, in any unit ``u``. Computed in float64.
    max_lag : int, optional
        Largest lag returned, in samples (``0 <= max_lag <= N - 1``); default ``N - 1``.
        A smaller value also shortens the transforms (padding to ``N + max_lag``).
    normalization : {"pairs", "length", "none"}
        Divide lag ``k`` by ``N - k`` (pairs), by ``N`` (length), or not at all (none).
    subtract_mean : bool
        Subtract each series' own mean before correlating (covariance rather than raw
        second moment).
    workers : int, optional
        Threads for :mod:`scipy.fft` (useful for batches).

    Returns
    -------
    ndarray, shape (..., max_lag + 1)
        The correlation at lags ``0 .. max_lag``, in ``u^2`` (float64).

    References
    ----------
    .. [1] W. H. Press et al., *Numerical Recipes*, 3rd ed. (2007): FFT correlation.

    Examples
    --------
    >>> autocorrelation([1.0, 2.0, 3.0], normalization="none", subtract_mean=False)
    array([14.,  8.,  3.])
    """
    _check_normalization(normalization)
    a = _as_series(x, "x")
    n = a.shape[-1]
    k = _check_max_lag(max_lag, n)
    length = sfft.next_fast_len(n + k, real=True)
    spec = sfft.rfft(_padded(a, length, subtract_mean), axis=-1, workers=workers,
                     overwrite_x=True)
    _power_inplace(spec)
    full = sfft.irfft(spec, n=length, axis=-1, workers=workers, overwrite_x=True)
    del spec
    out = np.array(full[..., : k + 1], copy=True)
    del full
    return _normalize(out, n, normalization)


def cross_correlation(
    x: ArrayLike,
    y: ArrayLike,
    *,
    max_lag: int | None = None,
    normalization: Normalization = "pairs",
    subtract_mean: bool = True,
    workers: int | None = None,
) -> np.ndarray:
    """Cross-correlation ``c_xy(k) = sum_t x(t) y(t+k) / norm(k)`` for ``k >= 0``, by FFT.

    Parameters
    ----------
    x, y : array_like, shape (..., N)
        Series along the last axis (shapes broadcast against each other), in units ``u``
        and ``v``. The lag runs from `x` to `y`: ``y`` is taken ``k`` samples later. For
        negative lags call ``cross_correlation(y, x)``.
    max_lag, normalization, subtract_mean, workers
        As in :func:`autocorrelation`.

    Returns
    -------
    ndarray, shape (..., max_lag + 1)
        ``c_xy`` at lags ``0 .. max_lag``, in ``u v`` (float64).

    References
    ----------
    .. [1] W. H. Press et al., *Numerical Recipes*, 3rd ed. (2007): FFT correlation.

    Examples
    --------
    >>> cross_correlation([1.0, 0.0, 0.0], [0.0, 1.0, 0.0], normalization="none",
    ...                   subtract_mean=False).round(12) + 0.0
    array([0., 1., 0.])
    """
    _check_normalization(normalization)
    a = _as_series(x, "x")
    b = _as_series(y, "y")
    if a.shape[-1] != b.shape[-1]:
        raise ValueError(f"`x` and `y` must have the same length along the last axis; got "
                         f"{a.shape[-1]} and {b.shape[-1]}")
    n = a.shape[-1]
    k = _check_max_lag(max_lag, n)
    length = sfft.next_fast_len(n + k, real=True)
    fa = sfft.rfft(_padded(a, length, subtract_mean), axis=-1, workers=workers,
                   overwrite_x=True)
    fb = sfft.rfft(_padded(b, length, subtract_mean), axis=-1, workers=workers,
                   overwrite_x=True)
    np.conjugate(fa, out=fa)
    prod = fa * fb
    del fa, fb
    full = sfft.irfft(prod, n=length, axis=-1, workers=workers, overwrite_x=True)
    out = np.array(full[..., : k + 1], copy=True)
    return _normalize(out, n, normalization)

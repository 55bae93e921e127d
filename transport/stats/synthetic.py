"""Synthetic correlated series with known statistics (for tests, benchmarks and demos).

AR(1): ``x_t = phi x_{t-1} + sqrt(1 - phi^2) sigma e_t`` with ``e_t`` standard normal and a
stationary start ``x_0 ~ N(0, sigma^2)``. Its autocorrelation is ``rho(k) = phi^k``, its
integrated autocorrelation time ``tau_int = (1 + phi) / (2 (1 - phi))`` samples.

Ornstein–Uhlenbeck: the exact discretisation of ``dx = -x/tau dt + sqrt(2/tau) sigma dW``
on a grid of spacing ``dt``,

    x_{n+1} = x_n e^{-dt/tau} + sqrt(1 - e^{-2 dt/tau}) sigma xi_n,

an AR(1) series with ``phi = exp(-dt/tau)``; ``<x(0) x(t)> = sigma^2 exp(-|t|/tau)`` and
``int_0^inf <x(0) x(t)> dt = sigma^2 tau``.

References
----------
.. [1] G. E. Uhlenbeck and L. S. Ornstein, "On the theory of the Brownian motion",
   Phys. Rev. 36, 823 (1930).
.. [2] D. T. Gillespie, "Exact numerical simulation of the Ornstein-Uhlenbeck process and
   its integral", Phys. Rev. E 54, 2084 (1996).
.. [3] G. E. P. Box, G. M. Jenkins and G. C. Reinsel, *Time Series Analysis*, 4th ed.
   (Wiley, 2008) (AR(1) process).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy.signal import lfilter

__all__ = ["ar1", "ornstein_uhlenbeck"]


def ar1(
    phi: float,
    shape: int | tuple[int, ...],
    *,
    rng: np.random.Generator,
    sigma: float = 1.0,
    previous: ArrayLike | None = None,
) -> np.ndarray:
    """Stationary AR(1) series along the last axis.

    Parameters
    ----------
    phi : float
        Lag-1 autocorrelation, ``-1 < phi < 1``.
    shape : int or tuple of int
        Output shape; series run along the last axis.
    rng : numpy.random.Generator
        Source of the noise.
    sigma : float
        Stationary standard deviation (unit of the output).
    previous : array_like, optional
        Last sample of earlier output, shape ``shape[:-1]``: continue those series (for
        generating a long series in chunks). Default: start from the stationary law.

    Returns
    -------
    ndarray of the given shape, float64

    References
    ----------
    .. [1] G. E. P. Box, G. M. Jenkins and G. C. Reinsel, *Time Series Analysis* (2008).
    """
    if not -1 < phi < 1:
        raise ValueError(f"`phi` must be in (-1, 1); got {phi!r}")
    shp = (shape,) if np.ndim(shape) == 0 else tuple(shape)
    e = rng.standard_normal(shp)
    e *= sigma * np.sqrt(1.0 - phi * phi)
    if previous is None:
        e[..., 0] *= 1.0 / np.sqrt(1.0 - phi * phi)  # x_0 ~ N(0, sigma^2)
        zi = np.zeros((*shp[:-1], 1))
    else:
        zi = phi * np.asarray(previous, dtype=np.float64)[..., None]
    out, _ = lfilter([1.0], [1.0, -phi], e, axis=-1, zi=zi)
    return out


def ornstein_uhlenbeck(
    shape: int | tuple[int, ...],
    *,
    dt: float,
    tau: float,
    rng: np.random.Generator,
    sigma: float = 1.0,
    mean: float = 0.0,
) -> np.ndarray:
    """Ornstein–Uhlenbeck series sampled exactly every `dt` (stationary start).

    Parameters
    ----------
    shape : int or tuple of int
        Output shape; series run along the last axis.
    dt : float
        Sampling interval (any time unit ``T``).
    tau : float
        Correlation time, in ``T``.
    rng : numpy.random.Generator
        Source of the noise.
    sigma : float
        Stationary standard deviation.
    mean : float
        Stationary mean.

    Returns
    -------
    ndarray of the given shape, float64

    References
    ----------
    .. [1] D. T. Gillespie, Phys. Rev. E 54, 2084 (1996).
    """
    if not (dt > 0 and tau > 0):
        raise ValueError(f"`dt` and `tau` must be positive; got {dt!r}, {tau!r}")
    return mean + ar1(float(np.exp(-dt / tau)), shape, rng=rng, sigma=sigma)

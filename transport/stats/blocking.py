"""Block averaging (Flyvbjerg–Petersen) with automatic plateau detection (Jonsson's M-test).

Blocking transformation: replace the series by the means of consecutive pairs,
``x'_i = (x_{2i} + x_{2i+1}) / 2`` (an odd last sample is dropped). The mean is unchanged, and
once the blocks are longer than the correlation time they are independent, so the naive
standard error of the blocked series, ``sqrt(s^2 / (n - 1))`` with ``s^2`` the variance with
divisor ``n``, rises with the level and then stays on a plateau: the correlation-aware
standard error. At each level its own uncertainty is ``stderr / sqrt(2 (n - 1))`` (Gaussian
approximation, Flyvbjerg & Petersen).

Plateau rule (Jonsson's M-test, then one more step). At level ``k`` with ``n_k`` blocks,
variance ``s_k^2`` and lag-1 autocovariance ``gamma_k`` (both with divisor ``n_k``, mean
subtracted), uncorrelated blocks give ``T_k = n_k ((n_k - 1) s_k^2 / n_k^2 + gamma_k)^2 / s_k^4
~ chi^2_1`` (the first term removes the ``-s^2 / n`` bias of ``gamma`` from mean subtraction).
Their sum from level ``j`` to the last level, ``M_j``, is ``chi^2`` with one degree of freedom
per level when every level from ``j`` on is uncorrelated. The first level whose ``M_j`` is
below the ``1 - alpha`` quantile of that ``chi^2`` *and* whose own ``T_j`` is below the
``chi^2_1`` quantile (the sum alone can hide one clearly correlated level among many quiet
ones) is the first level with no detectable correlation. There the residual bias of the
variance, which decays only as ``1/b`` with the block size ``b`` (Flyvbjerg & Petersen),
is still comparable to its noise, so the estimate is taken one level higher (if
that level still has at least 16 blocks), which halves the bias for ``sqrt(2)`` more noise.
Measured on AR(1) series (phi = 0.5-0.99, 2^12-2^18 samples) this takes the mean ratio of
the estimate to the exact standard error from 0.66-0.98 (M-test level) to 0.84-0.99.
A pass at a level with fewer than 32 blocks is weak evidence (a lag-1 correlation below
``~2.6/sqrt(n)`` goes undetected), so the result is then flagged ``converged=False``.
This is a hypothesis test with a stated false-alarm rate, not "the curve looks flat"; it
needs no tuning and uses every level's information.

References
----------
.. [1] H. Flyvbjerg and H. G. Petersen, "Error estimates on averages of correlated data",
   J. Chem. Phys. 91, 461 (1989).
.. [2] M. Jonsson, "Standard error estimation by an automated blocking method",
   Phys. Rev. E 98, 043304 (2018).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import special as _sp  # not scipy.stats: its import takes ~1 s

from .correlation import _finite_1d

__all__ = ["BlockingResult", "block_average"]

#: The extra blocking step is taken only if it leaves at least this many blocks.
_MIN_BLOCKS_STEP = 16
#: A plateau found with fewer blocks than this is flagged as not converged.
_MIN_BLOCKS_TEST = 32


@dataclass(frozen=True)
class BlockingResult:
    """Blocking analysis of one series: the estimate and the whole blocking curve.

    Attributes
    ----------
    value : float
        The mean of the series (unit ``u`` of the series).
    stderr : float
        Standard error of the mean at the chosen level, in ``u``.
    interval : tuple of float
        95% confidence interval from Student's t with ``n_blocks - 1`` degrees of freedom.
    block_size : int
        Samples per block at the chosen level.
    n_blocks : int
        Blocks at the chosen level.
    level : int
        Index of the chosen level (0 = the raw series).
    converged : bool
        True if the plateau test passed at a level with at least 32 blocks. False means
        the series is too short compared with its correlation time: if no level passed,
        the largest standard error of the curve is returned as a conservative value.
    curve_block_size : ndarray of int
        Block size of every level (1, 2, 4, ...).
    curve_stderr : ndarray
        Standard error of the mean estimated at every level, in ``u``.
    curve_stderr_error : ndarray
        Uncertainty of each ``curve_stderr`` value, in ``u``.
    curve_n_blocks : ndarray of int
        Number of blocks at every level.
    m_statistic : ndarray
        Jonsson's ``M_j`` for every level.
    m_threshold : ndarray
        The ``1 - alpha`` ``chi^2`` quantile each ``M_j`` is compared with.
    level_statistic : ndarray
        Each level's own term ``T_j`` (compared with the ``chi^2_1`` quantile).
    """

    value: float
    stderr: float
    interval: tuple[float, float]
    block_size: int
    n_blocks: int
    level: int
    converged: bool
    curve_block_size: np.ndarray
    curve_stderr: np.ndarray
    curve_stderr_error: np.ndarray
    curve_n_blocks: np.ndarray
    m_statistic: np.ndarray
    m_threshold: np.ndarray
    level_statistic: np.ndarray

    @property
    def statistical_inefficiency(self) -> float:
        """``g = N stderr^2 / s^2``: the blocking estimate of ``2 tau_int`` (samples)."""
        var0 = self.curve_stderr[0] ** 2
        return float(self.stderr**2 / var0) if var0 > 0 else 1.0


def block_average(x: ArrayLike, *, alpha: float = 0.01) -> BlockingResult:
    """Mean and correlation-aware standard error by block averaging.

    Parameters
    ----------
    x : array_like, shape (N,)
        The series (any unit ``u``), at least 4 finite samples.
    alpha : float
        False-alarm rate of the M-test (default 0.01; Jonsson's 99% quantiles, from memory).

    Returns
    -------
    BlockingResult
        Mean, standard error at the plateau, 95% interval and the blocking curve.

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989).
    .. [2] M. Jonsson, Phys. Rev. E 98, 043304 (2018).

    Examples
    --------
    >>> rng = np.random.default_rng(3)
    >>> res = block_average(rng.standard_normal(4096))
    >>> res.level, round(res.stderr, 4)   # white noise: plateau from the start, one step up
    (1, 0.0158)
    """
    a = _finite_1d(x, "x", 4)
    if not 0 < alpha < 1:
        raise ValueError(f"`alpha` must be in (0, 1); got {alpha!r}")
    constant = bool(a.min() == a.max())
    mean = float(a[0]) if constant else float(a.mean())
    sizes, counts, variances, gammas = [], [], [], []
    level_data = a - mean  # the mean is subtracted once; each level re-centres below
    size = 1
    while level_data.size >= 2:
        n = level_data.size
        d = level_data - level_data.mean()
        variances.append(float(d @ d) / n)
        gammas.append(float(d[:-1] @ d[1:]) / n)
        sizes.append(size)
        counts.append(n)
        m = n // 2
        level_data = 0.5 * (level_data[0 : 2 * m : 2] + level_data[1 : 2 * m : 2])
        size *= 2
    s2 = np.array(variances)
    gam = np.array(gammas)
    nb = np.array(counts)
    bs = np.array(sizes)
    stderr = np.sqrt(s2 / (nb - 1))
    stderr_err = stderr / np.sqrt(2.0 * (nb - 1))

    levels = s2.size
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = nb * ((nb - 1) * s2 / nb**2 + gam) ** 2 / s2**2
    terms = np.where(s2 > 0, terms, 0.0)
    if constant:
        stderr[:] = 0.0
        stderr_err[:] = 0.0
    m_stat = np.cumsum(terms[::-1])[::-1]
    dof = levels - np.arange(levels)
    threshold = _sp.chdtri(dof, alpha)  # chi2.ppf(1 - alpha, dof)
    single = _sp.chdtri(1, alpha)
    passed = np.nonzero((m_stat < threshold) & (terms < single))[0]
    converged = bool(passed.size)
    if constant:
        level, converged = 0, True
    elif converged:
        level = int(passed[0])
        converged = bool(nb[level] >= _MIN_BLOCKS_TEST)
        if level + 1 < levels and nb[level + 1] >= _MIN_BLOCKS_STEP:
            level += 1
    else:
        level = int(np.argmax(stderr))
    se = float(stderr[level])
    t = float(_sp.stdtrit(max(int(nb[level]) - 1, 1), 0.975))  # t.ppf
    return BlockingResult(
        value=mean,
        stderr=se,
        interval=(mean - t * se, mean + t * se),
        block_size=int(bs[level]),
        n_blocks=int(nb[level]),
        level=level,
        converged=converged,
        curve_block_size=bs,
        curve_stderr=stderr,
        curve_stderr_error=stderr_err,
        curve_n_blocks=nb,
        m_statistic=m_stat,
        m_threshold=threshold,
        level_statistic=terms,
    )

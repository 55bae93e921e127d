"""The time-decomposition fit of the running Green–Kubo integral (Zhang, Otani & Maginn).

The standard deviation of the running integral across independent pieces, sigma(t), is
fitted by A t^b; the mean running integral is fitted, with weights 1/t^b, by a double
exponential A [alpha tau1 (1 - exp(-t/tau1)) + (1 - alpha) tau2 (1 - exp(-t/tau2))], whose
plateau A [alpha tau1 + (1 - alpha) tau2] is the viscosity. `_plateau_sensitivity` gives
the linear response of that plateau to the curve, for the jackknife over pieces.

References
----------
.. [1] Y. Zhang, A. Otani and E. J. Maginn, "Reliable viscosity calculation from
   equilibrium molecular dynamics simulations: a time decomposition method", J. Chem.
   Theory Comput. 11, 3537 (2015).
"""

from __future__ import annotations

import warnings as _warnings
from collections.abc import Sequence

import numpy as np
from scipy import optimize


def _double_exp(t: np.ndarray, a: float, alpha: float, tau1: float, tau2: float) -> np.ndarray:
    return a * (alpha * tau1 * (-np.expm1(-t / tau1)) + (1 - alpha) * tau2 * (-np.expm1(-t / tau2)))


def _double_exp_jac(
    t: np.ndarray, a: float, alpha: float, tau1: float, tau2: float
) -> np.ndarray:
    x1, x2 = t / tau1, t / tau2
    e1, e2 = np.exp(-x1), np.exp(-x2)
    m1, m2 = -np.expm1(-x1), -np.expm1(-x2)
    return np.stack(
        [
            alpha * tau1 * m1 + (1 - alpha) * tau2 * m2,
            a * (tau1 * m1 - tau2 * m2),
            a * alpha * (m1 - x1 * e1),
            a * (1 - alpha) * (m2 - x2 * e2),
        ],
        axis=-1,
    )


def _fit_power(t: np.ndarray, sigma: np.ndarray) -> tuple[float, float]:
    """Fit sigma(t) = A t^b by least squares in log space; returns (A, b)."""
    ok = (t > 0) & (sigma > 0) & np.isfinite(sigma)
    if ok.sum() < 3:
        return float("nan"), 0.5
    # log-spaced subsample so every decade weighs the same
    idx = np.unique(np.geomspace(1, ok.sum(), num=min(200, int(ok.sum()))).astype(int) - 1)
    x = np.log(t[ok][idx])
    y = np.log(sigma[ok][idx])
    b, loga = np.polyfit(x, y, 1)
    return float(np.exp(loga)), float(b)


def _fit_double_exp(
    t: np.ndarray, eta: np.ndarray, b: float, p0: Sequence[float] | None = None
) -> np.ndarray:
    """Weighted double-exponential fit of the mean running integral (Zhang et al. 2015).

    The fit runs on dimensionless time t/t_max and integral eta/max|eta| so that it behaves
    the same in SI and reduced units; parameters are returned in the input's units.
    """
    idx = _fit_points(t.size)
    tscale = float(t[-1])
    yscale = float(np.max(np.abs(eta))) or 1.0
    tt, yy = t[idx] / tscale, eta[idx] / yscale
    sig = np.maximum(tt, tt[0] if tt[0] > 0 else 1.0) ** b
    slope0 = yy[1] / tt[1] if tt.size > 1 and tt[1] > 0 else 1.0
    plateau = max(float(np.mean(yy[-max(1, yy.size // 5):])), 1e-12)
    if p0 is None:
        guesses = []
        for tau1 in (0.01, 0.05):
            for alpha in (0.5, 0.9):
                tau2 = max((plateau / max(slope0, 1e-12) - alpha * tau1) / (1 - alpha), tau1)
                guesses.append([max(slope0, 1e-12), alpha, tau1, min(tau2, 10.0)])
    else:
        a, alpha, tau1, tau2 = p0
        guesses = [[a * tscale / yscale, alpha, tau1 / tscale, tau2 / tscale]]
    lower = [0.0, 0.0, 1e-6, 1e-6]
    upper = [np.inf, 1.0, 100.0, 100.0]
    def _fit(g: Sequence[float], nfev: int) -> tuple[np.ndarray | None, float]:
        g = [float(np.clip(v, lo * 1.0001 if lo else 0.0, hi)) for v, lo, hi in
             zip(g, lower, upper, strict=True)]
        try:
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                res = optimize.least_squares(
                    lambda q: (_double_exp(tt, *q) - yy) / sig, g,
                    jac=lambda q: _double_exp_jac(tt, *q) / sig[:, None],
                    bounds=(lower, upper), max_nfev=nfev, method="trf",
                )
        except (RuntimeError, ValueError):
            return None, np.inf
        if not np.all(np.isfinite(res.x)):
            return None, np.inf
        return res.x, float(2.0 * res.cost)

    # a short fit from each starting guess, then the best one polished
    best, best_cost = None, np.inf
    for g in guesses:
        popt, cost = _fit(g, 60 if len(guesses) > 1 else 400)
        if cost < best_cost:
            best, best_cost = popt, cost
    if best is not None and len(guesses) > 1:
        popt, cost = _fit(best, 400)
        if cost <= best_cost:
            best = popt
    if best is None:
        raise RuntimeError("double-exponential fit did not converge")
    a, alpha, tau1, tau2 = best
    return np.array([a * yscale / tscale, alpha, tau1 * tscale, tau2 * tscale])


def _fit_points(n: int) -> np.ndarray:
    """Indices of the (at most 400) points of the running integral used by the fit."""
    return np.unique(np.linspace(0, n - 1, num=min(n, 400)).astype(int))


def _plateau_sensitivity(
    t: np.ndarray, popt: np.ndarray, b: float
) -> tuple[np.ndarray, np.ndarray]:
    """Linear response of the fitted plateau to a change of the fitted curve.

    Returns the indices of the fitted points and h such that a change dy of the running
    integral at those points moves the plateau by ``h @ dy`` (weighted Gauss–Newton step of
    the same fit, pseudo-inverse for poorly determined directions).
    """
    idx = _fit_points(t.size)
    # work in the fit's dimensionless units (t / t_max, eta / plateau) so that the
    # pseudo-inverse's cut-off means the same in SI and reduced units
    tscale = float(t[-1])
    yscale = abs(_plateau(popt)) or 1.0
    tt = t[idx] / tscale
    a, alpha, tau1, tau2 = popt
    ps = (a * tscale / yscale, alpha, tau1 / tscale, tau2 / tscale)
    sig = np.maximum(tt, tt[0] if tt[0] > 0 else 1.0) ** b
    jac = _double_exp_jac(tt, *ps) / sig[:, None]
    a, alpha, tau1, tau2 = ps
    grad = np.array([alpha * tau1 + (1 - alpha) * tau2, a * (tau1 - tau2), a * alpha,
                     a * (1 - alpha)])
    h = (grad @ np.linalg.pinv(jac, rcond=1e-10)) / sig
    return idx, h


def _plateau(p: np.ndarray) -> float:
    a, alpha, tau1, tau2 = p
    return float(a * (alpha * tau1 + (1 - alpha) * tau2))

"""Helpers for the real-data calibration of the diffusion error bar (not a test module).

The check (DESIGN.md, "Honest error bars"): split a long run into K independent time
blocks, analyse each block as a user would analyse a run of that length, and compare the
scatter of the block values with their stated standard errors: the chi-square of the
values about their inverse-variance weighted mean has K - 1 degrees of freedom when the
errors are right (common practice); the full-run value should lie inside nearly all of
the block intervals. The chi-square reference is chi^2(K - 1) only for exactly known
errors; error bars from a few time blocks are themselves uncertain, which lengthens the
tail, so the band is simulated with each error's own degrees of freedom
(:func:`chi2_band`).
"""

from __future__ import annotations

import numpy as np

from transport.diffusion import analyse_diffusion
from transport.estimate import Estimate
from transport.io.trajectory import positions_from_arrays
from transport.series import PositionSeries


def time_block(series: PositionSeries, start: int, stop: int) -> PositionSeries:
    """Frames ``start:stop`` of a series as a run of its own (public constructor)."""
    sl = slice(start, stop)
    vel = None if series.velocities is None else np.asarray(series.velocities[sl])
    return positions_from_arrays(
        np.asarray(series.positions[sl]), series.box[sl], series.dt, unwrap="none",
        units=series.units, species=series.species, species_names=series.species_names,
        masses=series.masses, velocities=vel, temperature=series.temperature)


def analyse_blocks(series: PositionSeries, k: int, *, method: str = "msd"
                   ) -> list[Estimate]:
    """The estimate (``msd`` or ``vacf``) of each of ``k`` consecutive time blocks (first
    species)."""
    n = series.n_frames // k
    out = []
    for j in range(k):
        res = analyse_diffusion(time_block(series, j * n, (j + 1) * n),
                                vacf="yes" if method == "vacf" else "no",
                                msd=method == "msd")
        out.append((res.vacf if method == "vacf" else res.msd)[0])
    return out


def chi2_about_weighted_mean(values: np.ndarray, errors: np.ndarray) -> float:
    """Chi-square of values about their inverse-variance weighted mean."""
    w = 1.0 / np.asarray(errors, dtype=float) ** 2
    v = np.asarray(values, dtype=float)
    mu = float(np.sum(w * v) / np.sum(w))
    return float(np.sum(w * (v - mu) ** 2))


def chi2_band(errors: np.ndarray, dofs: np.ndarray, level: float,
              rng: np.random.Generator, draws: int = 20_000
              ) -> tuple[float, float, float]:
    """Central `level` band of the chi-square about the weighted mean when each stated
    error is itself estimated with `dofs` degrees of freedom (Monte Carlo), and the
    chance that error bars 2x too small (chi-square 4x larger) would still fall inside.

    With exactly known errors the chi-square of K values about their inverse-variance
    weighted mean follows chi^2(K - 1). An error bar estimated from the scatter of B time
    blocks is ``sigma sqrt(chi^2_nu / nu)`` with ``nu = B - 1`` (independent of the value,
    for normal blocks; Student 1908), so ``1/s^2`` has the mean ``nu / (nu - 2)`` times
    ``1/sigma^2`` and the chi-square has a longer tail than chi^2(K - 1). The band is
    simulated: values ``sigma_i z_i``, errors ``sigma_i sqrt(chi^2_nu_i / nu_i)``, with
    ``sigma_i`` the stated errors (the statistic hardly depends on them) and an infinite
    ``nu`` for model errors.
    """
    sig = np.asarray(errors, dtype=float)
    nu = np.asarray(dofs, dtype=float)
    v = rng.standard_normal((draws, sig.size)) * sig
    scale = np.where(np.isfinite(nu), rng.chisquare(np.where(np.isfinite(nu), nu, 1.0),
                                                     (draws, sig.size)) / np.where(
        np.isfinite(nu), nu, 1.0), 1.0)
    s = sig * np.sqrt(scale)
    w = 1.0 / s**2
    mu = np.sum(w * v, axis=1) / np.sum(w, axis=1)
    chi2 = np.sum(w * (v - mu[:, None]) ** 2, axis=1)
    lo, hi = np.quantile(chi2, [(1 - level) / 2, (1 + level) / 2])
    return float(lo), float(hi), float(np.mean((4 * chi2 > lo) & (4 * chi2 < hi)))


def error_dofs(estimates: list[Estimate]) -> np.ndarray:
    """Degrees of freedom of each estimate's error bar: blocks - 1, or inf (model)."""
    return np.array([e.diagnostics["block_count"] - 1 if e.diagnostics["block_count"] > 0
                     else np.inf for e in estimates], dtype=float)

"""Helpers for the real-data calibration of the diffusion error bar (not a test module).

The check (DESIGN.md, "Honest error bars"): split a long run into K independent time
blocks, analyse each block as a user would analyse a run of that length, and compare the
scatter of the block values with their stated standard errors: the chi-square of the
values about their inverse-variance weighted mean has K - 1 degrees of freedom when the
errors are right (common practice); the full-run value should lie inside nearly all of
the block intervals.
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
    return positions_from_arrays(
        np.asarray(series.positions[sl]), series.box[sl], series.dt, unwrap="none",
        units=series.units, species=series.species, species_names=series.species_names,
        masses=series.masses, temperature=series.temperature)


def analyse_blocks(series: PositionSeries, k: int) -> list[Estimate]:
    """The MSD estimate of each of ``k`` consecutive time blocks (first species)."""
    n = series.n_frames // k
    return [analyse_diffusion(time_block(series, j * n, (j + 1) * n), vacf="no").msd[0]
            for j in range(k)]


def chi2_about_weighted_mean(values: np.ndarray, errors: np.ndarray) -> float:
    """Chi-square of values about their inverse-variance weighted mean."""
    w = 1.0 / np.asarray(errors, dtype=float) ** 2
    v = np.asarray(values, dtype=float)
    mu = float(np.sum(w * v) / np.sum(w))
    return float(np.sum(w * (v - mu) ** 2))

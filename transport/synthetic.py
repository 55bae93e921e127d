"""Synthetic data with exactly known transport coefficients (for tests, demo, benchmarks).

Stress: an isotropic, traceless, symmetric random tensor whose five independent
components (in an orthonormal basis of traceless symmetric matrices) are independent sums
of Ornstein–Uhlenbeck processes with autocovariance C(t) = sum_m s_m^2 exp(-t / tau_m). Then
sum_ij <P°_ij(0) P°_ij(t)> = 5 C(t) and the Green–Kubo viscosity is exactly

    eta = V / (10 k_B T) * 5 * integral C = V / (2 k_B T) * sum_m s_m^2 tau_m.

Each off-diagonal component has autocovariance C(t)/2, so the off-diagonal-only formula
V/(3 k_B T) * 3 * integral C/2 gives the same eta (isotropy).

Positions: Brownian particles with known D in a periodic box (wrapped coordinates).

References
----------
.. [1] G. E. Uhlenbeck and L. S. Ornstein, Phys. Rev. 36, 823 (1930): the OU process and
   its exact discretisation x_{n+1} = x_n e^{-dt/tau} + s sqrt(1 - e^{-2 dt/tau}) xi_n.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .stats.synthetic import ornstein_uhlenbeck

__all__ = ["OUStressModel", "brownian_positions", "ou_process"]

_INV_SQRT2 = 1.0 / np.sqrt(2.0)
_INV_SQRT6 = 1.0 / np.sqrt(6.0)


def ou_process(
    n: int,
    dt: float,
    tau: float,
    sigma: float,
    rng: np.random.Generator,
    size: int = 1,
) -> np.ndarray:
    """Stationary Ornstein–Uhlenbeck samples by the exact discretisation (AR(1)).

    Parameters
    ----------
    n : int
        Number of samples.
    dt : float
        Time between samples (same unit as `tau`).
    tau : float
        Correlation time.
    sigma : float
        Stationary standard deviation.
    rng : numpy.random.Generator
        Source of randomness.
    size : int
        Number of independent processes.

    Returns
    -------
    ndarray, shape (size, n)
    """
    return ornstein_uhlenbeck((size, n), dt=dt, tau=tau, rng=rng, sigma=sigma)


@dataclass(frozen=True)
class OUStressModel:
    """Isotropic stress fluctuations with a known Green–Kubo viscosity.

    Attributes
    ----------
    amplitudes : sequence of float
        Standard deviations s_m of each OU mode of one tensor coordinate (pressure unit).
    times : sequence of float
        Correlation times tau_m (time unit).
    mean_pressure : float
        Mean hydrostatic pressure added to the diagonal (pressure unit).
    pressure_noise : float
        Standard deviation of white noise added to the hydrostatic pressure (does not change
        the viscosity: the traceless part removes it).
    """

    amplitudes: Sequence[float]
    times: Sequence[float]
    mean_pressure: float = 0.0
    pressure_noise: float = 0.0

    def integral(self) -> float:
        """integral_0^inf C(t) dt = sum_m s_m^2 tau_m (pressure^2 x time)."""
        return float(sum(s * s * t for s, t in zip(self.amplitudes, self.times, strict=True)))

    def viscosity(self, volume: float, kT: float) -> float:
        """Exact Green–Kubo viscosity V/(2 k_B T) * sum_m s_m^2 tau_m."""
        return volume / (2.0 * kT) * self.integral()

    @classmethod
    def for_viscosity(
        cls,
        eta: float,
        volume: float,
        kT: float,
        times: Sequence[float],
        fractions: Sequence[float],
        **kwargs: float,
    ) -> OUStressModel:
        """Model whose modes contribute `fractions` of the viscosity `eta`."""
        total = 2.0 * kT * eta / volume
        amps = [float(np.sqrt(f * total / t)) for f, t in zip(fractions, times, strict=True)]
        return cls(amps, tuple(times), **kwargs)

    def sample(self, n: int, dt: float, rng: np.random.Generator) -> np.ndarray:
        """Pressure tensor samples, shape (6, n): xx, yy, zz, xy, xz, yz."""
        a = np.zeros((5, n))
        for s, t in zip(self.amplitudes, self.times, strict=True):
            a += ou_process(n, dt, t, s, rng, size=5)
        p = np.empty((6, n))
        # orthonormal basis of traceless symmetric matrices (Frobenius norm 1)
        p[3] = a[0] * _INV_SQRT2  # xy
        p[4] = a[1] * _INV_SQRT2  # xz
        p[5] = a[2] * _INV_SQRT2  # yz
        p[0] = a[3] * _INV_SQRT2 + a[4] * _INV_SQRT6
        p[1] = -a[3] * _INV_SQRT2 + a[4] * _INV_SQRT6
        p[2] = -2.0 * a[4] * _INV_SQRT6
        iso = self.mean_pressure + (
            self.pressure_noise * rng.standard_normal(n) if self.pressure_noise else 0.0
        )
        p[:3] += iso
        return p


def brownian_positions(
    n_frames: int,
    n_particles: int,
    dt: float,
    diffusion: float,
    box: float | Sequence[float],
    rng: np.random.Generator,
    *,
    wrap: bool = True,
) -> np.ndarray:
    """Brownian trajectories with known D, optionally wrapped into a periodic box.

    Parameters
    ----------
    n_frames, n_particles : int
        Shape of the trajectory.
    dt : float
        Time between frames.
    diffusion : float
        Diffusion coefficient D (length^2 / time): MSD(t) = 6 D t.
    box : float or (3,) sequence
        Orthorhombic box lengths.
    rng : numpy.random.Generator
    wrap : bool
        Wrap coordinates into [0, L).

    Returns
    -------
    ndarray, shape (n_frames, n_particles, 3), float64
    """
    box_arr = np.broadcast_to(np.asarray(box, dtype=np.float64), (3,))
    steps = rng.standard_normal((n_frames, n_particles, 3)) * np.sqrt(2.0 * diffusion * dt)
    steps[0] = rng.uniform(0.0, 1.0, (n_particles, 3)) * box_arr
    pos = np.cumsum(steps, axis=0)
    if wrap:
        pos = np.mod(pos, box_arr)
    return pos

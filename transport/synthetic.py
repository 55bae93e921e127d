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

import math
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


def _damped_oscillation(n: int, dt: float, tau: float, omega: float, sigma: float,
                        rng: np.random.Generator, size: int) -> np.ndarray:
    """Stationary series with autocorrelation sigma^2 exp(-t/tau) cos(omega t), exactly.

    The real part of a complex AR(1), z_{k+1} = r e^{i omega dt} z_k + e_k with
    r = exp(-dt/tau) and circular Gaussian e_k, started in its stationary law: E[z z] = 0
    makes the real part's autocovariance (1/2) E|z|^2 r^k cos(k omega dt).
    """
    from scipy.signal import lfilter

    r = math.exp(-dt / tau)
    coef = r * complex(math.cos(omega * dt), math.sin(omega * dt))
    var_z = 2.0 * sigma**2  # E|z|^2, so that Var(Re z) = sigma^2
    scale = math.sqrt(var_z * (1.0 - r * r) / 2.0)
    e = scale * (rng.standard_normal((size, n)) + 1j * rng.standard_normal((size, n)))
    z0 = math.sqrt(var_z / 2.0) * (rng.standard_normal(size) + 1j * rng.standard_normal(size))
    e[:, 0] = z0
    z = lfilter([1.0], [1.0, -coef], e, axis=1)
    return z.real


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
    frequencies : sequence of float, optional
        Angular frequency omega_m of each mode (1/time unit); a mode with omega_m > 0 is a
        damped oscillation with autocorrelation s_m^2 exp(-t/tau_m) cos(omega_m t), the
        shape of the intramolecular (bond) part of a flexible molecule's stress. Default: all
        zero (plain OU modes).
    """

    amplitudes: Sequence[float]
    times: Sequence[float]
    mean_pressure: float = 0.0
    pressure_noise: float = 0.0
    frequencies: Sequence[float] | None = None

    def _omegas(self) -> tuple[float, ...]:
        if self.frequencies is None:
            return (0.0,) * len(self.times)
        return tuple(float(w) for w in self.frequencies)

    def integral(self) -> float:
        """integral_0^inf C(t) dt = sum_m s_m^2 tau_m / (1 + omega_m^2 tau_m^2).

        In pressure^2 x time (the Laplace transform of exp(-t/tau) cos(omega t) at 0).
        """
        return float(sum(s * s * t / (1.0 + (w * t) ** 2) for s, t, w in
                         zip(self.amplitudes, self.times, self._omegas(), strict=True)))

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
        for s, t, w in zip(self.amplitudes, self.times, self._omegas(), strict=True):
            a += ou_process(n, dt, t, s, rng, size=5) if w == 0 else _damped_oscillation(
                n, dt, t, w, s, rng, size=5)
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

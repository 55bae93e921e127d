"""Finite-size corrections of self-diffusion and box-size extrapolation (pure functions).

Self-diffusion in a periodic box is slower than in the infinite liquid: a particle drags
the fluid, and the flow it sets up reaches its own periodic images. To first order in 1/L
the hydrodynamic (Oseen) interaction with the image lattice lowers the mobility by

    D_pbc = D_inf + (k_B T / eta) S,

where S is the regularised self term of the periodic Oseen tensor (a 3 x 3 tensor with
the dimension 1/length, negative definite for the usual cells). For a cubic box of side L,
S = -xi / (6 pi L) times the identity with xi = 2.837297, which is the Yeh–Hummer
correction ``D_inf = D_pbc + xi k_B T / (6 pi eta L)``. For other cells S is anisotropic:
the correction of D along each axis is ``-(k_B T / eta) S_aa``, and the isotropic D that the
MSD gives is corrected by ``-(k_B T / eta) tr(S) / 3``.

S is computed here for any cell (cubic, orthorhombic, triclinic) by an Ewald sum of the
periodic Stokeslet with Hasimoto's splitting: the real-space kernel

    K(r) = [erfc(a r) / (8 pi r)] (1 + r r / r^2)
           + [a exp(-a^2 r^2) / (4 pi^(3/2))] (r r / r^2 - 1)

summed over the lattice images n != 0, the reciprocal sum

    (1/V) sum_{k != 0} (1 + k^2 / 4a^2) exp(-k^2 / 4a^2) (1 - k k / k^2) / k^2

and the self term -a / (2 pi^(3/2)) (the limit r -> 0 of the n = 0 image minus the bare
Oseen tensor). The k = 0 term is left out: the net momentum of the periodic system is
zero, as in the simulation. The sum does not depend on the splitting parameter a (tested).

Units: every function takes consistent internal units (SI: J/K, K, Pa s, m; or reduced LJ
units with k_B = 1). :func:`correct_diffusion` works on :class:`~transport.Estimate`
results in the reporting units (D in 1e-9 m^2/s, eta in mPa s, box in nm; or reduced).

References
----------
.. [1] I.-C. Yeh and G. Hummer, "System-size dependence of diffusion coefficients and
   viscosities from molecular dynamics simulations with periodic boundary conditions",
   J. Phys. Chem. B 108, 15873 (2004).
.. [2] H. Hasimoto, "On the periodic fundamental solutions of the Stokes equations and
   their application to viscous flow past a cubic array of spheres", J. Fluid Mech. 5, 317
   (1959).
.. [3] C. W. J. Beenakker, "Ewald sum of the Rotne–Prager tensor", J. Chem. Phys. 85, 1581
   (1986) (the Oseen limit of its real-space kernel is K(r) above).
.. [4] G. Kikugawa, T. Nakano and T. Ohara, "Hydrodynamic consideration of the finite size
   effect on the self-diffusion coefficient in a periodic rectangular parallelepiped
   system", J. Chem. Phys. 143, 024507 (2015).
.. [5] R. T. Birge, Phys. Rev. 40, 207 (1932) (scaling an error bar by sqrt(chi^2/dof)).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy import special

from .estimate import Estimate
from .units import BOLTZMANN, REDUCED_LABEL, is_reduced_unit

__all__ = [
    "XI_CUBIC",
    "BoxExtrapolation",
    "cell_matrix",
    "correct_diffusion",
    "correct_each",
    "extrapolate_box_size",
    "oseen_lattice_sum",
    "periodic_oseen",
    "yeh_hummer",
]

#: The cubic-lattice constant of the Yeh–Hummer correction (Yeh & Hummer 2004; Hasimoto
#: 1959 gives 1.7601 in units of the cube root of the volume fraction: 1.7601 (4 pi/3)^(1/3)).
XI_CUBIC = 2.837297

#: Relative viscosity error above which first-order propagation of 1/eta is poor (the
#: neglected second-order term of var(1/eta) is 3 (s/eta)^2 relative: 12% at 0.2).
_FIRST_ORDER_LIMIT = 0.2

#: A correction larger than this share of D is flagged (the box is small for the liquid).
_LARGE_SHARE = 0.25

_Z95 = 1.959963984540054


# ---- the lattice sum ---------------------------------------------------------------------

def cell_matrix(lengths: Sequence[float], angles: Sequence[float] | None = None) -> np.ndarray:
    """Cell vectors as the rows of a 3 x 3 matrix from lengths and angles.

    Parameters
    ----------
    lengths : sequence of 3 float
        a, b, c (any length unit; the result has the same).
    angles : sequence of 3 float, optional
        alpha (between b and c), beta (a, c), gamma (a, b) in degrees; default 90 each.

    Returns
    -------
    ndarray, shape (3, 3)
        a along x, b in the xy plane (the usual convention of MD engines and MDAnalysis).
    """
    a, b, c = (float(x) for x in lengths)
    if not all(math.isfinite(x) and x > 0 for x in (a, b, c)):
        raise ValueError(f"cell lengths must be positive and finite, got {list(lengths)}")
    al, be, ga = (math.radians(float(x)) for x in (angles or (90.0, 90.0, 90.0)))
    cx = c * math.cos(be)
    cy = c * (math.cos(al) - math.cos(be) * math.cos(ga)) / math.sin(ga)
    cz2 = c * c - cx * cx - cy * cy
    if not cz2 > 0:
        raise ValueError(f"cell angles {list(angles or ())} do not make a 3-D cell")
    h = np.array([[a, 0.0, 0.0],
                  [b * math.cos(ga), b * math.sin(ga), 0.0],
                  [cx, cy, math.sqrt(cz2)]])
    h[np.abs(h) < 1e-14 * max(a, b, c)] = 0.0
    return h


def _as_cell(cell: Any) -> np.ndarray:
    h = np.asarray(cell, dtype=np.float64)
    if h.shape == (3,):
        h = np.diag(h)
    if h.shape != (3, 3) or not np.all(np.isfinite(h)):
        raise ValueError("cell must be three box lengths or a 3 x 3 matrix of cell vectors "
                         "(rows)")
    if not abs(np.linalg.det(h)) > 0:
        raise ValueError("cell vectors are linearly dependent (zero volume)")
    return h


def _int_grid(n: np.ndarray) -> np.ndarray:
    axes = [np.arange(-m, m + 1) for m in n]
    g = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    return g


def _ewald_parts(h: np.ndarray, alpha: float | None, digits: float) -> tuple:
    volume = abs(float(np.linalg.det(h)))
    if alpha is None:
        alpha = math.sqrt(math.pi) / volume ** (1.0 / 3.0)
    recip = np.linalg.inv(h).T  # rows b_i with a_i . b_j = delta_ij
    # erfc(x) < 1e-16 beyond x = 5.9; (1 + y) exp(-y) < 1e-16 beyond y = 41
    r_cut = (digits / 16.0) * 6.0 / alpha
    k_cut = 2.0 * alpha * math.sqrt(41.0 * digits / 16.0)
    n_real = np.ceil(r_cut * np.linalg.norm(recip, axis=1)).astype(int) + 1
    n_recip = np.ceil(k_cut * np.linalg.norm(h, axis=1) / (2 * math.pi)).astype(int) + 1
    return volume, alpha, recip, n_real, n_recip


def _real_kernel(vec: np.ndarray, alpha: float) -> np.ndarray:
    """Sum over rows of `vec` (none zero) of the real-space kernel K, a 3 x 3 tensor."""
    r = np.sqrt(np.einsum("ni,ni->n", vec, vec))
    u = vec / r[:, None]
    e = special.erfc(alpha * r) / (8.0 * math.pi * r)
    g = alpha / (4.0 * math.pi**1.5) * np.exp(-((alpha * r) ** 2))
    return np.eye(3) * float(np.sum(e - g)) + np.einsum("n,ni,nj->ij", e + g, u, u)


def _recip_sum(h_recip_rows: np.ndarray, n_recip: np.ndarray, alpha: float, volume: float,
               r: np.ndarray | None) -> np.ndarray:
    m = _int_grid(n_recip)
    m = m[np.any(m != 0, axis=1)]
    k = 2.0 * math.pi * (m @ h_recip_rows)
    k2 = np.einsum("ni,ni->n", k, k)
    y = k2 / (4.0 * alpha * alpha)
    f = (1.0 + y) * np.exp(-y) / k2
    if r is not None:
        f = f * np.cos(k @ r)
    return (np.eye(3) * float(np.sum(f)) - np.einsum("n,ni,nj->ij", f / k2, k, k)) / volume


def oseen_lattice_sum(cell: Any, *, alpha: float | None = None,
                      digits: float = 16.0) -> np.ndarray:
    """The regularised self term S of the periodic Oseen tensor of a cell.

    ``D_pbc = D_inf + (k_B T / eta) S``: the hydrodynamic self-interaction of a particle
    with its periodic images (net momentum zero). For a cube of side L,
    ``S = -XI_CUBIC / (6 pi L) * identity``.

    Parameters
    ----------
    cell : array_like
        Three box lengths (orthorhombic) or a 3 x 3 matrix whose rows are the cell vectors.
    alpha : float, optional
        Ewald splitting parameter (1/length); the result does not depend on it. Default
        sqrt(pi) / V^(1/3).
    digits : float
        Relative accuracy aimed at, as decimal digits (the cutoffs of both sums scale with
        it).

    Returns
    -------
    ndarray, shape (3, 3)
        S in 1/(length unit of `cell`); symmetric.

    References
    ----------
    Hasimoto, J. Fluid Mech. 5, 317 (1959); Beenakker, J. Chem. Phys. 85, 1581 (1986);
    Kikugawa, Nakano & Ohara, J. Chem. Phys. 143, 024507 (2015).
    """
    h = _as_cell(cell)
    volume, a, recip, n_real, n_recip = _ewald_parts(h, alpha, digits)
    n = _int_grid(n_real)
    n = n[np.any(n != 0, axis=1)]
    s = _real_kernel(n @ h, a)
    s += _recip_sum(recip, n_recip, a, volume, None)
    s -= np.eye(3) * a / (2.0 * math.pi**1.5)
    return 0.5 * (s + s.T)


def periodic_oseen(r: Sequence[float], cell: Any, *, alpha: float | None = None,
                   digits: float = 16.0) -> np.ndarray:
    """The periodic Oseen tensor (times eta) at a displacement `r` that is not a lattice
    vector: the flow at `r` per unit force at the origin and at all its images.

    Parameters
    ----------
    r : sequence of 3 float
        Displacement, in the length unit of `cell`.
    cell : array_like
        As in :func:`oseen_lattice_sum`.
    alpha, digits
        As in :func:`oseen_lattice_sum`.

    Returns
    -------
    ndarray, shape (3, 3)
        ``eta T(r)`` in 1/length (k = 0 left out).
    """
    h = _as_cell(cell)
    rv = np.asarray(r, dtype=np.float64)
    volume, a, recip, n_real, n_recip = _ewald_parts(h, alpha, digits)
    n = _int_grid(n_real + 1)
    vec = rv[None, :] + n @ h
    if np.min(np.einsum("ni,ni->n", vec, vec)) < 1e-24 * volume ** (2.0 / 3.0):
        raise ValueError("r is a lattice vector: use oseen_lattice_sum for the self term")
    return _real_kernel(vec, a) + _recip_sum(recip, n_recip, a, volume, rv)


# ---- the correction ----------------------------------------------------------------------

def yeh_hummer(d_pbc: float, d_stderr: float, viscosity: float, viscosity_stderr: float, *,
               temperature: float, box_length: float,
               boltzmann: float = BOLTZMANN) -> tuple[float, float, float, float]:
    """Yeh–Hummer correction of a cubic box with first-order error propagation.

    ``D_inf = D_pbc + xi k_B T / (6 pi eta L)``, xi = 2.837297. The errors of D_pbc and eta
    are independent; to first order the correction's standard error is
    ``C * s_eta / eta``; temperature and box length are taken as exact.

    Parameters
    ----------
    d_pbc, d_stderr : float
        D in the periodic box and its standard error (m^2/s, or reduced).
    viscosity, viscosity_stderr : float
        Shear viscosity and its standard error (Pa s, or reduced).
    temperature : float
        K (or reduced).
    box_length : float
        Side of the cube (m, or sigma).
    boltzmann : float
        k_B in the same units (J/K; 1 for reduced units).

    Returns
    -------
    (d_inf, d_inf_stderr, correction, correction_stderr) : tuple of float
        In the unit of `d_pbc`.

    References
    ----------
    Yeh & Hummer, J. Phys. Chem. B 108, 15873 (2004).
    """
    if not (viscosity > 0 and box_length > 0 and temperature > 0):
        raise ValueError("viscosity, box length and temperature must be positive")
    corr = XI_CUBIC * boltzmann * temperature / (6.0 * math.pi * viscosity * box_length)
    corr_se = corr * abs(viscosity_stderr) / viscosity
    return d_pbc + corr, math.hypot(d_stderr, corr_se), corr, corr_se


def _is_cubic(h: np.ndarray) -> bool:
    diag = np.diag(h)
    off = h - np.diag(diag)
    return bool(np.max(np.abs(off)) <= 1e-6 * diag.max()
                and np.ptp(diag) <= 1e-6 * diag.max())


def _scales(diffusion_unit: str, viscosity_unit: str, length_unit: str) -> tuple[float, float]:
    """(k_B, factor) with correction[D unit] = factor * k_B T / (eta[unit] * L[unit])."""
    reduced = {is_reduced_unit(diffusion_unit), is_reduced_unit(viscosity_unit),
               length_unit == "sigma"}
    if reduced == {True}:
        return 1.0, 1.0
    if (diffusion_unit, viscosity_unit, length_unit) == ("1e-9 m^2/s", "mPa s", "nm"):
        # J / (1e-3 Pa s * 1e-9 m) = 1e12 m^2/s = 1e21 (1e-9 m^2/s)
        return BOLTZMANN, 1e21
    raise ValueError(
        f"units do not match: D in {diffusion_unit!r}, viscosity in {viscosity_unit!r}, box "
        f"in {length_unit!r} (expected 1e-9 m^2/s, mPa s and nm, or all reduced)")


def correct_diffusion(diffusion: Estimate, viscosity: Estimate | tuple[float, float], *,
                      temperature: float | None = None,
                      cell: Any = None) -> Estimate:
    """D corrected for the periodic box, beside the periodic-box estimate.

    A cubic box gets the Yeh–Hummer correction (``corrected="yeh_hummer"``); any other
    cell the isotropic average of the Oseen lattice sum (``corrected="oseen_lattice_sum"``)
    with the per-axis corrections in the diagnostics.

    Parameters
    ----------
    diffusion : Estimate
        A self-diffusion estimate of :func:`transport.analyse_diffusion` (value in
        1e-9 m^2/s, or reduced), whose diagnostics hold ``box_lengths``, ``box_angles``,
        ``length_unit`` and ``temperature``.
    viscosity : Estimate or (value, stderr)
        Shear viscosity of the same model at the same state point (mPa s, or reduced).
    temperature : float, optional
        K (or reduced); default the diffusion estimate's.
    cell : array_like, optional
        Box lengths or cell matrix (rows) in the diagnostics' length unit; default from the
        diagnostics.

    Returns
    -------
    Estimate
        value = D_pbc + correction; stderr = the two errors in quadrature (first order);
        the 95% interval is the periodic-box interval shifted by the correction, each
        half-width combined in quadrature with 1.96 times the correction's stderr.
        Diagnostics: ``correction``, ``correction_stderr``, ``correction_share``,
        ``xi_effective`` (xi of a cube with the same volume and correction),
        ``correction_per_axis``, ``lattice_sum``, ``viscosity_used``,
        ``viscosity_stderr_used``, ``temperature_used``, ``d_pbc``, ``d_pbc_stderr``.

    Raises
    ------
    ValueError
        Missing box or temperature, units that do not match, a non-positive viscosity.
    """
    d = dict(diffusion.diagnostics)
    if isinstance(viscosity, Estimate):
        eta, eta_se, eta_unit = viscosity.value, viscosity.stderr, viscosity.unit
        eta_from = viscosity.method
    else:
        eta, eta_se = (float(x) for x in viscosity)
        eta_unit = REDUCED_LABEL if is_reduced_unit(diffusion.unit) else "mPa s"
        eta_from = "given"
    if not (math.isfinite(eta) and eta > 0 and math.isfinite(eta_se) and eta_se >= 0):
        raise ValueError(f"viscosity must be positive with a finite stderr >= 0, got "
                         f"{eta} +- {eta_se}")
    temp = temperature if temperature is not None else d.get("temperature")
    if temp is None or not float(temp) > 0:
        raise ValueError("the temperature is unknown: give it (the diffusion result has "
                         "none)")
    temp = float(temp)
    length_unit = d.get("length_unit", "nm")
    if cell is None:
        lengths = d.get("box_lengths")
        if not lengths:
            raise ValueError("the diffusion result has no box: the correction needs the cell")
        cell = cell_matrix(lengths, d.get("box_angles"))
    h = _as_cell(cell)
    kb, factor = _scales(diffusion.unit, eta_unit, length_unit)
    scale = factor * kb * temp / eta  # correction = -scale * S (S in 1/length)
    volume = abs(float(np.linalg.det(h)))
    if _is_cubic(h):
        name = "yeh_hummer"
        s = -np.eye(3) * XI_CUBIC / (6.0 * math.pi * h[0, 0])
    else:
        name = "oseen_lattice_sum"
        s = oseen_lattice_sum(h)
    per_axis = -scale * np.diag(s)
    corr = float(np.mean(per_axis))
    corr_se = corr * eta_se / eta
    value = diffusion.value + corr
    stderr = math.hypot(diffusion.stderr, corr_se)
    lo, hi = diffusion.interval
    half = _Z95 * corr_se
    interval = (value - math.hypot(diffusion.value - lo, half),
                value + math.hypot(hi - diffusion.value, half))
    share = corr / value if value > 0 else float("nan")
    warn = list(diffusion.warnings)
    if eta_se / eta > _FIRST_ORDER_LIMIT:
        warn.append(
            f"the viscosity's relative error ({eta_se / eta:.0%}) is large: the first-order "
            "error of the finite-size correction understates it; a more precise viscosity "
            "or a box-size extrapolation is needed")
    if share > _LARGE_SHARE:
        warn.append(
            f"the finite-size correction is {share:.0%} of the corrected D "
            f"({diffusion.group or 'all'}): the box is small for this liquid, and the "
            "corrected value leans on the hydrodynamic model; check with a larger box")
    d.update(
        correction=corr, correction_stderr=corr_se, correction_share=share,
        correction_per_axis=[float(x) for x in per_axis],
        lattice_sum=[[float(x) for x in row] for row in s],
        lattice_sum_unit=f"1/{length_unit}",
        xi_effective=float(-np.trace(s) / 3.0 * 6.0 * math.pi * volume ** (1.0 / 3.0)),
        viscosity_used=eta, viscosity_stderr_used=eta_se, viscosity_unit=eta_unit,
        viscosity_from=eta_from, temperature_used=temp,
        d_pbc=diffusion.value, d_pbc_stderr=diffusion.stderr,
        finite_size=("corrected: D_inf = D_pbc + xi k_B T/(6 pi eta L) (Yeh & Hummer 2004)"
                     if name == "yeh_hummer" else
                     "corrected: D_inf = D_pbc - (k_B T/eta) tr(S)/3, S the Oseen lattice sum "
                     "of the cell (Kikugawa, Nakano & Ohara 2015)"),
    )
    return replace(diffusion, value=value, stderr=stderr, interval=interval, corrected=name,
                   diagnostics=d, curves={}, warnings=tuple(dict.fromkeys(warn)))


def correct_each(estimates: Sequence[Estimate], viscosity: Estimate | tuple[float, float], *,
                 temperature: float | None = None,
                 methods: Sequence[str] = ("msd_wls",)) -> list[Estimate]:
    """`estimates` with a corrected entry after each periodic-box D of the given methods.

    Parameters
    ----------
    estimates : sequence of Estimate
        Results of :func:`transport.analyse_diffusion` (others pass through unchanged).
    viscosity : Estimate or (value, stderr)
        As in :func:`correct_diffusion`.
    temperature : float, optional
        As in :func:`correct_diffusion`.
    methods : sequence of str
        Which estimates are corrected (default the MSD fit; the VACF cross-check is left
        as it is).

    Returns
    -------
    list of Estimate
    """
    out: list[Estimate] = []
    for e in estimates:
        out.append(e)
        if e.quantity == "self_diffusion" and e.corrected is None and e.method in methods:
            out.append(correct_diffusion(e, viscosity, temperature=temperature))
    return out


# ---- box-size extrapolation --------------------------------------------------------------

@dataclass(frozen=True)
class BoxExtrapolation:
    """Result of :func:`extrapolate_box_size`.

    Attributes
    ----------
    diffusion : Estimate
        D_inf, the intercept of the weighted fit of D_pbc against x = -tr(S)/3 (x = xi /
        (6 pi L) for cubes), method ``box_size_extrapolation``.
    viscosity : Estimate or None
        The viscosity implied by the slope, ``eta = -k_B T / slope``; None when the slope
        is not negative.
    x : ndarray
        The abscissae (1/length), one per box.
    slope, slope_stderr : float
        In D unit x length.
    warnings : tuple of str
    """

    diffusion: Estimate
    viscosity: Estimate | None
    x: np.ndarray
    slope: float
    slope_stderr: float
    warnings: tuple[str, ...] = ()


def _weighted_line(x: np.ndarray, y: np.ndarray, s: np.ndarray) -> tuple:
    w = 1.0 / s**2
    a = np.column_stack([np.ones_like(x), x])
    cov = np.linalg.inv(a.T @ (a * w[:, None]))
    coef = cov @ (a.T @ (w * y))
    chi2 = float(np.sum(w * (y - a @ coef) ** 2))
    return coef, cov, chi2


def extrapolate_box_size(results: Sequence[Estimate], *,
                         green_kubo: Estimate | None = None,
                         temperature: float | None = None) -> BoxExtrapolation:
    """D_inf and the implied viscosity from D measured in boxes of several sizes.

    The periodic-box values obey ``D_pbc = D_inf - (k_B T / eta) x`` with
    ``x = -tr(S)/3`` of each cell (``xi / (6 pi L)`` for cubes, so the fit is linear in
    1/L). A weighted least-squares line (weights 1/stderr^2) gives D_inf as the intercept
    and eta from the slope. With three or more boxes the chi-square of the line is
    checked; when it rejects the line at 5%, the errors are scaled by sqrt(chi^2/dof)
    (Birge). The implied viscosity's interval comes from the slope's interval (eta is
    monotonic in the slope); its stderr is first order.

    Parameters
    ----------
    results : sequence of Estimate
        Periodic-box D (not corrected) of one group in two or more different boxes, with
        ``box_lengths`` (and ``box_angles``), ``length_unit`` and ``temperature`` in their
        diagnostics.
    green_kubo : Estimate, optional
        A viscosity of the same model and state point; a warning when it differs from the
        implied one by more than 1.96 combined standard errors.
    temperature : float, optional
        Overrides the results' temperature (K, or reduced).

    Returns
    -------
    BoxExtrapolation

    References
    ----------
    Yeh & Hummer, J. Phys. Chem. B 108, 15873 (2004) (the extrapolation and the implied
    viscosity).
    """
    if len(results) < 2:
        raise ValueError("box-size extrapolation needs D from at least two box sizes")
    if any(r.corrected for r in results):
        raise ValueError("give periodic-box D values (not corrected ones) to extrapolate")
    units = {r.unit for r in results}
    if len(units) != 1:
        raise ValueError(f"D values in different units: {sorted(units)}")
    unit = units.pop()
    lus = {r.diagnostics.get("length_unit", "nm") for r in results}
    if len(lus) != 1:
        raise ValueError(f"boxes in different length units: {sorted(lus)}")
    length_unit = lus.pop()
    eta_unit = REDUCED_LABEL if is_reduced_unit(unit) else "mPa s"
    kb, factor = _scales(unit, eta_unit, length_unit)
    warn: list[str] = []
    temps = [r.diagnostics.get("temperature") for r in results]
    if temperature is None:
        if any(t is None for t in temps):
            raise ValueError("a result has no temperature: give it")
        temperature = float(np.mean(temps))
        if np.ptp(temps) > 0.01 * temperature:
            warn.append(f"the boxes were run at different temperatures ({min(temps):.4g}-"
                        f"{max(temps):.4g}): the extrapolation assumes one state point")
    x = np.empty(len(results))
    for i, r in enumerate(results):
        lengths = r.diagnostics.get("box_lengths")
        if not lengths:
            raise ValueError(f"result {i + 1} has no box")
        h = cell_matrix(lengths, r.diagnostics.get("box_angles"))
        x[i] = (XI_CUBIC / (6.0 * math.pi * h[0, 0]) if _is_cubic(h)
                else -float(np.trace(oseen_lattice_sum(h))) / 3.0)
    if np.ptp(x) <= 1e-3 * np.max(x):
        raise ValueError("the boxes are all of the same size: nothing to extrapolate")
    y = np.array([r.value for r in results])
    s = np.array([r.stderr for r in results])
    if not np.all(s > 0):
        raise ValueError("every D needs a positive stderr for the weighted fit")
    coef, cov, chi2 = _weighted_line(x, y, s)
    dof = len(x) - 2
    birge = 1.0
    if dof > 0:
        p = float(special.chdtrc(dof, chi2))
        if p < 0.05:
            birge = math.sqrt(chi2 / dof)
            warn.append(f"D(1/L) is not a straight line within the errors (chi2 = "
                        f"{chi2:.3g} for {dof} dof, p = {p:.2g}): the errors of the "
                        f"extrapolation are scaled by {birge:.3g}")
    se = np.sqrt(np.diag(cov)) * birge
    d_inf, slope = float(coef[0]), float(coef[1])
    d_se, slope_se = float(se[0]), float(se[1])
    diag: dict[str, Any] = {
        "x": x.tolist(), "x_unit": f"1/{length_unit}", "d_pbc": y.tolist(),
        "d_pbc_stderr": s.tolist(), "slope": slope, "slope_stderr": slope_se,
        "covariance": (cov * birge**2).tolist(),
        "chi2": chi2 if dof > 0 else None, "dof": dof, "stderr_scale_factor": birge,
        "temperature": temperature, "boxes": len(x),
        "box_lengths": [r.diagnostics.get("box_lengths") for r in results],
        "length_unit": length_unit,
    }
    d_est = Estimate("self_diffusion", "box_size_extrapolation", d_inf, d_se,
                     (d_inf - _Z95 * d_se, d_inf + _Z95 * d_se), unit,
                     group=results[0].group, corrected="box_size_extrapolation",
                     n_independent=float(len(x)), diagnostics=diag,
                     warnings=tuple(warn))
    visc = None
    kt = factor * kb * temperature  # D unit x length unit x eta unit
    if slope < 0:
        eta = -kt / slope
        eta_se = eta * slope_se / abs(slope)
        b_lo, b_hi = slope - _Z95 * slope_se, slope + _Z95 * slope_se
        hi = -kt / b_hi if b_hi < 0 else float("inf")
        if b_hi >= 0:
            warn.append("the slope of D against 1/L is consistent with zero: the implied "
                        "viscosity has no upper bound at 95%")
        visc_diag = {"slope": slope, "slope_stderr": slope_se, "temperature": temperature,
                     "boxes": len(x)}
        visc = Estimate("shear_viscosity", "box_size_extrapolation", eta, eta_se,
                        (-kt / b_lo, hi), eta_unit, n_independent=float(len(x)),
                        diagnostics=visc_diag)
        if green_kubo is not None:
            if green_kubo.unit != eta_unit:
                raise ValueError(f"viscosity in {green_kubo.unit!r}, expected {eta_unit!r}")
            z = abs(eta - green_kubo.value) / math.hypot(eta_se, green_kubo.stderr)
            visc_diag.update(compared_with=green_kubo.method, z=z)
            if z > _Z95:
                warn.append(
                    f"the viscosity implied by the box-size dependence of D ({eta:.3g} +- "
                    f"{eta_se:.2g} {eta_unit}) differs from the {green_kubo.method} "
                    f"viscosity ({green_kubo.value:.3g} +- {green_kubo.stderr:.2g}) by "
                    f"{z:.1f} combined standard errors: the boxes, the runs or the "
                    "hydrodynamic correction are not consistent")
        visc = replace(visc, warnings=tuple(warn))
    else:
        warn.append("D does not increase with box size (slope >= 0): no viscosity is implied "
                    "and the extrapolation is doubtful")
    d_est = replace(d_est, warnings=tuple(warn))
    return BoxExtrapolation(d_est, visc, x, slope, slope_se, tuple(warn))


"""Finite-size corrections of self-diffusion and box-size extrapolation.

Sources of the checks: Yeh & Hummer, J. Phys. Chem. B 108, 15873 (2004) (xi = 2.837297);
Kikugawa, Nakano & Ohara, J. Chem. Phys. 143, 024507 (2015) (the aspect ratio 2.7933596497
at which the in-plane correction vanishes); Hasimoto, J. Fluid Mech. 5, 317 (1959) (drag
coefficients of cubic arrays; the fcc value is quoted from memory, see the test);
Gonzalez & Abascal, J. Chem. Phys. 132, 096101 (2010) (TIP4P/2005 viscosity 0.855 mPa s
at 298 K).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from transport.corrections import (
    XI_CUBIC,
    cell_matrix,
    correct_diffusion,
    correct_each,
    extrapolate_box_size,
    oseen_lattice_sum,
    periodic_oseen,
    yeh_hummer,
)
from transport.estimate import Estimate

# constants typed in from the 2019 SI (exact) for the independent evaluations below
KB = 1.380649e-23  # J/K
NA = 6.02214076e23  # 1/mol
M_WATER = 18.01528e-3  # kg/mol (common practice)


def _d(value: float, stderr: float, box: list[float], *, angles=None, temperature=298.0,
       unit: str = "1e-9 m^2/s", length_unit: str = "nm", group: str = "SOL") -> Estimate:
    return Estimate(
        "self_diffusion", "msd_gls", value, stderr, (value - 1.96 * stderr,
                                                     value + 1.96 * stderr), unit,
        group=group, diagnostics={"box_lengths": box, "box_angles": angles,
                                  "length_unit": length_unit, "temperature": temperature})


def _eta(value: float, stderr: float, unit: str = "mPa s") -> Estimate:
    return Estimate("shear_viscosity", "green_kubo", value, stderr,
                    (value - 2 * stderr, value + 2 * stderr), unit)


# ---- the lattice sum ---------------------------------------------------------------------

def test_cubic_lattice_sum_reproduces_published_xi():
    # Yeh & Hummer (2004): xi = 2.837297 (6 decimals published); the sum is exact to
    # ~1e-12, so agreement is limited by the published rounding (5e-7)
    s = oseen_lattice_sum(np.eye(3) * 2.5)
    xi = -np.trace(s) / 3 * 6 * math.pi * 2.5
    assert xi == pytest.approx(2.837297, abs=6e-7)
    # isotropic: off-diagonal and diagonal spread at rounding level
    assert np.max(np.abs(s - np.eye(3) * s[0, 0])) < 1e-12 * abs(s[0, 0])


def test_lattice_sum_independent_of_splitting_parameter():
    # the Ewald split is exact: the sum must not depend on alpha (rounding level 1e-12)
    h = cell_matrix([3.0, 4.0, 5.5], [80.0, 95.0, 70.0])
    ref = oseen_lattice_sum(h)
    for alpha in (0.4, 0.9):
        assert np.allclose(oseen_lattice_sum(h, alpha=alpha), ref, rtol=0, atol=1e-11)


def test_in_plane_correction_vanishes_at_kikugawa_aspect_ratio():
    # Kikugawa, Nakano & Ohara (2015): for Lz/Lx = Lz/Ly = 2.7933596497 the correction of
    # D_xx (= D_yy) is zero; the root is found to 1e-10 in the ratio
    from scipy.optimize import brentq

    def sxx(ratio: float) -> float:
        return oseen_lattice_sum([1.0, 1.0, ratio])[0, 0]

    assert abs(sxx(2.7933596497)) < 1e-11
    root = brentq(sxx, 2.0, 3.5, xtol=1e-13)
    assert root == pytest.approx(2.7933596497, abs=1e-9)
    # below the ratio the in-plane D is lowered, above it raised; D_zz always lowered
    assert sxx(2.0) < 0 < sxx(3.5)
    assert oseen_lattice_sum([1.0, 1.0, 2.79336])[2, 2] < 0


def test_rhombic_dodecahedron_against_cubic_cell_and_hasimoto():
    """A rhombic dodecahedron box tiles space as an fcc lattice.

    Independent evaluation: the same fcc lattice seen as a cube of side a holding four
    particles (0,0,0), (0,a/2,a/2), (a/2,0,a/2), (a/2,a/2,0): the self term of one particle
    is the cubic lattice sum of side a plus the periodic Oseen tensor of the cube at the
    three other basis sites (the four simple-cubic sublattices add up to the fcc lattice,
    also in reciprocal space, where their k = 0 terms drop out together). This uses the
    cubic cell and pair tensors instead of the triclinic cell's own sums.
    """
    d = 2.0
    # dodecahedron with a square xy face diagonal: a=(d,0,0), b=(0,d,0), c=(d/2,d/2,d/sqrt2)
    h = np.array([[d, 0, 0], [0, d, 0], [d / 2, d / 2, d / math.sqrt(2)]])
    assert np.allclose(h, cell_matrix([d, d, d], [60.0, 60.0, 90.0]), atol=1e-12)
    volume = abs(np.linalg.det(h))  # d^3 / sqrt(2)
    s_dod = oseen_lattice_sum(h)
    a = d * math.sqrt(2)  # conventional fcc cube: nearest neighbours at a/sqrt(2) = d
    cube = np.eye(3) * a
    s_fcc = oseen_lattice_sum(cube) + sum(
        periodic_oseen(b, cube) for b in ([0, a / 2, a / 2], [a / 2, 0, a / 2],
                                          [a / 2, a / 2, 0]))
    assert np.allclose(s_dod, s_fcc, rtol=0, atol=1e-11)
    # cubic symmetry of the fcc lattice: isotropic
    assert np.allclose(s_dod, np.eye(3) * s_dod[0, 0], atol=1e-12)
    xi_dod = -s_dod[0, 0] * 6 * math.pi * volume ** (1 / 3)
    # against the cube of the same volume: 1.80% larger correction
    assert xi_dod / XI_CUBIC == pytest.approx(1.0180, abs=2e-4)
    # Hasimoto (1959), drag of an fcc array: 1.7918 in units of the cube root of the
    # volume fraction (from memory; Sangani & Acrivos 1982 quote the same), i.e.
    # xi = 1.7918 (4 pi/3)^(1/3); tolerance 2e-4 relative for the 4-digit value
    assert xi_dod == pytest.approx(1.7918 * (4 * math.pi / 3) ** (1 / 3), rel=2e-4)


def test_triclinic_cell_invariant_under_choice_of_cell_vectors():
    # the lattice, not its basis, sets the sum: a sheared basis of the same lattice
    h = cell_matrix([2.0, 2.5, 3.0], [85.0, 100.0, 75.0])
    h2 = h.copy()
    h2[2] = h[2] + h[0] - 2 * h[1]  # unimodular change of basis
    assert np.allclose(oseen_lattice_sum(h), oseen_lattice_sum(h2), atol=1e-12)
    # and rotating the cell rotates the tensor: R S R^T
    from scipy.spatial.transform import Rotation

    r = Rotation.from_euler("zyx", [20, 35, -50], degrees=True).as_matrix()
    assert np.allclose(oseen_lattice_sum(h @ r.T), r @ oseen_lattice_sum(h) @ r.T,
                       atol=1e-12)


# ---- the correction of a result ------------------------------------------------------------

def test_tip4p2005_worked_example_against_independent_evaluation():
    # TIP4P/2005 at 298 K, eta = 0.855 mPa s (Gonzalez & Abascal 2010), 997 kg/m^3;
    # independent evaluation of xi k_B T / (6 pi eta L) in plain SI arithmetic here
    expected = {216: 0.3885, 512: 0.2914, 1000: 0.2331}  # 1e-9 m^2/s, computed below
    for n, rounded in expected.items():
        length_m = (n * M_WATER / NA / 997.0) ** (1 / 3)
        corr = 2.837297 * KB * 298.0 / (6 * math.pi * 0.855e-3 * length_m) * 1e9
        assert corr == pytest.approx(rounded, abs=5e-5)  # the 4-digit values above
        d = _d(2.0, 0.02, [length_m * 1e9] * 3)
        c = correct_diffusion(d, _eta(0.855, 0.0))
        assert c.corrected == "yeh_hummer"
        # same formula, same constants up to scipy's k_B (exact): rounding level
        assert c.diagnostics["correction"] == pytest.approx(corr, rel=1e-12)
        assert c.value == pytest.approx(2.0 + corr, rel=1e-12)
        assert c.stderr == pytest.approx(0.02, rel=1e-12)  # exact viscosity: D's error only


def test_lattice_sum_path_agrees_with_yeh_hummer_on_a_cube():
    # a cube given as a 3x3 cell that is cubic goes the Yeh-Hummer way; a cube whose
    # lattice sum is computed (a numerically perturbed box) agrees to 1e-5
    d = _d(2.0, 0.02, [3.0, 3.0, 3.0])
    yh = correct_diffusion(d, _eta(0.855, 0.02))
    lat = correct_diffusion(d, _eta(0.855, 0.02), cell=[3.0, 3.0, 3.0 * (1 + 1e-5)])
    assert lat.corrected == "oseen_lattice_sum"
    assert lat.diagnostics["correction"] == pytest.approx(yh.diagnostics["correction"],
                                                         rel=2e-5)


def test_orthorhombic_per_axis_correction():
    d = _d(2.0, 0.02, [3.0, 3.0, 3.0 * 2.7933596497])
    c = correct_diffusion(d, _eta(0.855, 0.0))
    xx, yy, zz = c.diagnostics["correction_per_axis"]
    assert abs(xx) < 1e-10 and abs(yy) < 1e-10  # Kikugawa et al.'s ratio
    assert zz > 0
    assert c.diagnostics["correction"] == pytest.approx(zz / 3, rel=1e-9)


def test_error_propagation_against_monte_carlo():
    # first order: s_C = C s_eta / eta, added in quadrature to s_D; the exact distribution
    # of D + C(eta) with normal D and eta is sampled; at 5% viscosity error the first-order
    # std differs from the exact one by ~(s/eta)^2 relative (~0.3%); the Monte Carlo std of
    # 4e5 draws is itself uncertain by 0.11%: tolerance 1%
    rng = np.random.default_rng(20260512)
    d0, sd, eta0, seta, temp, box = 2.1, 0.03, 0.855, 0.0428, 298.0, 1.8644
    res = yeh_hummer(d0 * 1e-9, sd * 1e-9, eta0 * 1e-3, seta * 1e-3, temperature=temp,
                     box_length=box * 1e-9)
    n = 400_000
    dd = rng.normal(d0, sd, n) * 1e-9
    ee = rng.normal(eta0, seta, n) * 1e-3
    samples = dd + XI_CUBIC * KB * temp / (6 * math.pi * ee * box * 1e-9)
    assert res[1] == pytest.approx(np.std(samples), rel=0.01)
    assert res[0] == pytest.approx(np.mean(samples), rel=1e-3)  # bias ~ C (s/eta)^2 ~ 5e-4
    # the Estimate path gives the same numbers in reporting units
    c = correct_diffusion(_d(d0, sd, [box] * 3), _eta(eta0, seta))
    assert c.stderr == pytest.approx(res[1] * 1e9, rel=1e-9)
    assert c.diagnostics["correction_stderr"] == pytest.approx(res[3] * 1e9, rel=1e-9)
    # at 30% viscosity error the first order is poor (var(1/eta) grows by 3 (s/eta)^2 and
    # more): a warning says so
    wide = correct_diffusion(_d(d0, sd, [box] * 3), _eta(eta0, 0.3 * eta0))
    assert any("first-order" in w for w in wide.warnings)


def test_interval_is_shifted_and_widened():
    d = Estimate("self_diffusion", "msd_gls", 2.0, 0.02, (1.95, 2.06), "1e-9 m^2/s",
                 diagnostics={"box_lengths": [3.0] * 3, "length_unit": "nm",
                              "temperature": 298.0})
    c = correct_diffusion(d, (0.855, 0.05))
    corr, cse = c.diagnostics["correction"], c.diagnostics["correction_stderr"]
    assert c.interval[0] == pytest.approx(c.value - math.hypot(0.05, 1.96 * cse), rel=1e-3)
    assert c.interval[1] == pytest.approx(c.value + math.hypot(0.06, 1.96 * cse), rel=1e-3)
    assert c.value == pytest.approx(2.0 + corr)


def test_reduced_units_and_unit_mismatch():
    # reduced LJ: k_B = 1, D_inf - D_pbc = xi T / (6 pi eta L)
    d = _d(0.03, 0.001, [10.0] * 3, temperature=0.722, unit="reduced", length_unit="sigma")
    c = correct_diffusion(d, (3.2, 0.1))
    assert c.diagnostics["correction"] == pytest.approx(
        2.837297 * 0.722 / (6 * math.pi * 3.2 * 10.0), rel=1e-12)
    with pytest.raises(ValueError, match="units do not match"):
        correct_diffusion(d, _eta(3.2, 0.1))  # mPa s against reduced D
    with pytest.raises(ValueError, match="temperature"):
        correct_diffusion(_d(2.0, 0.1, [3.0] * 3, temperature=None), (0.8, 0.01))


# ---- box-size extrapolation -------------------------------------------------------------

def _synthetic_boxes(rng, d_inf=2.30, eta=0.855, temp=298.0, sd=0.015):
    lengths = [1.8644, 2.4859, 3.1074, 4.0]
    out = []
    for length in lengths:
        corr = XI_CUBIC * KB * temp / (6 * math.pi * eta * 1e-3 * length * 1e-9) * 1e9
        out.append(_d(d_inf - corr + rng.normal(0, sd), sd, [length] * 3,
                      temperature=temp))
    return out


def test_extrapolation_recovers_known_truth_with_coverage():
    # synthetic D(L) = D_inf - xi kT/(6 pi eta L) + noise: the 95% intervals of D_inf must
    # cover the truth in ~95% of 400 draws (binomial sd 1.1%: accept 0.92-0.98); eta too
    rng = np.random.default_rng(7)
    hit_d = hit_eta = 0
    n = 400
    for _ in range(n):
        ext = extrapolate_box_size(_synthetic_boxes(rng))
        lo, hi = ext.diffusion.interval
        hit_d += lo <= 2.30 <= hi
        lo, hi = ext.viscosity.interval
        hit_eta += lo <= 0.855 <= hi
    assert 0.92 <= hit_d / n <= 0.98
    assert 0.92 <= hit_eta / n <= 0.98
    # one draw in detail: the values are close to the truth within their errors
    ext = extrapolate_box_size(_synthetic_boxes(np.random.default_rng(3)))
    assert abs(ext.diffusion.value - 2.30) < 4 * ext.diffusion.stderr
    assert abs(ext.viscosity.value - 0.855) < 4 * ext.viscosity.stderr
    assert ext.diffusion.method == "box_size_extrapolation"


def test_extrapolation_exact_data_and_viscosity_check():
    # noise-free D(L): intercept and implied viscosity exact to rounding
    rng = np.random.default_rng(0)
    exact = [_d(r.value, r.stderr, r.diagnostics["box_lengths"])
             for r in _synthetic_boxes(rng, sd=1e-9)]
    ext = extrapolate_box_size(exact, green_kubo=_eta(0.855, 0.02))
    assert ext.diffusion.value == pytest.approx(2.30, abs=1e-7)
    assert ext.viscosity.value == pytest.approx(0.855, rel=1e-6)
    assert not ext.warnings
    # a Green-Kubo viscosity far off (1.5 mPa s +- 0.02) is flagged
    bad = extrapolate_box_size(exact, green_kubo=_eta(1.5, 0.02))
    assert any("differs from the green_kubo viscosity" in w for w in bad.warnings)


def test_extrapolation_refuses_and_warns():
    rng = np.random.default_rng(1)
    boxes = _synthetic_boxes(rng)
    with pytest.raises(ValueError, match="at least two"):
        extrapolate_box_size(boxes[:1])
    with pytest.raises(ValueError, match="same size"):
        extrapolate_box_size([boxes[0], boxes[0]])
    # D falling with box size: no viscosity implied, a warning
    flipped = [_d(2.0 + 0.1 * i, 0.01, b.diagnostics["box_lengths"])
               for i, b in enumerate(reversed(boxes))]
    ext = extrapolate_box_size(flipped)
    assert ext.viscosity is None
    assert any("does not increase" in w for w in ext.warnings)


def test_correct_each_puts_corrected_entries_beside_the_periodic_ones():
    d1 = _d(2.0, 0.02, [3.0] * 3, group="A")
    d2 = _d(1.0, 0.01, [3.0] * 3, group="B")
    vacf = Estimate("self_diffusion", "vacf", 2.1, 0.1, (1.9, 2.3), "1e-9 m^2/s", group="A")
    out = correct_each([d1, vacf, d2], _eta(0.855, 0.02))
    assert [(e.group, e.method, e.corrected) for e in out] == [
        ("A", "msd_gls", None), ("A", "msd_gls", "yeh_hummer"), ("A", "vacf", None),
        ("B", "msd_gls", None), ("B", "msd_gls", "yeh_hummer")]
    # the same correction for both species (it does not depend on the particle)
    assert out[1].value - 2.0 == pytest.approx(out[4].value - 1.0, rel=1e-12)


def test_cell_matrix_matches_mdanalysis():
    # reference library: MDAnalysis's triclinic_vectors (same convention: a along x, b in xy)
    from MDAnalysis.lib.mdamath import triclinic_vectors

    for dims in ([3.0, 4.0, 5.0, 90, 90, 90], [4.0, 4.0, 4.0, 60, 60, 90],
                 [3.0, 4.5, 5.5, 80, 95, 70]):
        ref = triclinic_vectors(np.array(dims, dtype=np.float32)).astype(float)
        # float32 inside MDAnalysis: agreement to ~1e-6 relative
        assert np.allclose(cell_matrix(dims[:3], dims[3:]), ref, rtol=0, atol=5e-6 * 5.5)


def test_dodecahedron_result_from_diagnostics():
    # a diffusion result in a rhombic dodecahedron (angles as the reader records them)
    d = _d(2.0, 0.02, [4.0, 4.0, 4.0], angles=[60.0, 60.0, 90.0])
    c = correct_diffusion(d, _eta(0.855, 0.02))
    assert c.corrected == "oseen_lattice_sum"
    assert c.diagnostics["xi_effective"] == pytest.approx(2.888282, abs=2e-6)
    # same volume cube: volume d^3/sqrt(2) -> the correction is 1.0180x the cube's
    cube = correct_diffusion(_d(2.0, 0.02, [4.0 / 2 ** (1 / 6)] * 3), _eta(0.855, 0.02))
    ratio = c.diagnostics["correction"] / cube.diagnostics["correction"]
    assert ratio == pytest.approx(1.0180, abs=2e-4)

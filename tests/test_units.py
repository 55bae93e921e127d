"""Unit systems: conversion factors against their defining sources.

Every expected number below is typed from the definition it comes from, not taken from
scipy (which units.py uses), so these tests check units.py against an outside source.
"""

from __future__ import annotations

import math

import pytest

from transport.units import BOLTZMANN, UNIT_SYSTEMS, UnitSystem, get_unit_system

# SI Brochure, 9th ed. (BIPM 2019), defining constants (exact):
N_A = 6.02214076e23  # mol^-1
K_B = 1.380649e-23  # J/K (also CODATA 2018, exact)
E_CHARGE = 1.602176634e-19  # C, so 1 eV = 1.602176634e-19 J exactly

REL = 1e-15  # the factors are products of exact decimals: agreement to rounding


def close(a: float, b: float) -> bool:
    return math.isclose(a, b, rel_tol=REL, abs_tol=0.0)


def test_boltzmann_is_the_exact_si_value():
    # SI Brochure 2019 / CODATA 2018: k_B = 1.380649e-23 J/K exactly.
    assert BOLTZMANN == K_B


def test_real_units():
    u = get_unit_system("real")
    # 1 atm = 101325 Pa exactly (standard atmosphere, defined in the SI Brochure's
    # table of non-SI units; also NIST SP 811).
    assert u.pressure == 101325.0
    assert u.time == 1e-15  # fs
    assert u.length == 1e-10  # 1 Angstrom = 1e-10 m (SI Brochure, non-SI units table)
    # kcal/mol with the thermochemical calorie: 1 cal = 4.184 J exactly (NIST SP 811).
    assert close(u.energy, 4184.0 / N_A)
    # Mass in g/mol per particle. units.py uses the dalton (atomic mass constant); since the
    # 2019 SI the molar mass constant M_u is no longer exactly 1 g/mol (CODATA 2022, from
    # memory: M_u = 1.00000000105(31) g/mol), so the dalton and (1 g/mol)/N_A differ by
    # about 1e-9 relative: compare at 2e-9.
    assert math.isclose(u.mass, 1e-3 / N_A, rel_tol=2e-9)
    assert (u.pressure_label, u.time_label, u.length_label) == ("atm", "fs", "Angstrom")


def test_metal_units():
    u = get_unit_system("metal")
    assert u.pressure == 1e5  # 1 bar = 1e5 Pa exactly (SI Brochure, non-SI units table)
    assert u.time == 1e-12  # ps
    assert u.length == 1e-10
    assert close(u.energy, E_CHARGE)  # 1 eV


def test_gromacs_units_nm_ps_bar():
    u = get_unit_system("gromacs")
    assert u.pressure == 1e5
    assert u.time == 1e-12
    assert u.length == 1e-9
    assert close(u.volume, 1e-27)  # nm^3 -> m^3
    assert close(u.energy, 1000.0 / N_A)  # kJ/mol
    # the energy-file convention is also reachable by its informal names
    assert get_unit_system("nm/ps/bar") is u
    assert get_unit_system("GMX") is u


def test_cgs_and_si():
    cgs = get_unit_system("cgs")
    assert cgs.pressure == 0.1  # 1 dyne/cm^2 = 1e-5 N / 1e-4 m^2 = 0.1 Pa
    assert cgs.length == 1e-2
    assert cgs.energy == 1e-7  # erg
    si = get_unit_system("si")
    assert (si.pressure, si.time, si.length, si.energy, si.mass) == (1.0, 1.0, 1.0, 1.0, 1.0)


def test_reduced_lj_units_stay_reduced():
    u = get_unit_system("lj")
    assert u.reduced
    assert (u.pressure, u.time, u.length, u.volume) == (1.0, 1.0, 1.0, 1.0)
    assert u.boltzmann == 1.0  # k_B = 1 in reduced units (common practice)
    assert u.viscosity_unit == "reduced (lj)" and u.viscosity_scale == 1.0


def test_reported_units_for_si_systems():
    u = get_unit_system("real")
    assert u.boltzmann == K_B
    assert u.viscosity_unit == "mPa s" and u.viscosity_scale == 1e3  # Pa s -> mPa s
    assert u.diffusion_scale == 1e9  # m^2/s -> 1e-9 m^2/s
    assert u.time_unit == "ps" and u.time_scale == 1e12


@pytest.mark.parametrize("name", sorted(UNIT_SYSTEMS))
def test_volume_is_length_cubed(name):
    u = get_unit_system(name)
    assert close(u.volume, u.length**3)


def test_lookup_is_case_insensitive_and_passes_unit_systems_through():
    assert get_unit_system(" REAL ") is UNIT_SYSTEMS["real"]
    u = UNIT_SYSTEMS["metal"]
    assert get_unit_system(u) is u
    assert isinstance(u, UnitSystem)


def test_unknown_unit_system_lists_the_known_ones():
    with pytest.raises(ValueError, match="expected one of: cgs, electron"):
        get_unit_system("furlongs")


@pytest.mark.parametrize("name", ["si", "cgs", "micro", "nano"])
def test_mass_length_time_systems_are_consistent(name):
    # Dimensional identities (the engine's unit styles define these systems by their mass,
    # length and time units): pressure = M L^-1 T^-2 and energy = M L^2 T^-2.
    u = get_unit_system(name)
    assert close(u.pressure, u.mass / (u.length * u.time**2))
    assert close(u.energy, u.mass * u.length**2 / u.time**2)

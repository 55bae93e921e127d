"""Unit systems of MD engines and conversion to SI at the boundary.

Readers convert every quantity to SI (Pa, s, m, m^3, K, kg, J) on entry, except reduced
Lennard-Jones units, which stay reduced (k_B = 1). Everything downstream of the readers
works in the internal units of the series' :class:`UnitSystem` (SI or reduced) and never
guesses a unit.

Results are reported in the usual units of the trade: viscosity in mPa s (= cP),
self-diffusion in 1e-9 m^2/s, times in ps; reduced input is reported in reduced units.

References
----------
.. [1] BIPM, *The International System of Units (SI)*, 9th ed. (2019): exact values of
   k_B, N_A, and the defining constants.
.. [2] CODATA 2018 recommended values (via :mod:`scipy.constants`).
.. [3] The unit-style conventions of the engine logs (``units real``: atm, fs, Angstrom,
   kcal/mol; ``units metal``: bar, ps, Angstrom, eV; ...) are common practice and are stated
   in each engine's manual.
"""

from __future__ import annotations

from dataclasses import dataclass

from scipy import constants as _c

__all__ = [
    "BOLTZMANN",
    "UNIT_SYSTEMS",
    "UnitSystem",
    "get_unit_system",
]

#: Boltzmann constant in J/K (exact since the 2019 SI redefinition).
BOLTZMANN: float = _c.k
_ATM = _c.atm  # 101325 Pa, exact by definition
_BAR = _c.bar  # 1e5 Pa, exact
_ANGSTROM = _c.angstrom
_FS = _c.femto
_PS = _c.pico
_KCAL_MOL = _c.kilo * _c.calorie / _c.N_A  # thermochemical calorie, 4.184 J exact
_EV = _c.electron_volt
_KJ_MOL = _c.kilo / _c.N_A
_AMU = _c.atomic_mass  # g/mol -> kg per particle
_BOHR = _c.physical_constants["Bohr radius"][0]


@dataclass(frozen=True)
class UnitSystem:
    """An engine's unit convention and its factors to internal units.

    Multiplying a value in engine units by a factor gives internal units: SI for every
    system except ``lj``, whose internal units are the reduced ones (all factors 1).

    Attributes
    ----------
    name : str
        Name of the convention (``real``, ``metal``, ``lj``, ``si``, ``cgs``, ``electron``,
        ``micro``, ``nano``, ``gromacs``).
    pressure : float
        Pa per engine pressure unit.
    time : float
        s per engine time unit.
    length : float
        m per engine length unit.
    energy : float
        J per engine energy unit.
    mass : float
        kg per engine mass unit (per particle).
    reduced : bool
        True for reduced Lennard-Jones units (k_B = 1, no conversion).
    pressure_label, time_label, length_label : str
        How the engine's own units are written, for messages.
    """

    name: str
    pressure: float
    time: float
    length: float
    energy: float
    mass: float
    reduced: bool = False
    pressure_label: str = ""
    time_label: str = ""
    length_label: str = ""

    @property
    def volume(self) -> float:
        """m^3 per engine volume unit."""
        return self.length**3

    @property
    def boltzmann(self) -> float:
        """k_B in internal units: J/K, or 1 for reduced units."""
        return 1.0 if self.reduced else BOLTZMANN

    # ---- units in which results are reported -------------------------------------------
    @property
    def viscosity_unit(self) -> str:
        """Unit label for reported viscosity."""
        return REDUCED_LABEL if self.reduced else "mPa s"

    @property
    def viscosity_scale(self) -> float:
        """Factor from internal viscosity (Pa s, or reduced) to the reported unit."""
        return 1.0 if self.reduced else 1e3

    @property
    def diffusion_unit(self) -> str:
        """Unit label for reported self-diffusion."""
        return REDUCED_LABEL if self.reduced else "1e-9 m^2/s"

    @property
    def diffusion_scale(self) -> float:
        """Factor from internal diffusion (m^2/s, or reduced) to the reported unit."""
        return 1.0 if self.reduced else 1e9

    @property
    def time_unit(self) -> str:
        """Unit label for reported times (windows, cutoffs)."""
        return "tau" if self.reduced else "ps"

    @property
    def time_scale(self) -> float:
        """Factor from internal time (s, or reduced) to the reported time unit."""
        return 1.0 if self.reduced else 1e12


#: Unit label of results in reduced Lennard-Jones units.
REDUCED_LABEL = "reduced (lj)"
#: Labels that mean reduced units (results saved before the label named the system said
#: "reduced").
REDUCED_LABELS = frozenset({REDUCED_LABEL, "reduced"})


def is_reduced_unit(label: str) -> bool:
    """True if a result's unit label means reduced Lennard-Jones units."""
    return label in REDUCED_LABELS


_SI = dict(pressure=1.0, time=1.0, length=1.0, energy=1.0, mass=1.0)

UNIT_SYSTEMS: dict[str, UnitSystem] = {
    u.name: u
    for u in (
        UnitSystem("real", _ATM, _FS, _ANGSTROM, _KCAL_MOL, _AMU,
                   pressure_label="atm", time_label="fs", length_label="Angstrom"),
        UnitSystem("metal", _BAR, _PS, _ANGSTROM, _EV, _AMU,
                   pressure_label="bar", time_label="ps", length_label="Angstrom"),
        UnitSystem("si", **_SI, pressure_label="Pa", time_label="s", length_label="m"),
        # cgs: dyne/cm^2 = 0.1 Pa, s, cm, erg = 1e-7 J, g
        UnitSystem("cgs", 0.1, 1.0, 1e-2, 1e-7, 1e-3,
                   pressure_label="dyne/cm^2", time_label="s", length_label="cm"),
        # electron: Pa, fs, Bohr, Hartree, amu
        UnitSystem("electron", 1.0, _FS, _BOHR, _c.physical_constants["Hartree energy"][0],
                   _AMU, pressure_label="Pa", time_label="fs", length_label="Bohr"),
        # micro: picogram/(micrometer microsecond^2) = 1e-15 kg / (1e-6 m 1e-12 s^2) = 1e3 Pa
        UnitSystem("micro", 1e3, 1e-6, 1e-6, 1e-15 * 1e-12 / 1e-12, 1e-15,
                   pressure_label="pg/(um us^2)", time_label="us", length_label="um"),
        # nano: attogram/(nm ns^2) = 1e-21 kg / (1e-9 m 1e-18 s^2) = 1e6 Pa
        UnitSystem("nano", 1e6, 1e-9, 1e-9, 1e-21, 1e-21,
                   pressure_label="ag/(nm ns^2)", time_label="ns", length_label="nm"),
        # energy files written with nm, ps, bar, kJ/mol
        UnitSystem("gromacs", _BAR, _PS, _c.nano, _KJ_MOL, _AMU,
                   pressure_label="bar", time_label="ps", length_label="nm"),
        UnitSystem("lj", 1.0, 1.0, 1.0, 1.0, 1.0, reduced=True,
                   pressure_label="eps/sigma^3", time_label="tau", length_label="sigma"),
    )
}


def get_unit_system(name: str | UnitSystem) -> UnitSystem:
    """Return the :class:`UnitSystem` called `name` (case-insensitive).

    Parameters
    ----------
    name : str or UnitSystem
        One of :data:`UNIT_SYSTEMS`, or a UnitSystem (returned unchanged).

    Raises
    ------
    ValueError
        If the name is unknown; the message lists the known names.
    """
    if isinstance(name, UnitSystem):
        return name
    key = str(name).strip().lower()
    if key in ("nm-ps-bar", "nm/ps/bar", "gmx"):
        key = "gromacs"
    try:
        return UNIT_SYSTEMS[key]
    except KeyError:
        known = ", ".join(sorted(UNIT_SYSTEMS))
        raise ValueError(f"unknown unit system {name!r}; expected one of: {known}") from None

"""transport: shear viscosity and self-diffusion from molecular-dynamics runs.

The public API (everything else is private):

Readers (``transport.io``)
    read_table, load_stress, load_stress_many, load_trajectory
Containers and results
    StressSeries, PositionSeries, Source, Estimate, UnitSystem, get_unit_system
Estimators
    green_kubo, einstein, analyse_viscosity            shear viscosity
    analyse_diffusion, msd_diffusion, vacf_diffusion   self-diffusion
    mean_with_error                                    honest mean of any series
Errors
    InputError, RunTooShortError

Statistics without physics live in :mod:`transport.stats`.
"""

from .diffusion import DiffusionAnalysis, analyse_diffusion, msd_diffusion, vacf_diffusion
from .errors import InputError, RunTooShortError
from .estimate import Estimate
from .io import load_stress, load_stress_many, read_table
from .io.trajectory import load_trajectory
from .series import PositionSeries, Source, StressSeries
from .stats import mean_with_error
from .units import UNIT_SYSTEMS, UnitSystem, get_unit_system
from .viscosity import ViscosityAnalysis, analyse_viscosity, einstein, green_kubo

__version__ = "0.1.0"

__all__ = [
    "UNIT_SYSTEMS",
    "DiffusionAnalysis",
    "Estimate",
    "InputError",
    "PositionSeries",
    "RunTooShortError",
    "Source",
    "StressSeries",
    "UnitSystem",
    "ViscosityAnalysis",
    "__version__",
    "analyse_diffusion",
    "analyse_viscosity",
    "einstein",
    "get_unit_system",
    "green_kubo",
    "load_stress",
    "load_stress_many",
    "load_trajectory",
    "mean_with_error",
    "msd_diffusion",
    "read_table",
    "vacf_diffusion",
]

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
Corrections (pure functions of results)
    correct_diffusion, extrapolate_box_size            finite-size correction of D
Errors
    InputError, RunTooShortError

Statistics without physics live in :mod:`transport.stats`.

Names are imported on first use (PEP 562), so that ``import transport`` and the command
line start quickly; ``from transport import green_kubo`` works as usual.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from ._lazy import lazy_names

__version__ = "0.1.0"

_WHERE: dict[str, str] = {
    "correct_diffusion": "corrections",
    "extrapolate_box_size": "corrections",
    "DiffusionAnalysis": "diffusion",
    "analyse_diffusion": "diffusion",
    "msd_diffusion": "diffusion",
    "vacf_diffusion": "diffusion",
    "InputError": "errors",
    "RunTooShortError": "errors",
    "Estimate": "estimate",
    "load_stress": "io",
    "load_stress_many": "io",
    "read_table": "io",
    "load_trajectory": "io.trajectory",
    "PositionSeries": "series",
    "Source": "series",
    "StressSeries": "series",
    "mean_with_error": "stats",
    "UNIT_SYSTEMS": "units",
    "UnitSystem": "units",
    "get_unit_system": "units",
    "ViscosityAnalysis": "viscosity",
    "analyse_viscosity": "viscosity",
    "einstein": "viscosity",
    "green_kubo": "viscosity",
}

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
    "correct_diffusion",
    "einstein",
    "extrapolate_box_size",
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


__getattr__, __dir__ = lazy_names(__name__, globals(), _WHERE, __all__)


if TYPE_CHECKING:  # pragma: no cover - for type checkers and editors
    from .corrections import correct_diffusion, extrapolate_box_size
    from .diffusion import DiffusionAnalysis, analyse_diffusion, msd_diffusion, vacf_diffusion
    from .errors import InputError, RunTooShortError
    from .estimate import Estimate
    from .io import load_stress, load_stress_many, read_table
    from .io.trajectory import load_trajectory
    from .series import PositionSeries, Source, StressSeries
    from .stats import mean_with_error
    from .units import UNIT_SYSTEMS, UnitSystem, get_unit_system
    from .viscosity import ViscosityAnalysis, analyse_viscosity, einstein, green_kubo

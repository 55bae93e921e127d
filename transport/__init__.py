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
Run-length verdicts
    viscosity_verdicts, diffusion_verdicts             is the run long enough for a target?
    run_verdict, Verdict                               the pure judgement on given results
Corrections (pure functions of results)
    correct_diffusion, extrapolate_box_size            finite-size correction of D
Comparison of candidates (pure functions of results)
    pool_replicas                                      replicas -> one estimate
    Reference, deviation_from_reference -> Deviation   against experiment
    pairwise_differences -> Difference, holm_adjust    z / Welch t tests, Holm
    rank_candidates -> Ranking                         order and P(closest)
    estimate_dof                                       dof of an error bar
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
    "Verdict": "convergence",
    "run_verdict": "convergence",
    "Deviation": "compare",
    "Difference": "compare",
    "Ranking": "compare",
    "Reference": "compare",
    "deviation_from_reference": "compare",
    "estimate_dof": "compare",
    "holm_adjust": "compare",
    "pairwise_differences": "compare",
    "pool_replicas": "compare",
    "rank_candidates": "compare",
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
    "diffusion_verdicts": "run_length",
    "viscosity_verdicts": "run_length",
    "ViscosityAnalysis": "viscosity",
    "analyse_viscosity": "viscosity",
    "einstein": "viscosity",
    "green_kubo": "viscosity",
}

__all__ = [
    "UNIT_SYSTEMS",
    "Deviation",
    "Difference",
    "DiffusionAnalysis",
    "Estimate",
    "InputError",
    "PositionSeries",
    "Ranking",
    "Reference",
    "RunTooShortError",
    "Source",
    "StressSeries",
    "UnitSystem",
    "Verdict",
    "ViscosityAnalysis",
    "__version__",
    "analyse_diffusion",
    "analyse_viscosity",
    "correct_diffusion",
    "deviation_from_reference",
    "diffusion_verdicts",
    "einstein",
    "estimate_dof",
    "extrapolate_box_size",
    "get_unit_system",
    "green_kubo",
    "holm_adjust",
    "load_stress",
    "load_stress_many",
    "load_trajectory",
    "mean_with_error",
    "msd_diffusion",
    "pairwise_differences",
    "pool_replicas",
    "rank_candidates",
    "read_table",
    "run_verdict",
    "vacf_diffusion",
    "viscosity_verdicts",
]


__getattr__, __dir__ = lazy_names(__name__, globals(), _WHERE, __all__)


if TYPE_CHECKING:  # pragma: no cover - for type checkers and editors
    from .compare import (
        Deviation,
        Difference,
        Ranking,
        Reference,
        deviation_from_reference,
        estimate_dof,
        holm_adjust,
        pairwise_differences,
        pool_replicas,
        rank_candidates,
    )
    from .convergence import Verdict, run_verdict
    from .corrections import correct_diffusion, extrapolate_box_size
    from .diffusion import DiffusionAnalysis, analyse_diffusion, msd_diffusion, vacf_diffusion
    from .errors import InputError, RunTooShortError
    from .estimate import Estimate
    from .io import load_stress, load_stress_many, read_table
    from .io.trajectory import load_trajectory
    from .run_length import diffusion_verdicts, viscosity_verdicts
    from .series import PositionSeries, Source, StressSeries
    from .stats import mean_with_error
    from .units import UNIT_SYSTEMS, UnitSystem, get_unit_system
    from .viscosity import ViscosityAnalysis, analyse_viscosity, einstein, green_kubo

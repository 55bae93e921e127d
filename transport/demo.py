"""The invented demo scenario: a fictional lubricant base oil and two candidate potentials.

Scenario (entirely made up, with known truth): the base oil "Corvane-9" at 373 K is
simulated with two candidate interatomic potentials, a fitted classical force field
("model A") and a machine-learned potential ("model B"). Each model has four independent
replicas of 1 ns whose pressure-tensor fluctuations are synthetic (sums of
Ornstein–Uhlenbeck modes, :mod:`transport.synthetic`) with an exactly known Green–Kubo
viscosity. The data are written as thermo logs in the ``real`` unit convention (atm, fs,
Angstrom), so that the demo exercises the readers, unit conversion, the estimators and the
reports exactly as on real engine output. A fictional "experimental" viscosity is given for
the comparison.

A diffusion step follows: Corvane-9 molecules and a dissolved anti-wear additive, one bead
per molecule moving as independent Brownian particles with known self-diffusion coefficients,
written as a wrapped XTC trajectory with a PDB topology and analysed per species.

Each run of the demo is one draw: a 95% interval misses the truth in one case in twenty
(the tests check the coverage over hundreds of seeds); ``--seed`` draws another scenario.

The demo builds on the library (not on the command line); ``transport demo`` calls
:func:`run_demo`.
"""

from __future__ import annotations

import gzip
import math
import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .estimate import Estimate
from .synthetic import OUStressModel
from .units import BOLTZMANN, UNIT_SYSTEMS

__all__ = ["SCENARIO", "DemoModel", "run_demo", "write_thermo_log"]

_REAL = UNIT_SYSTEMS["real"]


@dataclass(frozen=True)
class DemoModel:
    """One candidate potential of the scenario, with its true viscosity."""

    name: str
    label: str
    viscosity_mpas: float  # true Green–Kubo viscosity, mPa s
    times_ps: tuple[float, float]  # fast and slow stress relaxation times, ps
    fractions: tuple[float, float]  # share of the viscosity in each mode
    pressure_atm: float  # mean pressure, atm
    viscosity_hot_mpas: float = float("nan")  # true viscosity at the second temperature


@dataclass(frozen=True)
class Scenario:
    """The whole invented scenario."""

    liquid: str
    temperature: float  # K
    box_length: float  # Angstrom (cubic box)
    timestep_fs: float
    thermo_every: int
    steps_per_replica: int
    replicas: int
    experiment_mpas: float  # fictional measured viscosity
    experiment_uncertainty_mpas: float
    models: tuple[DemoModel, ...]
    #: the fast intramolecular part of a flexible molecule's stress: a damped oscillation
    #: (bond stretching) of this period (fs) and damping time (ps), whose variance is this
    #: many times that of the slow modes; it carries a small share of the integral, which is
    #: taken from the slow modes so that the true viscosity stays the model's
    vibration_period_fs: float = 35.0
    vibration_damping_ps: float = 0.2
    vibration_variance_ratio: float = 20.0
    #: the comparison's second state point: temperature (K), a fictional measurement
    #: (mPa s) and shorter runs (steps per replica, replicas) of each model there
    hot_temperature: float = 413.15
    hot_experiment_mpas: float = 2.9
    hot_experiment_uncertainty_mpas: float = 0.07
    hot_steps_per_replica: int = 250_000
    hot_replicas: int = 2


SCENARIO = Scenario(
    liquid="Corvane-9 (fictional lubricant base oil)",
    temperature=373.15,
    box_length=45.0,
    timestep_fs=1.0,
    thermo_every=4,
    steps_per_replica=1_000_000,
    replicas=4,
    experiment_mpas=5.1,
    experiment_uncertainty_mpas=0.1,
    models=(
        DemoModel("model_a", "model A (fitted classical force field)", 6.2, (0.08, 1.2),
                  (0.35, 0.65), 1.0, 3.6),
        DemoModel("model_b", "model B (machine-learned potential)", 4.9, (0.06, 1.0),
                  (0.40, 0.60), 1.0, 2.8),
    ),
)


def write_thermo_log(
    path: Path,
    pressure_atm: np.ndarray,
    *,
    temperature: np.ndarray,
    volume: float,
    timestep_fs: float,
    thermo_every: int,
    equilibration_rows: int = 50,
) -> None:
    """Write a thermo log (``real`` units) holding an equilibration and a production block.

    Parameters
    ----------
    path : Path
        Output file; ``.gz`` compresses.
    pressure_atm : ndarray, shape (6, n)
        Pressure tensor (atm) of the production block.
    temperature : ndarray, shape (n,)
        Instantaneous temperature (K).
    volume : float
        Box volume (Angstrom^3).
    timestep_fs : float
        Integration time step (fs).
    thermo_every : int
        Steps between rows.
    equilibration_rows : int
        Rows of a short equilibration block (step, temp, press only) written first.
    """
    n = pressure_atm.shape[1]
    def opener(p: Path, mode: str, encoding: str):
        if path.suffix == ".gz":
            return gzip.open(p, mode, encoding=encoding, compresslevel=1)
        return open(p, mode, encoding=encoding)

    press = pressure_atm[:3].mean(axis=0)
    lines = [
        "demo engine log (synthetic data of the transport demo scenario)",
        "units real",
        "atom_style full",
        f"timestep {timestep_fs:g}",
        "thermo_style custom step temp press",
        f"thermo {thermo_every}",
        f"run {equilibration_rows * thermo_every}",
        "Step Temp Press",
    ]
    steps_eq = np.arange(equilibration_rows) * thermo_every
    rng = np.random.default_rng(0)
    eq = np.column_stack([steps_eq, temperature[:equilibration_rows] + 5.0,
                          press[:equilibration_rows] + rng.normal(0, 50, equilibration_rows)])
    body_eq = "\n".join(f"{int(s):10d} {t:12.6f} {p:14.6f}" for s, t, p in eq)
    start = equilibration_rows * thermo_every
    header2 = [
        f"Loop time of 1.0 on 1 procs for {equilibration_rows * thermo_every} steps",
        "",
        "thermo_style custom step temp press pxx pyy pzz pxy pxz pyz vol",
        f"run {n * thermo_every}",
        "Step Temp Press Pxx Pyy Pzz Pxy Pxz Pyz Volume",
    ]
    steps = start + np.arange(n, dtype=np.int64) * thermo_every
    table = np.column_stack([temperature, press, pressure_atm.T, np.full(n, volume)])
    import pandas as pd

    frame = pd.DataFrame(table)
    frame.insert(0, "step", steps)
    body = frame.to_csv(sep=" ", header=False, index=False, float_format="%.6f",
                        lineterminator="\n")
    tmp = path.with_name(f".{path.name}.tmp")
    with opener(tmp, "wt", encoding="utf-8") as fh:
        fh.write("\n".join(lines) + "\n" + body_eq + "\n" + "\n".join(header2) + "\n")
        fh.write(body)
        fh.write(f"Loop time of 10.0 on 1 procs for {n * thermo_every} steps\n")
    os.replace(tmp, path)


def _stress_model(m: DemoModel, scenario: Scenario, volume_m3: float, kT: float
                  ) -> OUStressModel:
    """Two-time-scale stress of a flexible molecular liquid with the model's viscosity.

    Two relaxation modes (fast and slow, `m.times_ps`, `m.fractions`) carry the viscosity;
    a damped oscillation (the bond vibrations) dominates the variance but, oscillating,
    adds only s^2 tau / (1 + omega^2 tau^2) to the integral; that share is taken from the
    relaxation modes, so the Green–Kubo integral is exactly `m.viscosity_mpas`.
    """
    eta = m.viscosity_mpas * 1e-3
    times = [t * 1e-12 for t in m.times_ps]
    kw = {"mean_pressure": m.pressure_atm * _REAL.pressure,
          "pressure_noise": 20.0 * _REAL.pressure}
    base = OUStressModel.for_viscosity(eta, volume_m3, kT, times=times, fractions=m.fractions)
    s_vib = math.sqrt(scenario.vibration_variance_ratio * sum(a * a for a in base.amplitudes))
    tau_vib = scenario.vibration_damping_ps * 1e-12
    omega = 2.0 * math.pi / (scenario.vibration_period_fs * 1e-15)
    share = s_vib**2 * tau_vib / (1.0 + (omega * tau_vib) ** 2) / base.integral()
    slow = OUStressModel.for_viscosity(eta * (1.0 - share), volume_m3, kT, times=times,
                                       fractions=m.fractions)
    return OUStressModel((*slow.amplitudes, s_vib), (*slow.times, tau_vib),
                         frequencies=(0.0, 0.0, omega), **kw)


def _generate(out: Path, scenario: Scenario, rng: np.random.Generator) -> dict[str, list[Path]]:
    volume_a3 = scenario.box_length**3
    volume_m3 = volume_a3 * _REAL.volume
    kT = BOLTZMANN * scenario.temperature
    dt_s = scenario.timestep_fs * scenario.thermo_every * _REAL.time
    n = scenario.steps_per_replica // scenario.thermo_every
    files: dict[str, list[Path]] = {}
    for m in scenario.models:
        model = _stress_model(m, scenario, volume_m3, kT)
        files[m.name] = []
        for r in range(scenario.replicas):
            p_atm = model.sample(n, dt_s, rng) / _REAL.pressure
            temp = scenario.temperature + 3.0 * rng.standard_normal(n)
            path = out / f"{m.name}_replica{r + 1}.log.gz"
            write_thermo_log(path, p_atm, temperature=temp, volume=volume_a3,
                             timestep_fs=scenario.timestep_fs,
                             thermo_every=scenario.thermo_every)
            files[m.name].append(path)
    return files


def run_demo(
    out: str | os.PathLike[str],
    *,
    seed: int = 2,
    echo: Callable[[str], None] = print,
    progress: bool = False,
) -> dict[str, list[Estimate]]:
    """Write the scenario's data into `out` and run every analysis on it.

    Parameters
    ----------
    out : path
        Output folder (created). Logs, JSON results and plots are written there.
    seed : int
        Seed of the random generator (the demo is reproducible).
    echo : callable
        Where the printed report goes.
    progress : bool
        Show progress bars while reading.

    Returns
    -------
    dict
        Model name -> estimates made for it, and ``"diffusion"`` -> the self-diffusion
        estimates of the diffusion step.
    """
    from .io import load_stress
    from .report.figures import save_figure
    from .report.jsonout import build_document, write_json
    from .report.text import format_estimates
    from .report.viscosity_plots import viscosity_figure
    from .viscosity import analyse_viscosity

    sc = SCENARIO
    outdir = Path(out)
    outdir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    echo(f"transport demo: {sc.liquid} at {sc.temperature:g} K, two candidate potentials,")
    echo(f"{sc.replicas} replicas x {sc.steps_per_replica * sc.timestep_fs / 1e6:g} ns each "
         f"(synthetic pressure tensor with known viscosity), written to {outdir}/")
    files = _generate(outdir, sc, rng)
    results: dict[str, list[Estimate]] = {}
    echo("")
    echo("shear viscosity (Green–Kubo with time-decomposition cutoff; Einstein cross-check)")
    for m in sc.models:
        series = [load_stress(p, temperature=sc.temperature, progress=progress)
                  for p in files[m.name]]
        res = analyse_viscosity(series, method="both")
        results[m.name] = list(res.estimates)
        echo("")
        echo(format_estimates(res.estimates, title=f"{m.label}: true value "
                                                  f"{m.viscosity_mpas:g} mPa s"))
        for e in res.estimates:
            hit = e.interval[0] <= m.viscosity_mpas <= e.interval[1]
            echo(f"  {e.method}: {e.value:.3f} vs truth {m.viscosity_mpas:g} mPa s -> "
                 f"{'inside' if hit else 'OUTSIDE'} the 95% interval")
        save_figure(viscosity_figure(res.green_kubo, res.einstein),
                    outdir / f"{m.name}_viscosity.png")
        doc = build_document(
            "demo", inputs=[s.source for s in series],
            settings={"model": m.name, "temperature": sc.temperature, "method": "both"},
            results=res.estimates,
            extra={"truth": {"shear_viscosity": m.viscosity_mpas, "unit": "mPa s"}},
        )
        write_json(doc, outdir / f"{m.name}_viscosity.json")
    echo("")
    echo(f"fictional experiment: {sc.experiment_mpas:g} ± {sc.experiment_uncertainty_mpas:g} "
         "mPa s")
    for m in sc.models:
        gk = results[m.name][0]
        dev = gk.value - sc.experiment_mpas
        echo(f"  {m.label}: Green–Kubo {gk.value:.2f} ± {gk.stderr:.2f} mPa s, "
             f"{dev:+.2f} mPa s ({dev / sc.experiment_mpas:+.0%}) from experiment")
    _comparison_step(outdir, files, rng, echo, progress)
    results["diffusion"] = _diffusion_step(outdir, rng, echo)
    _run_length_step(files, echo, out=outdir)
    _report_step(outdir, echo)
    echo("")
    echo("caution: a transport coefficient is only as good as the potential and the sampling;")
    echo("thermostat coupling and the treatment of electrostatics bias it. Check against")
    echo("experiment before a design decision.")
    echo(f"figures and JSON in {outdir}/")
    return results


@dataclass(frozen=True)
class DiffusingSpecies:
    """One species of the diffusion part of the scenario, with its true D."""

    resname: str
    label: str
    count: int
    mass_amu: float
    diffusion: float  # true self-diffusion coefficient, 1e-9 m^2/s


#: The diffusion part of the scenario: Corvane-9 with a dissolved anti-wear additive,
#: coarse-grained to one bead per molecule moving as independent Brownian particles.
DIFFUSION_SPECIES = (
    DiffusingSpecies("C9B", "Corvane-9 base oil", 200, 250.0, 0.35),
    DiffusingSpecies("AWX", "anti-wear additive", 60, 400.0, 0.90),
)


def _diffusion_step(outdir: Path, rng: np.random.Generator,
                    echo: Callable[[str], None]) -> list[Estimate]:
    """Self-diffusion of the scenario's two species from a synthetic trajectory.

    Writes ``diffusion_topology.pdb`` and ``diffusion_trajectory.xtc`` (Brownian beads with
    known D in the periodic box, coordinates wrapped as an engine writes them), reads them
    back through :func:`transport.io.trajectory.load_trajectory`, estimates D per species
    and prints the estimates beside the truth. Returns the estimates.
    """
    import warnings

    import MDAnalysis as mda

    from .diffusion import analyse_diffusion
    from .io.trajectory import load_trajectory
    from .report.diffusion_plots import diffusion_figure
    from .report.figures import save_figure
    from .report.jsonout import build_document, write_json
    from .report.text import format_estimates
    from .synthetic import brownian_positions

    sc = SCENARIO
    box = sc.box_length  # Angstrom
    dt_ps, n_frames = 5.0, 1000
    parts = []
    for sp in DIFFUSION_SPECIES:
        d_a2ps = sp.diffusion * 0.1  # 1e-9 m^2/s = 0.1 Angstrom^2/ps
        parts.append(brownian_positions(n_frames, sp.count, dt_ps, d_a2ps, box, rng))
    x = np.concatenate(parts, axis=1).astype(np.float32)
    resnames = [sp.resname for sp in DIFFUSION_SPECIES for _ in range(sp.count)]
    masses = np.concatenate([np.full(sp.count, sp.mass_amu) for sp in DIFFUSION_SPECIES])
    n = x.shape[1]
    top = outdir / "diffusion_topology.pdb"
    traj = outdir / "diffusion_trajectory.xtc"
    dims = np.array([box, box, box, 90.0, 90.0, 90.0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from MDAnalysis.coordinates.memory import MemoryReader

        u = mda.Universe.empty(n, n_residues=n, atom_resindex=np.arange(n), trajectory=True)
        u.add_TopologyAttr("names", ["CG"] * n)
        u.add_TopologyAttr("types", ["CG"] * n)
        u.add_TopologyAttr("resnames", resnames)
        u.add_TopologyAttr("resids", np.arange(1, n + 1))
        u.add_TopologyAttr("masses", masses)
        # frames with their times (the XTC writer stores each frame's time; XTC keeps
        # 0.001 nm, far below the 0.6 Angstrom steps between frames)
        u.load_new(x, format=MemoryReader, dt=dt_ps, dimensions=np.tile(dims, (n_frames, 1)))
        u.atoms.write(str(top))
        with mda.Writer(str(traj), n) as w:
            for _ in u.trajectory:
                w.write(u.atoms)
    series = load_trajectory(top, traj, group_by="residue", temperature=sc.temperature)
    res = analyse_diffusion(series)
    # removing the centre-of-mass drift of independent particles changes the truth slightly:
    # var(x_i - X) = var(x_i)(1 - 2 m_i/M) + sum_j m_j^2 var(x_j) / M^2
    m_tot = float(masses.sum())
    common = sum(sp.count * sp.mass_amu**2 * sp.diffusion for sp in DIFFUSION_SPECIES)
    truth = {sp.resname: sp.diffusion * (1 - 2 * sp.mass_amu / m_tot) + common / m_tot**2
             for sp in DIFFUSION_SPECIES}
    echo("")
    echo(f"self-diffusion: {n} molecules of two species in the {box:g} Angstrom box, "
         f"{n_frames} frames {dt_ps:g} ps apart (synthetic Brownian motion with known D)")
    echo(format_estimates(res.estimates, notes=res.notes,
                          title="MSD fitted over its diffusive window, error from time blocks"))
    for e in res.msd:
        sp = next(s for s in DIFFUSION_SPECIES if s.resname == e.group)
        hit = e.interval[0] <= truth[sp.resname] <= e.interval[1]
        echo(f"  {sp.label} ({sp.resname}): {e.value:.3f} ± {e.stderr:.3f} vs truth "
             f"{truth[sp.resname]:.3f} {e.unit} -> "
             f"{'inside' if hit else 'OUTSIDE'} the 95% interval")
    echo("  (values for the periodic box; the Yeh–Hummer finite-size correction needs the "
         "viscosity)")
    save_figure(diffusion_figure(res.msd, res.vacf), outdir / "diffusion.png")
    doc = build_document(
        "demo", inputs=[src for s in series for src in s.sources],
        settings={"group_by": "residue", "temperature": sc.temperature},
        results=res.estimates, warnings=res.notes,
        extra={"truth": {"self_diffusion": truth, "unit": "1e-9 m^2/s"}},
    )
    write_json(doc, outdir / "diffusion.json")
    return list(res.estimates)


#: Run-length step: the share of each replica a pilot of that model ran (model A's pilot
#: ran a tenth of its production; model B is judged on its production runs).
_PILOT_FRACTION = {"model_a": 0.1}


def _run_length_step(files: dict[str, list[Path]], echo: Callable[[str], None],
                     target: float = 0.05, out: Path | None = None) -> list:
    """Run-length verdicts for a 5% target: model A's pilot, model B's production runs.

    Model A's pilot is the first tenth of each of its production replicas, so the demo
    shows the verdict on the pilot (too short), its projection, and then the error the full
    production actually gave. The demo logs carry a placeholder loop time, so no wall-clock
    hours are projected. With `out`, the verdicts are also written to
    ``out/run_length.json``. Returns the verdicts.
    """
    from dataclasses import replace

    from .convergence import too_short_verdict
    from .errors import RunTooShortError
    from .io import load_stress
    from .report.verdicts import format_verdicts
    from .run_length import viscosity_verdicts
    from .viscosity import analyse_viscosity

    sc = SCENARIO
    echo("")
    echo(f"run length: is each candidate's sampling enough for a {target:.0%} error bar?")
    verdicts = []
    for m in sc.models:
        full = [load_stress(p, temperature=sc.temperature) for p in files[m.name]]
        full = [replace(s, source=replace(s.source, wall_seconds_per_time=None)) for s in full]
        frac = _PILOT_FRACTION.get(m.name, 1.0)
        runs = full if frac == 1.0 else [
            replace(s, pressure=np.ascontiguousarray(s.pressure[:, : int(s.n * frac)]))
            for s in full]
        try:
            g = analyse_viscosity(runs).green_kubo
            v = viscosity_verdicts(runs, [g], target=target)[0]
        except RunTooShortError as exc:  # too short for any error bar: still a verdict
            v = too_short_verdict(exc, quantity="shear_viscosity", method="green_kubo",
                                  target=target, replicas=len(runs))
        verdicts.append(v)
        what = "production runs" if frac == 1.0 else f"pilot runs ({frac:.0%} of production)"
        echo("")
        each = sum(s.duration for s in runs) / len(runs) * runs[0].units.time_scale
        echo(f"{m.label}, {sc.replicas} {what} of {each:.4g} {runs[0].units.time_unit} each:")
        echo(format_verdicts([v], details=False))
        echo(f"  {v.scaling.message}")
        only_precision = all(c.passed is not False for c in v.checks
                             if c.blocking and c.name != "precision")
        if frac < 1.0 and not v.long_enough and only_precision and \
                np.isfinite(v.relative_stderr):
            gf = analyse_viscosity(full).green_kubo
            t_full = v.run_time / frac / sc.replicas
            pred = v.relative_stderr * (1.0 / frac) ** -v.scaling.exponent
            echo(f"  check: the full {t_full:.4g} {v.time_unit} runs gave "
                 f"{gf.stderr / abs(gf.value):.1%}; the pilot's projection for that length "
                 f"was {pred:.1%}")
    if out is not None:  # the verdicts as a result document (the report shows them)
        from .report.jsonout import build_document, write_json

        write_json(build_document("demo", inputs=[], settings={"target": target,
                                                               "pilot": _PILOT_FRACTION},
                                  results=[], extra={"verdicts": [v.to_record()
                                                                  for v in verdicts]}),
                   out / "run_length.json")
    return verdicts


def _comparison_step(outdir: Path, files: dict[str, list[Path]], rng: np.random.Generator,
                     echo: Callable[[str], None], progress: bool) -> Path:
    """The candidates compared end to end at two temperatures, as ``transport compare``.

    The production logs at the first temperature are reused; each model also ran
    ``hot_replicas`` shorter replicas at the second temperature (written here). A study
    manifest (``study.toml``) names them with the fictional measurements; every run is
    analysed (local processes, results kept in ``study.results.sqlite``), replicas pooled,
    the candidates compared and the report written to ``outdir/comparison``. Returns the
    path of the report's HTML document.
    """
    from dataclasses import replace

    from ._study_data import write_synthetic_study
    from .report.comparison import (
        comparison_records,
        forest_figure,
        format_comparison,
        write_comparison_report,
    )
    from .report.figures import save_figure
    from .report.jsonout import build_document, write_json
    from .store import ResultStore
    from .study import load_study
    from .study_analysis import analyse_study, compare_study, sources_of

    sc = SCENARIO
    hot = replace(sc, temperature=sc.hot_temperature)
    volume_a3 = sc.box_length**3
    kT = BOLTZMANN * sc.hot_temperature
    dt_s = sc.timestep_fs * sc.thermo_every * _REAL.time
    n = sc.hot_steps_per_replica // sc.thermo_every
    t1, t2 = f"T{sc.temperature:.0f}", f"T{sc.hot_temperature:.0f}"
    existing: dict[tuple[str, str], list[Path]] = {}
    for m in sc.models:
        model = _stress_model(replace(m, viscosity_mpas=m.viscosity_hot_mpas), hot,
                              volume_a3 * _REAL.volume, kT)
        existing[(m.name, t1)] = files[m.name]
        existing[(m.name, t2)] = []
        for r in range(sc.hot_replicas):
            path = outdir / f"{m.name}_{t2}_replica{r + 1}.log.gz"
            write_thermo_log(path, model.sample(n, dt_s, rng) / _REAL.pressure,
                             temperature=sc.hot_temperature + 3.0 * rng.standard_normal(n),
                             volume=volume_a3, timestep_fs=sc.timestep_fs,
                             thermo_every=sc.thermo_every)
            existing[(m.name, t2)].append(path)
    manifest = write_synthetic_study(
        outdir, truth={m.name: {t1: m.viscosity_mpas, t2: m.viscosity_hot_mpas}
                       for m in sc.models},
        references={t1: (sc.experiment_mpas, sc.experiment_uncertainty_mpas),
                    t2: (sc.hot_experiment_mpas, sc.hot_experiment_uncertainty_mpas)},
        temperatures={t1: sc.temperature, t2: sc.hot_temperature}, replicas=0, rows=0,
        rng=rng, labels={m.name: m.label for m in sc.models}, existing=existing,
        name=f"{sc.liquid}: candidate potentials", target=0.05)
    study = load_study(manifest)
    echo("")
    echo(f"comparison of the candidates at {sc.temperature:g} K and {sc.hot_temperature:g} K "
         f"against the fictional experiment (study manifest {manifest.name}; the same as "
         f"`transport compare {manifest}`)")
    with ResultStore(outdir / "study.results.sqlite") as store:
        runs = analyse_study(study, store=store, progress=progress)
    comp = compare_study(study, runs.records, rng=np.random.default_rng(0),
                         failures=runs.failures)
    echo(format_comparison(comp))
    truth = ", ".join(f"{m.name} {m.viscosity_mpas:g} / {m.viscosity_hot_mpas:g}"
                      for m in sc.models)
    echo(f"(the invented truth, mPa s at {t1} / {t2}: {truth})")
    settings = {"manifest": str(manifest), "target": 0.05, "alpha": study.alpha, "seed": 0}
    save_figure(forest_figure(comp), outdir / "comparison_forest.png")
    write_json(build_document("compare", inputs=sources_of(runs.records), settings=settings,
                              results=[r.estimate for q in comp.comparisons
                                       for r in q.candidates],
                              warnings=comp.warnings, extra=comparison_records(comp)),
               outdir / "comparison.json")
    html = write_comparison_report(study, comp, settings, outdir / "comparison",
                                   sources_of(runs.records))
    echo(f"comparison report: {html}")
    return html


def _report_step(outdir: Path, echo: Callable[[str], None]) -> Path:
    """Write the report of the whole scenario from the JSON results into ``outdir/report``.

    The diffusion trajectory is taken as run with model A, so its finite-size correction
    uses model A's viscosity (named together, as ``transport report --pair`` does).
    Returns the path of the HTML document.
    """
    from .report.document import build_report, read_documents, write_report

    visc = [outdir / f"{m.name}_viscosity.json" for m in SCENARIO.models]
    diff = outdir / "diffusion.json"
    verdicts = [outdir / "run_length.json"] if (outdir / "run_length.json").exists() else []
    docs = read_documents([*visc, diff, *verdicts])
    report = build_report(docs, pairs=[(str(diff), str(visc[0]))],
                          title=f"transport demo: {SCENARIO.liquid}")
    html = write_report(report, outdir / "report")
    echo("")
    echo(f"report (HTML with figures, Markdown twin, merged JSON): {html}")
    return html

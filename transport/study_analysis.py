"""A study analysed: one task per run, then pooling, corrections, verdicts and comparison.

Data flow: :class:`~transport.study.Study` -> :func:`run_tasks` of :func:`analyse_run` (one
per run, a pure function of the input files' bytes and the :class:`RunTask`'s settings; it
returns a JSON-ready record, which is what the results store keeps) -> :func:`compare_study`
(pure: records in, a frozen :class:`StudyComparison` out).

Each run's viscosity is made from ``PIECES_PER_RUN`` time-decomposition pieces (see its
note: a run analysed alone would get pieces too short for a slow stress relaxation).
Per candidate and
state point, the replicas' Green–Kubo viscosities are pooled with
:func:`transport.compare.pool_replicas`; self-diffusion of each run is first corrected for
the periodic box with the pooled viscosity of the same candidate and state point
(:func:`transport.corrections.correct_diffusion`, Yeh & Hummer 2004), then pooled. Replicas
of different box sizes are pooled after the correction (the correction removes the leading
1/L dependence). The run-length verdict (:func:`transport.convergence.run_verdict`) judges
the pooled estimate against the target relative error over all replicas' run time.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .compare import (
    Deviation,
    Difference,
    Ranking,
    Reference,
    deviation_from_reference,
    pairwise_differences,
    pool_replicas,
    rank_candidates,
)
from .estimate import Estimate
from .study import Run, Study

__all__ = ["QuantityComparison", "RunTask", "StudyComparison", "StudyRuns", "analyse_run",
           "analyse_study", "compare_study", "run_tasks_of", "sources_of"]

#: Analysis settings that enter the results store's key (change one: re-analysed).
DEFAULT_METHOD = "green-kubo"
#: Time-decomposition pieces per run. A run analysed alone is split into ~20 pieces, 4x
#: shorter than when four replicas are analysed together, and the cutoff and maximum lag
#: shrink with the pieces: on the demo's two-time-scale stress (1 ns replicas, slow mode
#: 1.2 ps) that gave cutoffs of ~10 ps against 45 ps jointly, and the pooled per-run values
#: came out 7% low with half the error (model A: 5.79 +- 0.15 for a true 6.2; joint
#: analysis 6.21 +- 0.25). 10 pieces per run: 6.15 +- 0.21 and 4.94 +- 0.18 (truths 6.2,
#: 4.9). 5 pieces removed the bias too but their error bars (4 dof) made the inverse-
#: variance pooling noisy (a synthetic 3-replica candidate at 6.0: 5.71 +- 0.39, interval
#: [4.0, 7.4]; with 10 pieces 6.02 +- 0.27).
PIECES_PER_RUN = 10
DEFAULT_SETTINGS = {"method": DEFAULT_METHOD, "pieces_per_run": PIECES_PER_RUN}


@dataclass(frozen=True)
class RunTask:
    """What a task needs: the run (absolute paths) and the analysis settings."""

    run: Run
    temperature: float
    settings: Mapping[str, Any] = field(default_factory=dict)

    def key_settings(self) -> dict[str, Any]:
        """Settings that change the result (the store's key with the content hash)."""
        return {"temperature": self.temperature, **dict(self.run.settings),
                **dict(self.settings)}


def run_tasks_of(study: Study, settings: Mapping[str, Any] | None = None) -> list[RunTask]:
    """One task per run of the study, in manifest order."""
    s = {**DEFAULT_SETTINGS, **dict(settings or {})}
    return [RunTask(r, study.state(r.state).temperature, s) for r in study.runs]


def analyse_run(task: RunTask) -> dict[str, Any]:
    """Read and analyse one run; return its JSON record (no curves).

    Viscosity (Green–Kubo with the time-decomposition cutoff) from the stress file;
    self-diffusion (MSD) per species from the trajectory. The record holds ``results``
    (estimate records), ``run_times`` (analysed simulated time per quantity, in the
    estimate's window unit), ``inputs``, ``warnings`` and the run's identity.
    """
    run = task.run
    st = run.settings
    out: dict[str, Any] = {"run": run.name, "candidate": run.candidate, "state": run.state,
                           "index": run.index, "box": run.box, "results": [],
                           "run_times": {}, "inputs": []}
    method = task.settings.get("method", DEFAULT_METHOD)
    if run.stress is not None:
        from .io import load_stress
        from .viscosity import analyse_viscosity

        s = load_stress(run.stress, units=st.get("units"), timestep=st.get("timestep"),
                        temperature=task.temperature)
        res = analyse_viscosity([s], method=method, n_pieces=int(
            task.settings.get("pieces_per_run", PIECES_PER_RUN)))
        skipped = res.estimates[0].diagnostics.get("skipped") or [0.0]
        t = s.n * s.dt * s.units.time_scale - float(skipped[0] or 0.0)
        out["results"] += [e.to_record() for e in res.estimates]
        out["run_times"]["shear_viscosity"] = t
        out["inputs"].append(s.source.to_record())
    if run.trajectory is not None:
        from .diffusion import analyse_diffusion
        from .io.trajectory import load_trajectory

        ps = load_trajectory(run.topology, run.trajectory, select=st.get("select", "all"),
                             group_by=st.get("group_by", "atom"), units=st.get("units"),
                             timestep=st.get("timestep"), temperature=task.temperature)
        res_d = analyse_diffusion(ps, vacf="no", workers=1)
        out["results"] += [e.to_record() for e in res_d.estimates]
        out["run_times"]["self_diffusion"] = float(ps[0].duration * ps[0].units.time_scale)
        out["inputs"] += [src.to_record() for p in ps for src in p.sources]
    return out


# ---- pooling and comparison (pure) --------------------------------------------------------

@dataclass(frozen=True)
class CandidateResult:
    """One candidate's pooled estimate of one quantity at one state point."""

    candidate: str
    estimate: Estimate
    replicas: int
    deviation: Deviation
    verdict: Any  # transport.convergence.Verdict or None
    runs: tuple[str, ...]

    def to_record(self) -> dict[str, Any]:
        """The JSON record (an entry of the document's ``candidates`` list)."""
        d = self.deviation
        return {"name": self.candidate, "replicas": self.replicas, "runs": list(self.runs),
                "result": self.estimate.to_record(),
                "deviation": {"difference": d.difference, "stderr": d.stderr,
                              "percent": d.percent, "percent_stderr": d.percent_stderr,
                              "n_sigma": d.n_sigma, "warnings": list(d.warnings)},
                "verdict": None if self.verdict is None else self.verdict.to_record()}


@dataclass(frozen=True)
class QuantityComparison:
    """All candidates at one state point for one quantity (and species)."""

    state: str
    quantity: str
    group: str | None
    reference: Reference
    candidates: tuple[CandidateResult, ...]
    differences: tuple[Difference, ...]
    ranking: Ranking | None

    def to_record(self) -> dict[str, Any]:
        """The JSON record (an entry of the document's ``comparisons`` list)."""
        r = self.reference
        rank = self.ranking
        return {
            "state": self.state, "quantity": self.quantity, "group": self.group,
            "reference": {"value": r.value, "stderr": r.stderr, "unit": r.unit,
                          "source": r.source},
            "differences": [{"first": x.first, "second": x.second,
                             "difference": x.difference, "stderr": x.stderr,
                             "interval95": list(x.interval), "test": x.test,
                             "statistic": x.statistic, "dof": _num(x.dof),
                             "p_value": x.p_value, "p_holm": x.p_adjusted,
                             "significant": x.significant, "alpha": x.alpha}
                            for x in self.differences],
            "ranking": None if rank is None else [
                {"rank": i + 1, "name": n, "abs_deviation": abs(d.difference),
                 "probability_closest": p, "probability_stderr": ps}
                for i, (n, d, p, ps) in enumerate(zip(
                    rank.names, rank.deviations, rank.probability_closest,
                    rank.probability_stderr, strict=True))],
            "ranking_draws": None if rank is None else rank.n_draws,
            "warnings": [] if rank is None else list(rank.warnings),
        }


@dataclass(frozen=True)
class StudyComparison:
    """The comparison of a whole study."""

    study: str
    comparisons: tuple[QuantityComparison, ...]
    failures: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()


def _num(x: float) -> float | None:
    return None if not math.isfinite(x) else float(x)


def _primary(records: Sequence[Mapping[str, Any]]) -> dict[tuple, list[tuple[str, Estimate]]]:
    """(candidate, state, quantity, group) -> [(run, estimate)] of the primary methods."""
    from .report.document import estimate_from_record

    out: dict[tuple, list[tuple[str, Estimate]]] = {}
    for rec in records:
        for r in rec["results"]:
            if r["method"] not in ("green_kubo", "msd_wls"):
                continue
            e = estimate_from_record(r)
            key = (rec["candidate"], rec["state"], e.quantity, e.group)
            out.setdefault(key, []).append((rec["run"], e))
    return out


def compare_study(study: Study, records: Sequence[Mapping[str, Any]], *,
                  target: float | None = None, rng: np.random.Generator,
                  n_draws: int = 100_000, failures: Sequence[str] = ()) -> StudyComparison:
    """Pool, correct, judge and compare the analysed runs of a study.

    Parameters
    ----------
    study : Study
    records : sequence of mapping
        Records of :func:`analyse_run` (runs that failed are left out by the caller).
    target : float, optional
        Target relative standard error of the verdicts (default: the manifest's).
    rng : numpy.random.Generator
        For the probability-of-closest draws.
    n_draws : int
        Draws of :func:`transport.compare.rank_candidates`.
    failures : sequence of str
        Runs that failed (one line each), carried into the result.
    """
    from .convergence import run_verdict
    from .corrections import correct_diffusion

    target = study.target if target is None else target
    prim = _primary(records)
    times: dict[tuple, list[float]] = {}
    for rec in records:
        for q, t in rec["run_times"].items():
            times.setdefault((rec["candidate"], rec["state"], q), []).append(float(t))
    warnings: list[str] = []
    pooled_eta: dict[tuple[str, str], Estimate] = {}
    for (c, s, q, _g), runs in prim.items():
        if q == "shear_viscosity":
            pooled_eta[(c, s)] = pool_replicas([e for _, e in runs], alpha=study.alpha) \
                if len(runs) > 1 else runs[0][1]
    comparisons: list[QuantityComparison] = []
    for state in study.states:
        for ref in state.references:
            q = "shear_viscosity" if ref.quantity == "viscosity" else "self_diffusion"
            reference = Reference(ref.value, ref.stderr, ref.unit, ref.source)
            results: list[CandidateResult] = []
            for cand in study.candidates:
                runs = [(n, e) for (c, s, qq, g), lst in prim.items() for n, e in lst
                        if c == cand.name and s == state.label and qq == q
                        and (q == "shear_viscosity" or g == ref.species)]
                if not runs:
                    warnings.append(f"{cand.name} at {state.label}: no {q} results "
                                    f"(no runs, or every run failed); left out")
                    continue
                ests = [e for _, e in runs]
                if q == "self_diffusion":
                    eta = pooled_eta.get((cand.name, state.label))
                    if eta is not None:
                        ests = [correct_diffusion(e, eta) for e in ests]
                    else:
                        warnings.append(f"{cand.name} at {state.label}: no viscosity, so "
                                        "D is not corrected for the periodic box")
                pooled = pool_replicas(ests, alpha=study.alpha) if len(ests) > 1 else ests[0]
                verdict = None
                rt = times.get((cand.name, state.label, q))
                if target is not None and rt:
                    verdict = run_verdict(pooled, target=target, run_times=rt)
                results.append(CandidateResult(
                    cand.name, pooled, len(ests), deviation_from_reference(pooled, reference),
                    verdict, tuple(n for n, _ in runs)))
            if not results:
                continue
            est = {r.candidate: r.estimate for r in results}
            diffs = pairwise_differences(est, alpha=study.alpha) if len(est) > 1 else ()
            ranking = rank_candidates(est, reference, rng=rng, n_draws=n_draws) \
                if len(est) > 1 else None
            comparisons.append(QuantityComparison(state.label, q, ref.species, reference,
                                                  tuple(results), diffs, ranking))
    return StudyComparison(study.name, tuple(comparisons), tuple(failures), tuple(warnings))


# ---- running a study's tasks (with the results store) -------------------------------------

@dataclass(frozen=True)
class StudyRuns:
    """The records of a study's runs and how they were obtained.

    Attributes
    ----------
    records : tuple of dict
        One per run that succeeded, in manifest order.
    failures : tuple of str
        One line per run that failed (its name and the error).
    analysed, reused : tuple of str
        Names of the runs analysed now and of those read from the store.
    """

    records: tuple[dict[str, Any], ...]
    failures: tuple[str, ...]
    analysed: tuple[str, ...]
    reused: tuple[str, ...]


def analyse_study(study: Study, *, settings: Mapping[str, Any] | None = None,
                  store: Any = None, workers: int | None = None,
                  scheduler: str | None = None, progress: bool = False) -> StudyRuns:
    """Analyse every run of `study` not already in `store`, on local processes or Dask.

    Parameters
    ----------
    study : Study
    settings : mapping, optional
        Analysis settings shared by every run (enter the store's key).
    store : transport.store.ResultStore, optional
        Where analysed runs are kept and looked up (None: analyse everything, keep nothing).
    workers, scheduler, progress
        As in :func:`transport.parallel.run_tasks`.
    """
    from . import __version__
    from .parallel import TaskFailure, run_tasks, start_early
    from .store import run_key

    start_early(workers, scheduler)  # the pool's imports overlap the hashing below
    tasks = run_tasks_of(study, settings)
    hashes = [t.run.content_hash() for t in tasks] if store is not None else []
    keys = [run_key(h, t.key_settings(), __version__) for h, t in zip(hashes, tasks,
                                                                         strict=False)]
    found = store.get_many(keys) if store is not None else {}
    todo = [i for i in range(len(tasks)) if store is None or keys[i] not in found]
    results = run_tasks(analyse_run, [tasks[i] for i in todo],
                        names=[tasks[i].run.name for i in todo], workers=workers,
                        scheduler=scheduler, progress=progress)
    by_index: dict[int, Any] = dict(zip(todo, results, strict=True))
    if store is not None:
        store.put_many((keys[i], tasks[i].run.name, hashes[i], tasks[i].key_settings(),
                        __version__, r) for i, r in by_index.items()
                       if not isinstance(r, TaskFailure))
    records: list[dict[str, Any]] = []
    failures: list[str] = []
    for i in range(len(tasks)):
        r = by_index[i] if i in by_index else found[keys[i]]
        if isinstance(r, TaskFailure):
            failures.append(r.one_line())
        else:
            records.append(r)
    return StudyRuns(tuple(records), tuple(failures),
                     tuple(tasks[i].run.name for i in todo),
                     tuple(t.run.name for i, t in enumerate(tasks) if i not in by_index))


def sources_of(records: Sequence[Mapping[str, Any]]) -> list[Any]:
    """The :class:`~transport.series.Source` of every input read by the runs' records."""
    from .series import Source

    return [Source(path=s["path"], format=s["format"], sha256=s.get("sha256"),
                   description=s.get("read", ""), rows=int(s.get("rows", 0)),
                   columns=dict(s.get("columns") or {}),
                   wall_seconds_per_time=s.get("wall_seconds_per_time"))
            for r in records for s in r.get("inputs", ())]

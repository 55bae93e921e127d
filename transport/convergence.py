"""Run-length verdicts: is a run long enough for the precision wanted, and if not, how much more?

Pure functions: an estimate (and the estimates of shorter parts of the same data) in, a frozen
:class:`Verdict` out. Nothing here opens a file, runs an estimator or prints; the analysis
layer (:mod:`transport.run_length`) re-analyses the shorter parts and passes their results in.

What a verdict rests on
-----------------------
*Checks.* Each is a named reason the user can read (:class:`Check`). Blocking checks decide
``long_enough`` together with the precision; advisory ones are cautions.

- Shear viscosity (Green–Kubo, Einstein): the analysed time against the stress decorrelation
  time, the number of independent pieces behind the error bar, whether the running integral
  levels off before the cutoff (not still rising, plateau not extrapolated beyond the cutoff),
  whether an initial transient was detected and dropped, and the relative standard error.
- Self-diffusion (MSD, ``msd_*`` methods): whether the diffusive regime is reached (local
  log-log slope near 1 over the fit window), where the diffusive regime begins against the
  run and how much of the run the fit window uses, the root-mean-square displacement against
  the particle spacing and the box, whether the error bar rests on independent time blocks,
  and the relative standard error.

These follow the checklist of Maginn et al. [1]_ for equilibrium-MD transport coefficients;
the thresholds are stated (with their reason) beside each constant in
:mod:`transport.verdict_checks`.

*Projection.* The relative standard error r is assumed to fall as a power of the total
analysed time, ``r(T) = r(T0) (T / T0)^-p``, with ``p = 1/2`` for an estimator whose window
does not change with the run (independent pieces: the central limit theorem). The exponent is
measured on the data (:func:`measure_scaling`) from the same analysis of shorter parts of the
run (the disjoint quarters and halves of every replica): a weighted least-squares fit of
``log(stderr / |value|)`` on ``log T``, all over the whole data's value (a part's own value
would add its scatter). The variance of one log standard error is the larger of the model's,
``1 / (2 (n - 1))`` for an error bar from the spread of n independent pieces [2]_ (``r^2``
for a model-based error bar, which scales with the value), and the scatter of the parts of
one length (pooled). The measured exponent replaces 1/2 when it departs from it by more than
the Student t 97.5% quantile times its standard error, or when the window the estimate
rests on grows with the run: the Green–Kubo cutoff [3]_ (the time decomposition keeps about
20 pieces and lengthens them, so the cutoff, and with it the noise integrated, grows with T:
on real Lennard-Jones output the error fell as T^-0.32 to T^-0.46), or an automatic MSD fit
window that ends at a fixed share of the run (~T^-0.3 on Brownian particles). It is used
within [MIN_EXPONENT, 1/2] (see there): the projection never promises a faster fall than
independent sampling gives. The time to reach a target ``r*``
is then ``T0 (r / r*)^(1/p)``. Additional replicas of the present length are projected with
the same exponent in total simulated time (the estimators pool replicas and segments into
independent pieces by total time; with a Green–Kubo cutoff already at its maximum this is
conservative). Projections are extrapolations: they hold while the run stays in the regime
the parts sampled (for Green–Kubo, until the cutoff reaches the maximum lag, after which the
error falls faster).

References
----------
.. [1] E. J. Maginn, R. A. Messerly, D. J. Carlson, D. R. Roe and J. R. Elliott, "Best
   practices for computing transport properties 1. Self-diffusivity and viscosity from
   equilibrium molecular dynamics", LiveCoMS 1, 6324 (2019).
.. [2] The relative standard error of a sample standard deviation from n normal values is
   about ``1 / sqrt(2 (n - 1))`` (common practice; e.g. H. Flyvbjerg and H. G. Petersen,
   J. Chem. Phys. 91, 461 (1989), for the same result applied to blocked averages).
.. [3] Y. Zhang, A. Otani and E. J. Maginn, J. Chem. Theory Comput. 11, 3537 (2015): the
   time-decomposition cutoff whose growth with run length the projection measures.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .estimate import Estimate, _jsonable
from .verdict_checks import (
    Check,
    _diffusion_checks,
    _f,
    _generic_checks,
    _pieces,
    _precision_check,
    _viscosity_checks,
)

__all__ = [
    "Check",
    "Scaling",
    "Verdict",
    "measure_scaling",
    "parse_target",
    "run_verdict",
    "too_short_verdict",
]

#: Departure of the measured exponent from 1/2, in its standard errors, that replaces 1/2
#: when the noise of the parts cannot be measured (else the Student t 97.5% quantile).
SCALING_SIGMAS = 2.0
#: Exponents used are kept within these bounds. Above 1/2 the data would promise more than
#: independent sampling gives (a window growing with the run only adds noise), so a measured
#: exponent above 1/2 is taken as 1/2: the projection never promises faster than 1/sqrt(T).
#: Below MIN_EXPONENT a measured exponent is within its noise (+-0.15-0.2 from quarters,
#: halves and the whole) of the slowest falls measured with growing windows (Green–Kubo
#: 0.32-0.46 on LJ logs, 0.35-0.4 on OU; MSD in time blocks ~0.3 on Brownian particles), so
#: MIN_EXPONENT is used instead; only an error that clearly does not fall (exponent plus two
#: standard errors <= 0) gets no projection.
MIN_EXPONENT, MAX_EXPONENT = 0.2, 0.5
#: Growth exponent of the estimate's window end (Green–Kubo cutoff, fit window) with run
#: length that counts as "grows with T".
CUTOFF_GROWTH = 0.5




@dataclass(frozen=True)
class Scaling:
    """How the relative error falls with the analysed time, and how that was decided.

    Attributes
    ----------
    exponent : float
        The exponent p used, ``r ~ T^-p``.
    rule : str
        ``assumed`` (1/2, not checked: no usable parts), ``checked`` (1/2, the parts
        agree with it) or ``measured`` (the parts' exponent is used).
    measured, measured_stderr : float or None
        The exponent fitted on the parts and its standard error.
    times, relative_stderrs : tuple of float
        The points fitted (total analysed time, relative standard error).
    window_growth : float or None
        Growth exponent of the estimate's window end (the Green–Kubo cutoff) with T.
    message : str
        One sentence for the user.
    """

    exponent: float
    rule: str
    measured: float | None = None
    measured_stderr: float | None = None
    times: tuple[float, ...] = ()
    relative_stderrs: tuple[float, ...] = ()
    window_growth: float | None = None
    message: str = ""

    def to_record(self) -> dict[str, Any]:
        """JSON record."""
        return {"exponent": self.exponent, "rule": self.rule,
                "measured": _jsonable(self.measured),
                "measured_stderr": _jsonable(self.measured_stderr),
                "times": list(self.times), "relative_stderrs": list(self.relative_stderrs),
                "window_growth": _jsonable(self.window_growth), "message": self.message}


@dataclass(frozen=True)
class Verdict:
    """Whether a run supports a target precision, and how much more simulation would.

    Attributes
    ----------
    quantity, method : str
        Of the estimate judged (``shear_viscosity``/``green_kubo``, ...).
    group : str or None
        Species, for diffusion.
    long_enough : bool
        The relative standard error meets the target and no blocking check failed.
    relative_stderr : float
        stderr / |value| achieved (nan without an error bar).
    target_relative_stderr : float
        The target.
    additional_time : float or None
        Simulated time to add to each run (replica) to reach the target, in `time_unit`; 0
        when the precision is met; None when it cannot be projected.
    time_unit : str
        Unit of the times (``ps``, ``tau``).
    additional_replicas : int or None
        Alternatively, further replicas of the present (mean) length; 0 or None as above.
    wall_clock_hours : float or None
        Hours of simulation, at the speed the input logs report, for the additional time of
        all replicas (run one after another); None when the input says no speed.
    wall_clock_hours_replicas : float or None
        The same for the additional replicas.
    run_time : float
        Total analysed time (all replicas, after the dropped transient), `time_unit`.
    replicas : int
        Number of replicas.
    scaling : Scaling
        The error-versus-time law used for the projection, and how it was decided.
    reasons : tuple of str
        What decided the verdict, most important first (failed blocking checks, then the
        precision and the projection, then cautions).
    checks : tuple of Check
        Every check made.
    """

    quantity: str
    method: str
    group: str | None
    long_enough: bool
    relative_stderr: float
    target_relative_stderr: float
    additional_time: float | None
    time_unit: str
    additional_replicas: int | None
    wall_clock_hours: float | None
    wall_clock_hours_replicas: float | None
    run_time: float
    replicas: int
    scaling: Scaling
    reasons: tuple[str, ...] = ()
    checks: tuple[Check, ...] = field(default_factory=tuple)

    @property
    def main_reason(self) -> str:
        """The first reason (what decided the verdict)."""
        return self.reasons[0] if self.reasons else ""

    def to_record(self) -> dict[str, Any]:
        """The JSON record (an entry of the document's ``verdicts`` list)."""
        return {
            "quantity": self.quantity,
            "method": self.method,
            "group": self.group,
            "long_enough": self.long_enough,
            "relative_stderr": _jsonable(self.relative_stderr),
            "target_relative_stderr": self.target_relative_stderr,
            "additional_time": _jsonable(self.additional_time),
            "time_unit": self.time_unit,
            "additional_replicas": self.additional_replicas,
            "wall_clock_hours": _jsonable(self.wall_clock_hours),
            "wall_clock_hours_replicas": _jsonable(self.wall_clock_hours_replicas),
            "run_time": _jsonable(self.run_time),
            "replicas": self.replicas,
            "scaling": self.scaling.to_record(),
            "reasons": list(self.reasons),
            "checks": [c.to_record() for c in self.checks],
        }


def parse_target(value: str | float) -> float:
    """A target relative standard error from ``5%``, ``0.05`` or a number.

    Raises
    ------
    ValueError
        Unless the target lies strictly between 0 and 1 (0% and 100%).
    """
    text = str(value).strip()
    try:
        t = float(text[:-1]) / 100.0 if text.endswith("%") else float(text)
    except ValueError:
        raise ValueError(f"expected a relative error such as 5% or 0.05, got {value!r}") \
            from None
    if not (math.isfinite(t) and 0.0 < t < 1.0):
        raise ValueError(f"expected a relative error between 0 and 100%, got {value!r}")
    return t


def _relative(e: Estimate) -> float:
    if not (math.isfinite(e.stderr) and math.isfinite(e.value)) or e.value == 0:
        return float("nan")
    return abs(e.stderr / e.value)



def _log_se_variance(e: Estimate) -> float:
    """Variance of log(stderr) of one estimate (see the module notes)."""
    d = e.diagnostics
    n = _pieces(e)
    blocks = d.get("block_count")
    if n is None and isinstance(blocks, (int, float)) and blocks > 1:
        n = float(blocks)  # the error bar is set (or checked) by the scatter of time blocks
    if n is not None:
        return 1.0 / (2.0 * (n - 1.0))
    # a model-based error bar scales with the value: it scatters as the value does
    r = _relative(e)
    return max(r * r, 1e-6) if math.isfinite(r) else 1.0


def measure_scaling(
    estimate: Estimate,
    total_time: float,
    parts: Sequence[tuple[float, Estimate]] = (),
) -> Scaling:
    """The law ``r ~ T^-p`` for the projection, checked on shorter parts of the same data.

    Parameters
    ----------
    estimate : Estimate
        The estimate from all the data.
    total_time : float
        Total analysed time behind `estimate` (any unit: only ratios matter).
    parts : sequence of (fraction, Estimate)
        Estimates made with the same settings from a `fraction` (0 < fraction < 1) of the
        analysed time of every replica: prefixes, or disjoint parts of that length (the
        standard errors of several parts of one length are averaged in logarithm, which
        lowers their noise).

    Returns
    -------
    Scaling
        See the module notes for the rule. The relative errors are the standard errors
        over the whole data's value (the value of a part would add its own noise).
    """
    value = abs(estimate.value)
    ok_full = math.isfinite(estimate.stderr) and estimate.stderr > 0 and value > 0
    full_pieces = _pieces(estimate)
    groups: dict[float, list[Estimate]] = {}
    dropped = 0
    for f, e in parts:
        if not (0 < f < 1 and math.isfinite(e.stderr) and e.stderr > 0):
            continue
        if full_pieces is not None and (_pieces(e) or 0) < full_pieces:
            # fewer pieces: another regime of the estimator (segments at their minimum
            # length), whose error says nothing about longer runs
            dropped += 1
            continue
        if e.diagnostics.get("still_rising") and not estimate.diagnostics.get("still_rising"):
            # a part whose running integral had not levelled off (a cutoff on the fast
            # relaxation alone) is another regime too
            dropped += 1
            continue
        groups.setdefault(float(f), []).append(e)
    if not ok_full or not groups:
        why = ("no shorter part of the run was analysed" if not parts else
               "the shorter parts are in another regime of the estimator (fewer pieces, or "
               "a running integral still rising)"
               if dropped else "the shorter parts gave no error bar")
        return Scaling(0.5, "assumed", message=f"error assumed to fall as 1/sqrt(T), not "
                                               f"checked ({why})")
    # noise of one log standard error: the model value, or the scatter of the disjoint
    # parts of one length when that is larger (pooled over the lengths; the jackknife of a
    # fit scatters more than a plain standard deviation)
    var1 = _log_se_variance(estimate)
    logs = {f: np.log([e.stderr / value for e in es]) for f, es in groups.items()}
    dev = [float(np.sum((v - v.mean()) ** 2)) for v in logs.values() if v.size > 1]
    dof = sum(v.size - 1 for v in logs.values())
    if dof:
        var1 = max(var1, sum(dev) / dof)
    pts = [(f * total_time, float(logs[f].mean()), var1 / logs[f].size, es)
           for f, es in sorted(groups.items())]
    pts.append((total_time, math.log(estimate.stderr / value), var1, [estimate]))
    x = np.log([p[0] for p in pts])
    y = np.array([p[1] for p in pts])
    w = 1.0 / np.array([p[2] for p in pts])
    xm = float(np.sum(w * x) / np.sum(w))
    sxx = float(np.sum(w * (x - xm) ** 2))
    slope = float(np.sum(w * (x - xm) * (y - np.sum(w * y) / np.sum(w))) / sxx)
    p_meas, p_se = -slope, 1.0 / math.sqrt(sxx)
    # two-sided 95% departure from 1/2, Student t on the dof of the measured noise
    from scipy import special

    k_sig = float(special.stdtrit(dof, 0.975)) if dof else SCALING_SIGMAS
    # the window the estimate rests on (Green–Kubo cutoff, MSD or Einstein fit window): when
    # an automatic rule lengthens it with the run, the error need not fall as 1/sqrt(T)
    growth = None
    d = estimate.diagnostics
    if d.get("cutoff_rule") != "given" and d.get("window_rule") != "given":
        ends = [(t, float(np.mean([e.window[1] for e in es])))
                for t, _, _, es in pts if all(e.window is not None and e.window[1] > 0
                                              for e in es)]
        if len(ends) >= 2:
            growth = float(np.polyfit(np.log([t for t, _ in ends]),
                                      np.log([c for _, c in ends]), 1)[0])
    grows = growth is not None and growth >= CUTOFF_GROWTH
    what = "Green–Kubo cutoff" if estimate.method == "green_kubo" else "window of the estimate"
    off = abs(p_meas - 0.5) > k_sig * p_se
    times = tuple(float(p[0]) for p in pts)
    rs = tuple(float(math.exp(p[1])) for p in pts)
    if grows or off:
        used = min(max(p_meas, MIN_EXPONENT), MAX_EXPONENT)
        why = (f"the {what} grows with the run (as T^{growth:.2f})" if grows
               else f"the shorter parts do not follow 1/sqrt(T) (more than {k_sig:.2g} "
                    "standard errors away)")
        if p_meas >= MAX_EXPONENT:
            msg = (f"the shorter parts measured {_law(p_meas)} +- {p_se:.2f}"
                   + (f" (the {what} grows with the run, as T^{growth:.2f}, "
                      "which can only slow the fall)" if grows else "")
                   + ": projected with 1/sqrt(T), the fastest fall independent sampling "
                     "gives")
            return Scaling(used, "checked", p_meas, p_se, times, rs, growth, msg)
        msg = (f"error measured to scale as {_law(p_meas)} +- {p_se:.2f} over "
               f"{len(pts)} lengths of the run, not as 1/sqrt(T): {why}; projected with "
               f"{_law(used)}")
        return Scaling(used, "measured", p_meas, p_se, times, rs, growth, msg)
    msg = (f"error falls as 1/sqrt(T) within the data's precision (measured "
           f"{_law(p_meas)} +- {p_se:.2f} over {len(pts)} lengths of the run)")
    return Scaling(0.5, "checked", p_meas, p_se, times, rs, growth, msg)


# ---- checks -----------------------------------------------------------------------------

def _law(p: float) -> str:
    """``T^-0.46`` for p = 0.46, ``T^+0.18`` for p = -0.18."""
    return f"T^{-p:+.2f}"



# ---- the verdict ------------------------------------------------------------------------

def run_verdict(
    estimate: Estimate,
    *,
    target: float,
    run_times: Sequence[float],
    parts: Sequence[tuple[float, Estimate]] = (),
    seconds_per_time: float | None = None,
    particle_spacing: float | None = None,
) -> Verdict:
    """Judge whether the data behind `estimate` reach a target relative error.

    Parameters
    ----------
    estimate : Estimate
        A viscosity or diffusion estimate (any estimate: unknown kinds get the precision
        check and the projection only).
    target : float
        Target relative standard error, 0 < target < 1 (0.05 for 5%).
    run_times : sequence of float
        Analysed simulated time of each replica (after the dropped transient), in the
        estimate's `window_unit` (ps, or tau).
    parts : sequence of (fraction, Estimate)
        Estimates of the same quantity from a `fraction` of every replica's analysed time
        (prefixes or disjoint parts), made with the same settings (see
        :func:`measure_scaling`).
    seconds_per_time : float, optional
        Wall-clock seconds the engine needed per unit of simulated time (`window_unit`), from
        the input logs; gives the projection in hours.
    particle_spacing : float, optional
        Mean distance between particles, (V/N)^(1/3) over all particles, in the diagnostics'
        length unit (diffusion); default: from the species' own number density.

    Returns
    -------
    Verdict

    Raises
    ------
    ValueError
        For a target outside (0, 1) or run times that are not positive.
    """
    if not (math.isfinite(target) and 0 < target < 1):
        raise ValueError(f"target must lie in (0, 1), got {target!r}")
    run_times = [float(t) for t in run_times]
    if not run_times or not all(math.isfinite(t) and t > 0 for t in run_times):
        raise ValueError(f"run_times must be positive, got {run_times!r}")
    total = float(sum(run_times))
    reps = len(run_times)
    mean_len = total / reps
    r = _relative(estimate)
    checks: list[Check] = []
    if estimate.quantity == "shear_viscosity":
        checks += _viscosity_checks(estimate, run_times)
    elif estimate.quantity == "self_diffusion" and estimate.method.startswith("msd"):
        checks += _diffusion_checks(estimate, run_times, particle_spacing)
    else:
        checks += _generic_checks(estimate)
    precision = _precision_check(r, target)
    checks.append(precision)
    scaling = measure_scaling(estimate, total, parts)
    blocking = [c for c in checks if c.blocking and c.passed is False and c is not precision]
    long_enough = bool(precision.passed) and not blocking

    add_t: float | None = None
    add_r: int | None = None
    # without a plateau (or a diffusive regime) the error bar says nothing about the run
    # needed: only a length rule of the failed check can give the additional time
    unsound = any(c.name in ("levels_off", "diffusive_regime") for c in blocking)
    if unsound:
        add_t, add_r = 0.0, 0
    elif math.isfinite(r) and r > 0:
        if r <= target:
            add_t, add_r = 0.0, 0
        elif not (scaling.rule == "measured" and scaling.measured is not None
                  and scaling.measured + 2.0 * (scaling.measured_stderr or 0.0) <= 0.0):
            factor = (r / target) ** (1.0 / scaling.exponent)
            add_t = mean_len * (factor - 1.0)
            add_r = int(math.ceil(reps * (factor - 1.0) - 1e-9))
    # length rules of failed checks: the run must reach them whatever the precision
    need = [c.needed_time for c in blocking if c.needed_time is not None]
    if need and add_t is not None:
        add_t = max(add_t, (max(need) - total) / reps)
        add_r = max(add_r or 0, int(math.ceil((max(need) - total) / mean_len - 1e-9)))
    if unsound and not need:
        add_t = add_r = None  # not projectable: the reasons say what to fix first
    hours = hours_r = None
    if seconds_per_time is not None and seconds_per_time > 0 and add_t is not None:
        hours = add_t * reps * seconds_per_time / 3600.0
        hours_r = (add_r or 0) * mean_len * seconds_per_time / 3600.0

    u = estimate.window_unit
    reasons = [c.message for c in blocking]
    if unsound:
        reasons.append(precision.message + (
            f"; the estimate rests on no plateau or diffusive regime, so the precision "
            f"says nothing yet; the failed checks ask for about {_f(add_t)} {u} more per run"
            if add_t else "; the estimate rests on no plateau or diffusive regime, so the "
            "precision says nothing yet and no length can be projected: run longer and "
            "check again"))
    elif precision.passed:
        reasons.append(precision.message + (
            f"; the failed checks ask for about {_f(add_t)} {u} more per run"
            if blocking and add_t else ""))
    elif add_t is None:
        reasons.append(precision.message + (
            "; the error does not fall with run length at the measured rate: more time "
            "cannot be projected (check the run, or add independent replicas)"
            if math.isfinite(r) else ""))
    else:
        h = "" if hours is None else f", about {_f(hours)} h at the logged speed"
        hr = "" if hours_r is None else f" (about {_f(hours_r)} h)"
        reasons.append(
            f"{precision.message}; about {_f(add_t)} {u} more per run "
            f"({_f(total + add_t * reps)} {u} in all{h}), or {add_r} more replica(s) of "
            f"{_f(mean_len)} {u}{hr}")
    reasons.append(scaling.message)
    reasons += [c.message for c in checks if not c.blocking and c.passed is False]
    return Verdict(
        quantity=estimate.quantity, method=estimate.method, group=estimate.group,
        long_enough=long_enough, relative_stderr=r, target_relative_stderr=float(target),
        additional_time=add_t, time_unit=u, additional_replicas=add_r,
        wall_clock_hours=hours, wall_clock_hours_replicas=hours_r, run_time=total,
        replicas=reps, scaling=scaling, reasons=tuple(reasons), checks=tuple(checks),
    )


def too_short_verdict(
    error: Any,
    *,
    quantity: str,
    method: str,
    target: float,
    replicas: int = 1,
    group: str | None = None,
    seconds_per_time: float | None = None,
) -> Verdict:
    """The verdict on data too short for any estimate (a ``RunTooShortError``).

    Parameters
    ----------
    error : RunTooShortError
        The estimator's refusal; its ``extra_time`` (total over replicas for viscosity, per
        run for diffusion) and ``time_unit`` are used.
    quantity, method, group : str
        What was asked for.
    target : float
        Target relative standard error.
    replicas : int
        Number of replicas given.
    seconds_per_time : float, optional
        Wall-clock seconds per unit of simulated time at the logged speed.

    Returns
    -------
    Verdict
        Not long enough; ``additional_time`` is the least time that gives a first error bar
        (the time for the target cannot be projected before there is one), None when the
        estimator could not say.
    """
    if not (math.isfinite(target) and 0 < target < 1):
        raise ValueError(f"target must lie in (0, 1), got {target!r}")
    extra = getattr(error, "extra_time", None)
    unit = getattr(error, "time_unit", "") or ""
    reps = max(int(replicas), 1)
    per_run = None
    if extra is not None:
        per_run = float(extra) / reps if quantity == "shear_viscosity" else float(extra)
    what = error.one_line() if hasattr(error, "one_line") else str(error)
    msg = "too short for an error bar: " + what
    first = (f"at least {_f(per_run)} {unit} more per run gives a first error bar; the time "
             f"for the {target:.1%} target can be projected only from a run that has one"
             if per_run is not None else
             f"no estimate: the time for the {target:.1%} target cannot be projected")
    check = Check("estimate_possible", False, True, msg,
                  needed_time=None if per_run is None else per_run * reps)
    return Verdict(
        quantity=quantity, method=method, group=group, long_enough=False,
        relative_stderr=float("nan"), target_relative_stderr=float(target),
        additional_time=per_run, time_unit=unit, additional_replicas=None,
        wall_clock_hours=None if per_run is None or not seconds_per_time else
        per_run * reps * seconds_per_time / 3600.0,
        wall_clock_hours_replicas=None, run_time=float("nan"), replicas=reps,
        scaling=Scaling(0.5, "assumed", message="no error bar: the scaling was not checked"),
        reasons=(msg, first), checks=(check,),
    )

"""The named checks of a run-length verdict, each a reason the user can read.

Pure functions of an estimate (and the analysed run times): viscosity checks (analysed time
against the stress decorrelation time, independent pieces, a running integral that levels
off, a transient dropped), diffusion checks (diffusive regime reached, its onset against the
run, displacements against the particle spacing and the box, error bars from independent
blocks), and the precision check. :mod:`transport.convergence` combines them with the
projection into a :class:`~transport.convergence.Verdict`. The thresholds follow the
checklist of Maginn et al. [1]_ and are stated with their reason beside each constant.

References
----------
.. [1] E. J. Maginn, R. A. Messerly, D. J. Carlson, D. R. Roe and J. R. Elliott, "Best
   practices for computing transport properties 1. Self-diffusivity and viscosity from
   equilibrium molecular dynamics", LiveCoMS 1, 6324 (2019).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .estimate import Estimate, _jsonable

__all__ = ["Check"]

#: Independent pieces below which the error bar is too uncertain to project from: with n
#: pieces a standard error is itself uncertain by about 1/sqrt(2(n-1)), 24% at n = 10.
MIN_PIECES = 10
#: Analysed time, in stress decorrelation times, below which the time decomposition cannot
#: form MIN_PIECES pieces of 10 decorrelation times each (its segment rule).
MIN_DECORRELATION_TIMES = 100.0
#: The time decomposition's design: 20 pieces of at least 10 decorrelation times each.
GOOD_DECORRELATION_TIMES = 200.0
#: A transient longer than this fraction of the run suggests the run was not equilibrated.
MAX_TRANSIENT_FRACTION = 0.5
#: The local MSD slope d log MSD / d log t must be within this of 1 in the fit window (the
#: tolerance the diffusive-window rule uses, :mod:`transport.msd_fit`).
SLOPE_TOLERANCE = 0.1
#: The fit window must span at least this factor in lag time (the window rule's minimum).
MIN_WINDOW_SPAN = 2.0
#: The run must be at least this many times the onset of the diffusive regime (common
#: practice, from memory: many independent windows of the diffusive lag must fit in the run).
RUN_PER_ONSET = 10.0


@dataclass(frozen=True)
class Check:
    """One named check of a verdict.

    Attributes
    ----------
    name : str
        snake_case name (``precision``, ``run_vs_decorrelation``, ``levels_off``, ...).
    passed : bool or None
        Whether the check passed; None when it could not be made (data missing).
    blocking : bool
        Whether a failure makes the run "not long enough" (else a caution).
    message : str
        One sentence with the numbers, readable on its own.
    value, threshold : float or None
        The number checked and the bound it was held against, where there is one.
    needed_time : float or None
        Total analysed time (all replicas) at which a failed check would pass, where it
        follows from the check (a length rule); None otherwise.
    """

    name: str
    passed: bool | None
    blocking: bool
    message: str
    value: float | None = None
    threshold: float | None = None
    needed_time: float | None = None

    def to_record(self) -> dict[str, Any]:
        """JSON record."""
        return {"name": self.name, "passed": self.passed, "blocking": self.blocking,
                "message": self.message, "value": _jsonable(self.value),
                "threshold": _jsonable(self.threshold),
                "needed_time": _jsonable(self.needed_time)}


def _pieces(e: Estimate) -> float | None:
    """Independent pieces (segments, replicas) the estimator split the data into."""
    v = e.diagnostics.get("pieces")
    return float(v) if isinstance(v, (int, float)) and v > 1 else None



def _f(x: float) -> str:
    """Three significant digits, without an exponent between 1e-3 and 1e6."""
    if not math.isfinite(x) or x == 0:
        return f"{x:g}"
    mag = abs(x)
    if not 1e-3 <= mag < 1e6:
        return f"{x:.3g}"
    d = 2 - int(math.floor(math.log10(mag)))
    return f"{round(x, d):.{max(d, 0)}f}"


def _precision_check(r: float, target: float) -> Check:
    if not math.isfinite(r):
        return Check("precision", False, True, "no error bar: the precision cannot be judged",
                     None, target)
    ok = r <= target
    return Check("precision", ok, True,
                 f"relative standard error {r:.1%} {'meets' if ok else 'exceeds'} the target "
                 f"{target:.1%}", r, target)


def _viscosity_checks(e: Estimate, run_times: Sequence[float]) -> list[Check]:
    d, u = e.diagnostics, e.window_unit
    total = float(sum(run_times))
    out: list[Check] = []
    t_dec = d.get("decorrelation_time")
    if isinstance(t_dec, (int, float)) and t_dec > 0:
        ratio = total / t_dec
        ok = ratio >= MIN_DECORRELATION_TIMES
        good = ratio >= GOOD_DECORRELATION_TIMES
        msg = (f"analysed time {_f(total)} {u} is {ratio:.0f} stress decorrelation times "
               f"({_f(t_dec)} {u})")
        msg += ("" if good else f"; the time decomposition wants "
                f"{GOOD_DECORRELATION_TIMES:.0f} (20 pieces of 10)")
        out.append(Check("run_vs_decorrelation", ok, True, msg, ratio,
                         MIN_DECORRELATION_TIMES,
                         None if ok else MIN_DECORRELATION_TIMES * float(t_dec)))
    else:
        out.append(Check("run_vs_decorrelation", None, False,
                         "stress decorrelation time not reported by the estimator"))
    resolved = d.get("decorrelation_resolved")
    if isinstance(resolved, bool):
        b = d.get("decorrelation_growth_exponent")
        b_txt = f" (~T^{b:.2f})" if isinstance(b, (int, float)) and math.isfinite(b) else ""
        # a caution, not a blocker: the estimator's rule is a heuristic on the growth of the
        # decorrelation time (it also fires on plain OU stress 3000 decorrelation times
        # long); the running integral's own rise (levels_off) is the blocking test
        out.append(Check(
            "slow_relaxation_resolved", resolved, False,
            f"the stress decorrelation time stays put as data are added{b_txt}: the run "
            "resolves the slow stress relaxation" if resolved else
            f"the stress decorrelation time grows with the data{b_txt}: the run does not "
            "resolve the slow stress relaxation, so the running integral may be truncated "
            "and the viscosity too small; run longer until that time stops growing",
            float(b) if isinstance(b, (int, float)) else None, None))
    n = d.get("pieces", e.n_independent)
    if isinstance(n, (int, float)) and n:
        ok = n >= MIN_PIECES
        out.append(Check("independent_pieces", ok, True,
                         f"{n:.0f} independent pieces behind the error bar" + (
                             "" if ok else f" (fewer than {MIN_PIECES}: the error bar is "
                             f"itself uncertain by {1 / math.sqrt(2 * max(n - 1, 1)):.0%})"),
                         float(n), float(MIN_PIECES),
                         # pieces grow in proportion to the time below the target count
                         None if ok else total * MIN_PIECES / float(n)))
    if e.method == "green_kubo":
        out.append(_levels_off_check(e, total))
    elif e.method == "einstein" and e.window is not None and isinstance(t_dec, (int, float)):
        ok = e.window[0] >= t_dec
        out.append(Check("fit_after_decorrelation", ok, False,
                         f"Einstein fit starts at {_f(e.window[0])} {u}, "
                         f"{'after' if ok else 'before'} the stress decorrelation time "
                         f"({_f(t_dec)} {u})", e.window[0], float(t_dec)))
    out.append(_transient_check(d, run_times, u))
    return out


def _levels_off_check(e: Estimate, total: float | None = None) -> Check:
    d, u = e.diagnostics, e.window_unit
    cutoff = d.get("cutoff", e.window[1] if e.window else None)
    rising = d.get("still_rising")
    fp = d.get("fit_params")
    slow = None
    if isinstance(fp, Mapping) and "tau1" in fp and "tau2" in fp:
        slow = max(float(fp["tau1"]), float(fp["tau2"]))
    if cutoff is None:
        return Check("levels_off", None, False, "Green–Kubo cutoff not reported")
    seg = d.get("segment_length")
    where = f"cutoff {_f(cutoff)} {u}" + (
        f" ({cutoff / seg:.0%} of a {_f(seg)} {u} piece)" if isinstance(seg, (int, float))
        and seg > 0 else "")
    if rising:
        return Check("levels_off", False, True,
                     f"the running integral keeps rising after the {where}: no plateau "
                     "within the pieces (the viscosity is probably too small)",
                     float(cutoff), None)
    if slow is not None and slow > cutoff:
        # the automatic cutoff grows about in proportion to the run (measured T^0.6-1.1):
        # the run must grow by slow / cutoff for the cutoff to reach the slow decay
        auto = d.get("cutoff_rule") not in (None, "given")
        return Check("levels_off", False, True,
                     f"the fitted slow decay time ({_f(slow)} {u}) exceeds the {where}: the "
                     "plateau is an extrapolation", float(cutoff), slow,
                     total * slow / cutoff if auto and total and cutoff > 0 else None)
    rule = str(d.get("cutoff_rule", ""))
    if rule.startswith("maximum lag"):
        return Check("levels_off", True, False,
                     f"the running integral levels off, but the {where} sits at the maximum "
                     "lag (the spread of the pieces never reached the threshold)",
                     float(cutoff), None)
    return Check("levels_off", None if rising is None else True, True,
                 f"the running integral levels off before the {where}"
                 + ("" if rising is not None else " (rise not tested)"), float(cutoff), slow)


def _transient_check(d: Mapping[str, Any], run_times: Sequence[float], u: str) -> Check:
    skipped = d.get("skipped")
    if not isinstance(skipped, Sequence) or not skipped:
        return Check("transient", None, False, "initial transient not reported")
    sk = [float(s) for s in skipped]
    fr = [s / (s + r) if s + r > 0 else 0.0 for s, r in zip(sk, run_times, strict=False)]
    worst = max(fr) if fr else 0.0
    if max(sk) <= 0:
        return Check("transient", True, False, "no initial transient dropped (none detected "
                     "or none asked for)", 0.0, MAX_TRANSIENT_FRACTION)
    ok = worst <= MAX_TRANSIENT_FRACTION
    msg = (f"initial transient of up to {_f(max(sk))} {u} detected and dropped "
           f"({worst:.0%} of a run)")
    if not ok:
        msg += "; more than half the run was equilibrating: equilibrate longer"
    return Check("transient", ok, False, msg, worst, MAX_TRANSIENT_FRACTION)


def _diffusion_checks(e: Estimate, run_times: Sequence[float],
                      particle_spacing: float | None) -> list[Check]:
    d, c, u = e.diagnostics, e.curves, e.window_unit
    out: list[Check] = []
    run = float(min(run_times))
    if e.window is None:
        return [Check("diffusive_regime", None, False, "fit window not reported")]
    t0, t1 = e.window
    st, sl = c.get("slope_time"), c.get("local_slope")
    if st is not None and sl is not None:
        st, sl = np.asarray(st), np.asarray(sl)
        inside = (st >= t0) & (st <= t1) & np.isfinite(sl)
        alpha = float(np.median(sl[inside])) if inside.any() else float("nan")
        span = t1 / t0 if t0 > 0 else float("inf")
        ok = bool(abs(alpha - 1.0) <= SLOPE_TOLERANCE and span >= MIN_WINDOW_SPAN)
        msg = (f"local slope d log MSD / d log t is {alpha:.2f} (median) over the fit window "
               f"{_f(t0)}-{_f(t1)} {u}, a span of {span:.3g}x")
        if not ok:
            msg += (f"; the diffusive regime (slope 1 +- {SLOPE_TOLERANCE:g} over at least "
                    f"{MIN_WINDOW_SPAN:g}x) is not reached")
        out.append(Check("diffusive_regime", ok, True, msg, alpha, 1.0))
    ok = t0 <= run / RUN_PER_ONSET
    out.append(Check(
        "window_use", ok, True,
        f"the fit window {_f(t0)}-{_f(t1)} {u} uses {(t1 - t0) / run:.0%} of the "
        f"{_f(run)} {u} run; the diffusive regime begins at {t0 / run:.1%} of it"
        + ("" if ok else f" (the run should be at least {RUN_PER_ONSET:g}x that onset)"),
        t0 / run, 1.0 / RUN_PER_ONSET,
        None if ok else RUN_PER_ONSET * t0 * len(run_times)))
    out.extend(_displacement_checks(e, t1, particle_spacing, float(sum(run_times))))
    blocks = d.get("block_count")
    if isinstance(blocks, (int, float)):
        ok = blocks >= 4
        out.append(Check(
            "block_check", ok, False,
            f"error bar from (or checked on) {blocks:.0f} independent time blocks" if ok else
            "the error bar could not be compared with independent time blocks (the run holds "
            "fewer than 4 blocks that fit the window); it may be too small for correlated "
            "particles", float(blocks), 4.0))
    return out


def _displacement_checks(e: Estimate, t1: float, spacing: float | None,
                         total: float) -> list[Check]:
    d, c = e.diagnostics, e.curves
    lu = d.get("length_unit", "")
    t, msd = c.get("time"), c.get("msd")
    if t is None or msd is None or len(t) < 2:
        return [Check("rms_displacement", None, False, "MSD curve not available")]
    rms = math.sqrt(max(float(np.interp(t1, np.asarray(t), np.asarray(msd))), 0.0))
    out = []
    if spacing is None:
        vol, n = d.get("box_volume"), d.get("n_particles")
        if isinstance(vol, (int, float)) and isinstance(n, (int, float)) and n > 0:
            spacing = (vol / n) ** (1.0 / 3.0)  # of this species alone: an upper bound
    if spacing is not None and spacing > 0:
        ok = rms >= spacing
        out.append(Check(
            "rms_displacement", ok, True,
            f"root-mean-square displacement at the end of the fit window is {_f(rms)} {lu}, "
            f"{rms / spacing:.2g}x the particle spacing ({_f(spacing)} {lu})"
            + ("" if ok else ": the particles have not yet left their neighbours (molecular "
               "size); the slope may be a caged, not a diffusive, one"),
            rms, spacing,
            # MSD ~ t in the diffusive regime and the automatic window ends at a fixed
            # fraction of the run: the run must grow as (spacing / rms)^2
            None if ok or rms <= 0 else total * (spacing / rms) ** 2))
    box = d.get("box_lengths")
    if isinstance(box, Sequence) and box:
        lmin = float(min(box))
        # beyond half a box the result rests on continuous coordinates: fine when the reader
        # unwrapped them, a caution when they were taken as they are (unwrap "none")
        raw = [str(w) for w in (d.get("unwrap") or [])]
        ok = not (rms > 0.5 * lmin and any(w == "none" for w in raw))
        out.append(Check(
            "displacement_vs_box", ok, False,
            f"rms displacement {_f(rms)} {lu} is {rms / lmin:.2g}x the shortest box length "
            f"({_f(lmin)} {lu})" + ("" if ok else ": beyond half a box with coordinates "
                                    "taken as continuous (no unwrapping): check that the "
                                    "file holds unwrapped coordinates"), rms / lmin, 0.5))
    return out


def _generic_checks(e: Estimate) -> list[Check]:
    n = _pieces(e)
    if n is None:
        return []
    ok = n >= MIN_PIECES
    return [Check("independent_pieces", ok, True,
                  f"{n:.0f} independent pieces behind the error bar", n, float(MIN_PIECES))]

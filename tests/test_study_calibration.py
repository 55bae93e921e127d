"""Calibration of a study's significance calls over seeds: two candidates with equal truth.

Each seed is a synthetic study (:mod:`transport._study_data`) of two candidates whose stress
has exactly the same Green–Kubo viscosity, 2 replicas each; every run goes through the
per-run analysis (:func:`transport.study_analysis.analyse_run`, Green–Kubo with its
time-decomposition error bar) and the study's comparison
(:func:`transport.study_analysis.compare_study`: inverse-variance pooling of the replicas,
Welch's t on the difference, Holm). A calibrated test at alpha = 0.05 calls "significantly
different" in 5% of seeds (definition of the level). Only the false-positive rate is
asserted: with both candidates alike, a bias common to both cancels in the difference.
The coverage of the truth by each candidate's pooled interval is printed, not asserted:
at 20 ps per run the Green-Kubo estimate is biased high (measured on 100 runs: mean 5.39
for a true 5.0, single-run error bars ~8% smaller than the scatter), which is a finding about
short runs, not about the comparison. Measured (2026-12-05): 11 of 300 significant (3.7%),
coverage 565 of 599 (94.3%), 19 of 1200 runs refused as too short; with the whole-rule
jackknife error bar of Green-Kubo 7 of 300 (2.3%), coverage 570 of 598, 67 refused; 240 s
on the shared 2-core machine at load 5-8 (marked slow).

Number of seeds: 300 studies. The accepted counts 7..24 of 300 hold 98.4% of the binomial
(n = 300, p = 0.05) (scipy.stats.binom), so a calibrated test fails here 1.6% of the time;
a test whose true false-positive rate is 10% is caught with probability 0.86, one at 2%
with probability 0.61.
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest
from scipy.stats import binom

from transport._study_data import write_synthetic_study
from transport.parallel import TaskFailure, run_tasks
from transport.study import load_study
from transport.study_analysis import analyse_run, compare_study, run_tasks_of

SEEDS = 300
BATCH = 50  # studies written, analysed and deleted together (bounded disk: ~36 MB)
TRUTH = 5.0  # mPa s, both candidates


@pytest.mark.slow
def test_equal_candidates_false_positive_rate_is_nominal(tmp_path):
    # stress: two OU modes of 0.01 and 0.05 ps sampled every 4 fs; 5,000 rows = 20 ps =
    # 400 slow relaxation times per run, 40 per time-decomposition piece, so the
    # Green-Kubo cutoff catches the whole integral and the estimate is unbiased within its
    # error (the coverage below checks that too)
    significant, covered, n_intervals, refused, no_call = 0, 0, 0, 0, 0
    p_values = []
    for start in range(0, SEEDS, BATCH):
        studies = []
        for seed in range(start, start + BATCH):
            d = tmp_path / f"s{seed}"
            m = write_synthetic_study(
                d, truth={"a": {"T": TRUTH}, "b": {"T": TRUTH}},
                references={"T": (TRUTH, 0.1)}, temperatures={"T": 350.0}, replicas=2,
                rows=5000, rng=np.random.default_rng([2024, seed]), times_ps=(0.01, 0.05),
                file_format="npz", target=None)
            studies.append(load_study(m))
        tasks = [t for s in studies for t in run_tasks_of(s)]
        out = run_tasks(analyse_run, tasks, names=[t.run.name for t in tasks])
        k = 0
        for i, s in enumerate(studies):
            recs = [r for r in out[k:k + len(s.runs)] if not isinstance(r, TaskFailure)]
            refused += len(s.runs) - len(recs)
            k += len(s.runs)
            c = compare_study(s, recs, rng=np.random.default_rng(start + i), n_draws=200)
            (q,) = c.comparisons
            for cr in q.candidates:
                lo, hi = cr.estimate.interval
                covered += lo <= TRUTH <= hi
                n_intervals += 1
            if not q.differences:  # a candidate lost both runs: no call is made
                no_call += 1
                continue
            (diff,) = q.differences
            significant += diff.significant
            p_values.append(diff.p_value)
        for s in studies:
            shutil.rmtree(s.path.parent)
    print(f"significant {significant}/{SEEDS}, coverage {covered}/{n_intervals}, "
          f"runs refused {refused}/{4 * SEEDS}, studies without a call {no_call}")
    # a run is refused (RunTooShortError) when its Green-Kubo interval reaches zero: at this
    # length measured 67 of 1200 runs (5.6%; 19 before the error bar repeated the cutoff
    # choice on each leave-one-out set, which widens the unstable short-run fits; two
    # studies lost both runs of a candidate and make no call); the bound 7.5% (binomial sd
    # of 67 counts ~8, so +3 sd) flags a change in how often short runs are refused
    assert refused <= 0.075 * 4 * SEEDS and no_call <= 4, (refused, no_call)
    # accepted band of the false-positive count: the central 98.4% of binom(300, 0.05)
    lo, hi = int(binom.ppf(0.01, SEEDS, 0.05)), int(binom.ppf(0.99, SEEDS, 0.05))
    assert (lo, hi) == (7, 24)  # the band the docstring's power figures refer to
    # (the few studies without a call change the band by less than one count)
    assert lo <= significant <= hi, (significant, np.histogram(p_values, 10, (0, 1))[0])

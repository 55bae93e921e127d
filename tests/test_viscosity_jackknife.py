"""The linearised (infinitesimal) jackknife of the Green–Kubo fit against real refits.

The Green–Kubo error bar is the jackknife over independent pieces of the whole
double-exponential fit; to save n refits it is linearised: each leave-one-out curve differs
from the mean curve by O(1/n), so the plateau moves by the fit's sensitivity times that
change (Efron, "The Jackknife, the Bootstrap and Other Resampling Plans", SIAM 1982). The
reference here is the definition itself: n leave-one-out refits with the same cutoff, the
same weights and the same multi-start fit, and the textbook jackknife standard error
sqrt((n-1)/n sum (p_i - p_mean)^2).
"""

from __future__ import annotations

import numpy as np
import pytest

import transport.viscosity as vm
from transport.series import StressSeries
from transport.synthetic import OUStressModel

V, KT, ETA, DT = 1000.0, 1.0, 3.0, 0.01
MODEL = OUStressModel.for_viscosity(ETA, V, KT, times=[0.05, 0.5], fractions=[0.3, 0.7])


@pytest.mark.parametrize("seed", [80, 81])
def test_linearised_jackknife_equals_refitting(seed, monkeypatch):
    rng = np.random.default_rng(seed)
    reps = [StressSeries(MODEL.sample(40_000, DT, rng), DT, V, KT, "lj") for _ in range(2)]
    seen = {}
    real = vm._running_integrals

    def spy(prep, weights):
        acfs, integ = real(prep, weights)
        seen["integ"], seen["dt"] = integ, prep.dt
        return acfs, integ

    monkeypatch.setattr(vm, "_running_integrals", spy)
    g = vm.green_kubo(reps, skip=None)
    integ = seen["integ"]
    n = integ.shape[0]
    kc = int(round(g.diagnostics["cutoff"] / seen["dt"]))  # reduced units: no scale
    b = g.diagnostics["sigma_fit_b"]
    t = np.arange(integ.shape[1]) * seen["dt"]
    tt = t[1:kc + 1]
    full = vm._plateau(vm._fit_double_exp(tt, integ[:, 1:kc + 1].mean(axis=0), b))
    assert full == pytest.approx(g.value, rel=1e-9)  # the same fit as the estimator's
    loo = [vm._plateau(vm._fit_double_exp(tt, np.delete(integ, i, axis=0)[:, 1:kc + 1]
                                          .mean(axis=0), b)) for i in range(n)]
    loo = np.array(loo)
    refit_se = float(np.sqrt((n - 1) / n * np.sum((loo - loo.mean()) ** 2)))
    # DEVELOPERS.md: "agreed with refitting to 0.3% in the standard error on the coverage
    # test"; here (20 pieces) measured 0.5% and 1.2% on seeds 80 and 81. The
    # linearisation error is second order in the O(1/n) change of the curve; 3% allows for
    # the multi-start fit landing a little differently, and a jackknife off by 2x (or one
    # using the wrong n) fails by far.
    fixed = g.diagnostics["stderr_fixed_cutoff"]
    assert fixed == pytest.approx(refit_se, rel=0.03), (fixed, refit_se, n)
    assert n >= 10
    # The reported error bar repeats the whole rule (cutoff chosen again, fit again) on each
    # leave-one-out set. On OU stress the cutoff moves little, so it stays close to the
    # fixed-cutoff one (measured ratio 1.037 and 1.023 on seeds 80 and 81; median 1.01 and
    # at most 1.54 over seeds 80-99): a ratio outside [0.8, 1.6] would mean the repeated
    # rule is not the estimator's rule.
    assert 0.8 < g.stderr / fixed < 1.6, (g.stderr, fixed)

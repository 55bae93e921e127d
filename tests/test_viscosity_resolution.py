"""Is the slow stress relaxation resolved? The growth check of the decorrelation time.

The decorrelation time that sets segments, lags and the Einstein window is measured on the
first eighth, quarter, half and all of the longest run and fitted as T^b
(`transport.viscosity._growth_note`). A time set by the liquid stays put (b ~ 0); one set by
the run length grows (b ~ 1), and then the run cannot show where the running Green–Kubo
integral levels off. Real engine output from tests/data (see the READMEs there):
- Lennard-Jones logs (atomic liquid, one relaxation time scale): must not be flagged;
- 100 flexible n-hexane molecules, 2 ns NVE: pieces of 250 ps and 500 ps give Green–Kubo
  values 10-35% below the whole run's (measured 0.148-0.232 mPa s against 0.231 +- 0.014)
  because their lags cannot reach the slow tail; they must be said to be too short.
Values "measured" were measured on these files on 2026-12-05.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from transport.io import load_stress
from transport.series import StressSeries
from transport.viscosity import UNRESOLVED_EXPONENT, analyse_viscosity

DATA = Path(__file__).parent / "data"
HEXANE = DATA / "alkane" / "hexane.log.xz"
LJ = sorted((DATA / "lj_viscosity").glob("lj_visc_rep*.log.gz"))


def test_committed_data_present():
    # committed data missing is a failure, not a skip
    assert HEXANE.is_file()
    assert len(LJ) == 4


@pytest.fixture(scope="module")
def hexane():
    return load_stress(HEXANE, units="real", temperature=298.15)


def _pieces(s: StressSeries, k: int) -> list[StressSeries]:
    n = s.n // k
    return [StressSeries(s.pressure[:, j * n:(j + 1) * n].copy(), s.dt, s.volume,
                         s.temperature, s.units) for j in range(k)]


@pytest.mark.parametrize("path", LJ, ids=lambda p: p.name)
def test_atomic_liquid_is_resolved(path):
    # measured b = -0.01, 0.33, 0.42, -0.01 on the four logs: Sokal's window (about 0.6
    # tau) is the same on every length; at most one step where blocking takes over
    gk = analyse_viscosity(load_stress(path)).green_kubo
    d = gk.diagnostics
    assert d["decorrelation_resolved"] is True
    assert d["decorrelation_growth_exponent"] < UNRESOLVED_EXPONENT
    assert not any("does not resolve" in w for w in gk.warnings)


@pytest.mark.slow
@pytest.mark.parametrize("k", [4, 8])
def test_short_molecular_runs_are_said_to_be_too_short(hexane, k):
    # pieces of 500 ps (k = 4, measured b = 0.70-1.26) and 250 ps (k = 8, b = 0.53-1.00):
    # every one is flagged, in the diagnostics and in a warning that says to run longer
    whole = analyse_viscosity(hexane).green_kubo.value
    low = 0
    for piece in _pieces(hexane, k):
        gk = analyse_viscosity(piece, skip=None).green_kubo
        d = gk.diagnostics
        assert d["decorrelation_resolved"] is False
        assert d["decorrelation_growth_exponent"] >= UNRESOLVED_EXPONENT
        times = np.array(d["decorrelation_growth_times"])
        assert times[-1] > times[0]  # the time grows with the data: the point of the check
        assert any("does not resolve the slow stress relaxation" in w and "run longer" in w
                   for w in gk.warnings)
        low += gk.value < whole
    # the flag is not idle: most pieces fall below the whole run's value (measured 8/8 and
    # 4/4 below 0.231; a fair coin would give all k below with probability 2^-k)
    assert low >= k - 1

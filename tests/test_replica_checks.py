"""Replicas that cannot be the same system are refused, naming the property (issue 15, item 5).

Real data: the LJ viscosity logs (864 atoms, rho* = 0.8442, T* = 0.722; tests/data/
lj_viscosity) and the LJ diffusion trajectory (1372 atoms at the same density and
temperature; tests/data/lj_diffusion). The same liquid at 1372 atoms has a volume
1372/864 = 1.59 times larger: the issue's case of two systems pooled as replicas.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from transport.checks import REPLICA_TEMPERATURE_RTOL, REPLICA_VOLUME_RTOL, check_replicas
from transport.diffusion import analyse_diffusion
from transport.errors import InputError
from transport.io import load_stress
from transport.io.trajectory import load_trajectory, positions_from_arrays
from transport.synthetic import brownian_positions
from transport.viscosity import analyse_viscosity

DATA = Path(__file__).parent / "data"
LOGS = [DATA / "lj_viscosity" / f"lj_visc_rep{k}.log.gz" for k in (1, 2)]
LJ_DIFF = DATA / "lj_diffusion"


@pytest.fixture(scope="module")
def stress():
    return [load_stress(f, temperature=0.722) for f in LOGS]


def test_real_replicas_pass(stress):
    # two replicas of one state point: their mean volumes agree far inside 5% (the box is
    # fixed here) and the temperature is the same set point
    check_replicas(stress)
    assert abs(stress[0].mean_volume / stress[1].mean_volume - 1) < REPLICA_VOLUME_RTOL


def test_stress_replica_of_another_size_is_refused(stress):
    bigger = dataclasses.replace(stress[1], volume=stress[1].volume * 1372 / 864)
    with pytest.raises(InputError, match=r"not the same system: mean volume .* differ by "
                                         r"37\.0%") as err:
        analyse_viscosity([stress[0], bigger], method="green-kubo")
    assert "lj_visc_rep1.log.gz" in str(err.value) and "lj_visc_rep2.log.gz" in str(err.value)
    # inside the tolerance (a barostat's few-per-mille scatter of mean volumes): accepted
    check_replicas([stress[0], dataclasses.replace(stress[1], volume=stress[1].volume
                                                   * (1 + REPLICA_VOLUME_RTOL / 2))])


def test_stress_replica_at_another_temperature_is_refused(stress):
    hotter = stress[1].with_temperature(0.80, "given")  # 0.722 -> 0.80: 9.75% apart
    with pytest.raises(InputError, match=r"not the same system: temperature 0\.722"):
        analyse_viscosity([stress[0], hotter], method="green-kubo")
    close = stress[1].with_temperature(0.722 * (1 + REPLICA_TEMPERATURE_RTOL / 2), "given")
    check_replicas([stress[0], close])


@pytest.fixture(scope="module")
def lj_trajectory():
    return load_trajectory(LJ_DIFF / "lj.data", LJ_DIFF / "lj_diff.dcd", units="lj",
                           timestep=0.005)[0]


def test_trajectory_replica_with_other_atoms_is_refused(lj_trajectory):
    # 864 atoms in the box the same density gives them (L = 10.0776 sigma), 401 frames at
    # the real run's frame interval: another system, named by its atom count
    rng = np.random.default_rng(15)
    x = brownian_positions(lj_trajectory.n_frames, 864, lj_trajectory.dt, 0.03, 10.077577,
                           rng)
    other = positions_from_arrays(x, 10.077577, lj_trajectory.dt, units="lj",
                                  temperature=lj_trajectory.temperature)
    with pytest.raises(InputError, match=r"number of atoms 1372 \(.*lj_diff.dcd\) and 864"):
        analyse_diffusion([lj_trajectory, other])


def test_trajectory_replica_in_another_box_is_refused(lj_trajectory):
    s = lj_trajectory
    shrunk = dataclasses.replace(s, box=s.box * 0.9)  # volume 0.729x: 27.1% apart
    with pytest.raises(InputError, match=r"mean volume .* differ by 27\.1%"):
        analyse_diffusion([s, shrunk])
    # the DCD has no velocities: the set point T* = 0.722 of the run, and 0.80
    with pytest.raises(InputError, match=r"temperature 0\.722 \(reduced\)"):
        analyse_diffusion([s.with_temperature(0.722, "given"),
                           s.with_temperature(0.80, "given")])

"""FFT mean-squared displacement against direct sums and MDAnalysis's own MSD class."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose

from transport.stats import msd, msd_per_particle


def _direct_msd(pos):
    """MSD_i(k) = 1/(N-k) sum_t |r_i(t+k) - r_i(t)|^2, term by term (reference)."""
    p = np.asarray(pos, dtype=np.float64)
    n = p.shape[0]
    out = np.zeros((p.shape[1], n))
    for k in range(1, n):
        out[:, k] = np.mean(np.sum((p[k:] - p[: n - k]) ** 2, axis=-1), axis=0)
    return out


def _walk(rng, frames, particles, offset=0.0, dims=3):
    return np.cumsum(rng.normal(size=(frames, particles, dims)), axis=0) + offset


@pytest.mark.parametrize("offset", [0.0, 1.0e4])
def test_msd_equals_direct_sums(offset):
    # With a large offset the two terms S1 and 2 S2 are ~1e8 each; subtracting each
    # particle's mean position first keeps the difference accurate (DESIGN.md: ~4e-11
    # relative error at short lags without it). 1e-12 of the largest value is a few ulps
    # of the O(N |r|^2) sums after the shift.
    rng = np.random.default_rng(21)
    pos = _walk(rng, 80, 7, offset)
    want = _direct_msd(pos)
    got = msd_per_particle(pos)
    assert got.shape == (7, 80)
    assert_allclose(got, want, rtol=0, atol=1e-12 * want.max())
    assert_allclose(msd(pos), want.mean(axis=0), rtol=0, atol=1e-12 * want.max())
    # short lags, where cancellation would show first: relative accuracy per point
    assert_allclose(got[:, 1:5], want[:, 1:5], rtol=1e-11)


def test_msd_chunks_max_lag_and_dimensions():
    rng = np.random.default_rng(22)
    pos = _walk(rng, 64, 10, dims=2)
    want = _direct_msd(pos)
    for chunk in (1, 3, 10, 64):
        got = msd_per_particle(pos, max_lag=20, chunk_size=chunk)
        assert_allclose(got, want[:, :21], rtol=0, atol=1e-12 * want.max())
    assert msd(pos, max_lag=5).shape == (6,)


def test_msd_of_float32_positions_is_computed_in_float64():
    rng = np.random.default_rng(23)
    pos = _walk(rng, 50, 4, offset=100.0).astype(np.float32)
    got = msd_per_particle(pos)
    assert got.dtype == np.float64
    # reference on the same float32 values converted exactly to float64
    want = _direct_msd(pos.astype(np.float64))
    assert_allclose(got, want, rtol=0, atol=1e-12 * want.max())


def test_msd_of_memmap_in_chunks(tmp_path):
    rng = np.random.default_rng(24)
    pos = _walk(rng, 40, 9).astype(np.float32)
    mm = np.lib.format.open_memmap(tmp_path / "pos.npy", mode="w+", dtype=np.float32,
                                   shape=pos.shape)
    mm[:] = pos
    mm.flush()
    ro = np.load(tmp_path / "pos.npy", mmap_mode="r")
    assert_allclose(msd(ro, chunk_size=2), msd(pos), rtol=1e-14)


def test_msd_matches_mdanalysis_einstein_msd():
    # Reference library: MDAnalysis.analysis.msd.EinsteinMSD with fft=False computes the
    # same time-origin average by direct differences (DESIGN.md: agreement 1e-12).
    mda = pytest.importorskip("MDAnalysis")
    from MDAnalysis.analysis.msd import EinsteinMSD
    from MDAnalysis.coordinates.memory import MemoryReader

    rng = np.random.default_rng(25)
    pos = _walk(rng, 150, 12, offset=30.0).astype(np.float32)
    u = mda.Universe.empty(pos.shape[1], trajectory=True)
    u.load_new(pos, format=MemoryReader, order="fac")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # e.g. "no dimensions"/unwrapping notices
        ref = EinsteinMSD(u, select="all", msd_type="xyz", fft=False).run()
    assert_allclose(msd(pos), ref.results.timeseries, rtol=1e-12, atol=1e-12)
    assert_allclose(msd_per_particle(pos).T, ref.results.msds_by_particle, rtol=1e-12,
                    atol=1e-12)


def test_msd_brownian_walk_is_linear():
    # Exact: for independent Gaussian steps of variance s^2 per dimension, the expected
    # MSD is d s^2 k. Averaged over 400 particles x 200 origins, the relative standard
    # error at lag 10 is ~sqrt(2/(d * 400 * 200/10)) ~ 1%; 5% is >4 sigma.
    rng = np.random.default_rng(26)
    pos = _walk(rng, 2000, 400) * 0.5  # s = 0.5
    m = msd(pos, max_lag=10)
    assert_allclose(m[1:], 3 * 0.25 * np.arange(1, 11), rtol=0.05)


@pytest.mark.parametrize(
    ("shape", "kwargs", "match"),
    [
        ((10, 3), {}, "shape"),
        ((1, 3, 3), {}, "2 frames"),
        ((10, 3, 3), {"max_lag": 10}, "max_lag"),
        ((10, 3, 3), {"chunk_size": 0}, "chunk_size"),
    ],
)
def test_msd_bad_input(shape, kwargs, match):
    with pytest.raises(ValueError, match=match):
        msd(np.zeros(shape), **kwargs)

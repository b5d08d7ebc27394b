"""Batch-means errors of spectral integrals from groups of Welch segments (segment_groups.py)."""

import numpy as np
import pytest
from scipy import signal as sps

from eddyvigil.stats.segment_groups import (
    MAX_GROUPS,
    MIN_GROUPS,
    SEGMENTS_PER_GROUP,
    GroupStore,
    band_layout,
)
from eddyvigil.stats.spectra import SpectrumAccumulator
from tests.processes import ar1


def test_group_band_sums_add_up_to_the_welch_integral_at_every_edge():
    # The groups' b^2-weighted band sums, pooled, are the integral sum_b b^2 S(b) of the Welch
    # estimate that scipy.signal.welch gives (Welch 1967; scipy as the reference) up to each
    # band edge (below Nyquist): the kernel's bookkeeping loses and doubles nothing.
    rng = np.random.default_rng(5)
    x = ar1(rng, 3 * 2**14 + 77, 2, np.exp(-1 / 8))
    acc = SpectrumAccumulator(("u", "v"), 1000.0, segment=256)
    for k in range(0, x.shape[0], 1000):
        acc.update(x[k : k + 1000])
    acc.flush()
    spec = acc.snapshot()
    _, ref = sps.welch(x[: acc.n], fs=1000.0, window="hann", nperseg=256, axis=0)
    g = spec.groups
    assert int(g.counts.sum()) == spec.segments
    b = np.arange(ref.shape[0])
    # S = 2 |X|^2 scale / K below Nyquist; the groups hold sum_K b^2 |X_b|^2
    to_psd = 2.0 * acc._scale / spec.segments
    for j, e in enumerate(g.edges[:-1]):
        want = (b[1 : e + 1, None] ** 2 * ref[1 : e + 1]).sum(axis=0)
        got = g.cumulative[:, :, j].sum(axis=0) * to_psd
        np.testing.assert_allclose(got, want, rtol=1e-9)


def test_store_stays_bounded_and_groups_stay_about_equal():
    edges = band_layout(64).edges
    store = GroupStore(1, edges)
    for _ in range(1000):
        store.add(np.array([4, 4]), np.ones((2, 1, edges.size)))  # half groups join up
    snap = store.snapshot()
    assert MAX_GROUPS // 2 <= snap.groups <= MAX_GROUPS
    assert int(snap.counts.sum()) == 8000
    assert snap.counts.max() <= 2 * snap.counts.min()


def test_batch_means_error_matches_the_spread_of_independent_groups():
    # Independent groups (one value per group, unit band sums times a random level): the
    # relative error is the textbook standard error of a mean of B iid values over their
    # mean (common practice), here with equal group sizes.
    edges = band_layout(64).edges
    rng = np.random.default_rng(11)
    levels = rng.gamma(5.0, 1.0, size=40)
    store = GroupStore(1, edges)
    store.add(np.full(40, SEGMENTS_PER_GROUP), levels[:, None, None] * np.ones((40, 1, edges.size)) / edges.size)
    rel, dof = store.snapshot().relative_error(0, int(edges[-1]))
    assert dof == 39
    assert rel == pytest.approx(levels.std(ddof=1) / np.sqrt(40) / levels.mean(), rel=1e-12)
    few = GroupStore(1, edges)
    few.add(np.full(MIN_GROUPS - 1, SEGMENTS_PER_GROUP), np.ones((MIN_GROUPS - 1, 1, edges.size)))
    assert np.isnan(few.snapshot().relative_error(0, 10)[0])


def test_merge_concatenates_the_groups():
    rng = np.random.default_rng(3)
    x = ar1(rng, 2**15, 1, np.exp(-1 / 5))
    a = SpectrumAccumulator(("u",), 100.0, segment=128).update(x[: 2**14])
    b = SpectrumAccumulator(("u",), 100.0, segment=128).update(x[2**14 :])
    m = a.merge(b).snapshot()
    assert int(m.groups.counts.sum()) == m.segments == a.segments + b.segments
    ga, gb = a.flush().snapshot().groups, b.flush().snapshot().groups
    assert m.groups.groups <= ga.groups + gb.groups
    np.testing.assert_allclose(
        m.groups.cumulative[:, 0, -1].sum(),
        ga.cumulative[:, 0, -1].sum() + gb.cumulative[:, 0, -1].sum(), rtol=1e-12)

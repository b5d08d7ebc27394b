"""The slow-content guard (blocking._rise_test) and the verdict's memory of it (issue 12).

The rise test pools the Haar detail energies of the coarse blocking levels against a
bias-cancelled fine reference; its level rests on the orthogonal split of each level's sum of
squares (Percival & Walden 2000, Wavelet Methods for Time Series Analysis, ch. 8, from memory),
checked here against numpy, and its false-alarm rate on short-memory data (AR(1), the exact
Ornstein-Uhlenbeck sampling of REFERENCES §10) against the nominal SLOW_ALPHA.
"""

import numpy as np
from processes import ar1, two_scale

from eddyvigil.stats import PointStatistics, Targets
from eddyvigil.stats.blocking import SLOW_ALPHA, BlockingAccumulator
from eddyvigil.stats.convergence import STREAK, Checkpoints
from eddyvigil.stats.pointstate import from_state, to_state


def test_detail_energy_is_the_haar_split_of_the_level_sums_of_squares():
    # level k's sum of squares about the grand mean = twice level k+1's + 1/2 sum of squared
    # differences of the pairs + the unpaired block's square (Haar split; numpy reshapes)
    x = np.random.default_rng(5).normal(size=(64 * 1000 + 17, 1))
    acc = BlockingAccumulator(1, base=64).update(x)
    c0, _, n = acc._autocovariances(np.eye(acc.D)[:1])
    y = x[: 64 * 1000, 0].reshape(1000, 64).mean(axis=1)
    mu = y.mean()
    for k in range(5):
        nk = y.size
        pairs = y[: nk // 2 * 2].reshape(-1, 2)
        want = 0.5 * np.sum((pairs[:, 0] - pairs[:, 1]) ** 2)
        if nk % 2:
            want += (y[-1] - mu) ** 2
        got = n[k] * c0[0, k] - 2 * n[k + 1] * c0[0, k + 1]
        assert n[k] == nk
        np.testing.assert_allclose(got, want, rtol=1e-9)
        y = pairs.mean(axis=1)


def _looks(x):
    """Rise-test outcome for U at each checkpoint of a point where U has no target (so no
    memory of a rise)."""
    targets = Targets.from_dict({"targets": {"uu": {"relative": 1e-6}}})
    ps = PointStatistics(("u",), 1000.0, targets=targets)
    out = []
    for k in range(0, x.shape[0], 4096):
        ps.update(x[k : k + 4096])
        if ps._checkpoint_ev is not None:
            out.append(ps._checkpoint_ev.rise_level[0] >= 0)
    return np.array(out)


def test_false_alarm_rate_per_look_on_short_memory_data_is_at_most_nominal():
    # AR(1) with T_int 10 and 50 samples, 60 records of 2^17 samples each, every look at
    # 5 % checkpoints: the share of looks that flag must not exceed SLOW_ALPHA (1 %) beyond
    # three binomial standard errors of the looks (they are correlated: a loose bound)
    for t, seed in ((10.0, 100), (50.0, 200)):
        rho = np.exp(-1 / t)
        looks = np.concatenate(
            [_looks(ar1(np.random.default_rng(seed + r), 2**17, 1, rho)) for r in range(60)]
        )
        bound = SLOW_ALPHA + 3 * np.sqrt(SLOW_ALPHA * (1 - SLOW_ALPHA) / looks.size)
        assert looks.mean() <= bound, (t, looks.mean(), looks.size)


def test_the_rise_is_seen_on_strong_slow_content():
    # w = 0.05 of the variance at T = 5000 samples under T = 5 (REFERENCES §12: N Var(mean)
    # about 500 against 10 for the fast part alone); by 2^18 samples the test must have fired
    # in nearly every record
    seen = [
        _looks(two_scale(np.random.default_rng(300 + r), 2**18, 0.05)[:, :1]).any()
        for r in range(20)
    ]
    assert np.mean(seen) >= 0.9


def test_a_rise_once_seen_holds_until_its_level_has_its_blocks():
    # once a checkpoint's rise test fires, the point keeps the level it asked for: the
    # statistic stays held ("slow content") while fewer than 64 blocks of that length exist,
    # and the memory survives copy and the saved state (REFERENCES §11: 64 blocks per level)
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.05}}})
    x = two_scale(np.random.default_rng(11), 2**18, 0.05)[:, :1]
    ps = PointStatistics(("u",), 1000.0, targets=targets)
    held_after = []
    for k in range(0, x.shape[0], 8192):
        ps.update(x[k : k + 8192])
        if ps.checkpoints.slow_level:
            snap = ps.snapshot()
            e = snap.estimate("U")
            held_after.append((e.blocks, e.state, e.reason, bool(snap.suspect)))
    assert held_after, "the rise was never seen"
    for blocks, state, reason, drift in held_after:
        if blocks < 64:
            # held: by this guard, or by the stationarity guard, which speaks first
            assert state == "suspect", (blocks, state)
            assert drift or reason.startswith("slow content"), (blocks, reason)
    level = ps.checkpoints.slow_level["U"]
    assert ps.copy().checkpoints.slow_level == {"U": level}
    assert from_state(*to_state(ps)).checkpoints.slow_level == {"U": level}


def test_a_level_jump_keeps_the_streak():
    # the rule (REFERENCES §11, STREAK consecutive checkpoints): a checkpoint whose only
    # shortfall is the block count of a level that just jumped neither adds to the streak
    # nor restarts it
    cp = Checkpoints()
    for n in (8192, 8602):
        cp.record(n, {"U": True}, 1.0)
    assert cp.is_converged("U")
    cp.record(9033, {"U": None}, 1.0)
    assert cp.streak["U"] == STREAK and cp.is_converged("U")
    cp.record(9485, {"U": False}, 1.0)
    assert cp.streak["U"] == 0


def test_the_verdict_does_not_regress_when_the_level_jumps():
    # a clean AR(1) record (T_int 10 samples, seed chosen so that the chosen level of U jumps
    # three times while U is converged): U stays converged through every jump
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.05}}})
    x = 10.0 + ar1(np.random.default_rng(3), 2**18, 1, np.exp(-1 / 10))
    ps = PointStatistics(("u",), 1000.0, targets=targets)
    prev, jumps = None, 0
    for k in range(0, x.shape[0], 4096):
        ps.update(x[k : k + 4096])
        if ps._checkpoint_ev is None:
            continue
        e = ps.targeted_snapshot().estimate("U")
        if prev is not None and prev.converged and e.blocks < prev.blocks:
            jumps += 1
            assert e.converged, (ps.n, prev.blocks, e.blocks, e.state, e.reason)
        prev = e
    assert jumps >= 2

"""The pipeline's parts on their own: sequence accounting and the display trace.

Sequence counts are checked against what the test itself dropped, repeated or broke (the
numbering rule of DESIGN §2: every message of a session takes the next ``seq``); the trace
against numpy slicing of the blocks sent (numpy reference).
"""

from __future__ import annotations

import numpy as np

from eddyvigil.monitor.display import TRACE_ROWS, TRACE_ROWS_PER_MESSAGE, History, Trace
from eddyvigil.monitor.sequence import SequenceAccount


def test_losses_gaps_and_duplicates_are_what_was_dropped_and_repeated():
    rng = np.random.default_rng(11)
    start = 37  # messages sent before the monitor listened are not losses
    sent = np.arange(start, start + 2000)
    dropped = rng.random(sent.size) < 0.05
    dropped[0] = False
    unreadable = (rng.random(sent.size) < 0.02) & dropped  # arrived, but no seq could be read
    account = SequenceAccount()
    duplicates = 0
    for seq, drop, broken in zip(sent, dropped, unreadable, strict=True):
        if broken:
            account.unreadable()
        elif not drop:
            assert account.check("s1", int(seq)).duplicate is False
            if rng.random() < 0.03:  # the same message again
                assert account.check("s1", int(seq)) == (True, 0)
                duplicates += 1
    lost = dropped & ~unreadable
    # a gap is a run of seqs never seen, unreadable ones excepted, ending at a seen one
    seen = ~dropped
    runs, in_run, any_lost = 0, False, False
    for s, lo in zip(seen, lost, strict=True):
        if s:
            runs += in_run and any_lost
            in_run, any_lost = False, False
        else:
            in_run, any_lost = True, any_lost or lo
    assert duplicates > 0 and lost.sum() > 0
    assert account.lost == lost.sum() - _tail(seen, lost)
    assert account.gaps == runs
    assert account.restarts == 0


def _tail(seen, lost) -> int:
    """Losses after the last seq seen are not yet known (no later message shows them)."""
    last_seen = np.flatnonzero(seen)[-1]
    return int(lost[last_seen + 1 :].sum())


def test_a_new_session_is_a_restart_with_a_fresh_baseline():
    account = SequenceAccount()
    assert account.check("s1", 0) == (False, 0)
    assert account.check("s1", 1) == (False, 0)
    assert account.is_restart("s2") and not account.is_restart("s1")
    assert account.check("s2", 500) == (False, 0)  # a new baseline, not 498 lost
    assert account.check("s2", 503) == (False, 2)
    assert (account.session, account.restarts, account.gaps, account.lost) == ("s2", 1, 1, 2)


def test_trace_is_every_stride_th_row_of_the_latest_blocks():
    rng = np.random.default_rng(3)
    rate = 1000.0
    trace = Trace()
    kept_t, kept_x, t0 = [], [], 0.0
    for n in rng.integers(1, 3000, 40):
        block = rng.standard_normal((n, 2))
        trace.add(block, ("u", "v"), rate, None, t0)
        stride = int(np.ceil(n / TRACE_ROWS_PER_MESSAGE))
        kept_x.append(block[::stride])
        kept_t.append(t0 + np.arange(0, n, stride) / rate)
        t0 += n / rate
    want_x = np.concatenate(kept_x)[-TRACE_ROWS:]
    want_t = np.concatenate(kept_t)[-TRACE_ROWS:]
    got = trace.window()
    np.testing.assert_array_equal(got["u"], want_x[:, 0])
    np.testing.assert_array_equal(got["v"], want_x[:, 1])
    np.testing.assert_allclose(got["t"], want_t, rtol=0, atol=1e-12)
    got["u"][:] = 0.0  # a copy: the buffer is not touched
    np.testing.assert_array_equal(trace.window()["u"], want_x[:, 0])


def test_history_keeps_every_other_row_when_full():
    class Snap:
        def __init__(self, d):
            self.duration_s = d

        def targeted(self):
            return ()

    history = History(limit=8)
    for d in range(13):
        history.add(Snap(float(d)))
    # halved at 8 rows (0..7 -> 0, 2, 4, 6), filled to 8 again (8..11) and halved, then 12
    np.testing.assert_array_equal(history.arrays()["duration_s"], [0.0, 4.0, 8.0, 10.0, 12.0])

"""The dashboard's budget panel, without a server: columns from finished point summaries."""

from __future__ import annotations

import math

import numpy as np
from test_budget import Y, _lines

from eddyvigil.monitor.dashboard.budget_panel import BUDGET_TERMS, BudgetPanel, budget_columns
from eddyvigil.monitor.state import StreamView


def _view(finished):
    return StreamView(stream="probe-a", session="s1", point={"id": "next", "y": 0.1},
                      point_index=len(finished), stats=None, trace={}, history={},
                      finished=tuple(finished), converged_wall_age_s=None, rate_hz=1000.0,
                      received_rate_hz=1000.0, messages=1, lost_messages=0, gaps=0, restarts=0,
                      rejected={})


def test_columns_follow_the_budget_line():
    """Linear U and constant uv (test_budget._lines): production -<uv> dU/dy = 0.2 exactly
    (Pope 2000 thin shear layer), its interval around it; terms without data are NaN."""
    cols = budget_columns(_view(_lines()[::-1]))
    np.testing.assert_allclose(cols["coord"], Y)
    np.testing.assert_allclose(cols["production"], 0.2, rtol=1e-9)
    assert all(lo < 0.2 < hi for lo, hi in zip(cols["production_lo"], cols["production_hi"],
                                               strict=True))
    assert all(math.isnan(v) for v in cols["dissipation"])
    assert set(cols["production_limit"]) <= set(cols["point"])
    lengths = {len(v) for v in cols.values()}
    assert lengths == {Y.size}


def test_no_points_and_too_few_points():
    empty = budget_columns(None)
    assert empty["coord"] == [] and set(BUDGET_TERMS) <= set(empty)
    two = budget_columns(_view(_lines()[:2]))
    assert len(two["coord"]) == 2 and all(math.isnan(v) for v in two["production"])


def test_panel_updates_only_when_points_finish():
    panel = BudgetPanel(height=300)
    view = _view(_lines()[:5])
    panel.update(view, "y")
    first = panel.source.data
    assert len(first["coord"]) == 5
    panel.update(view, "y")
    assert panel.source.data is first  # nothing new: the same data object
    panel.update(_view(_lines()), "y")
    assert len(panel.source.data["coord"]) == Y.size

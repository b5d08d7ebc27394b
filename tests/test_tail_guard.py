"""The tail guard on light but skewed tails (stats/tails.py, issue 12).

y = z + 0.2 (z^2 - 1) of a Gaussian AR(1) (REFERENCES §10) has every moment, so every
interval it withholds is withheld wrongly; the heavy-tailed side (Student-t(5): withheld in
>= 90 % of records) is in test_coverage_hard.py.
"""

import numpy as np
from processes import ar1, skewed

from eddyvigil.stats.tails import TAIL_MARGIN, TailAccumulator, needed_order


def test_light_skewed_tails_keep_most_third_moment_intervals():
    # 200 records of 12 000 samples (T_int 10 samples): third moments need the 6th; withheld
    # in at most 40 % (measured 32 %; 42.5 % with the former k = sqrt(N)/2)
    q = needed_order("third")
    withheld = 0
    for r in range(200):
        x = skewed(ar1(np.random.default_rng(77 + r), 12_000, 1, np.exp(-0.1)), 0.2)
        alpha = TailAccumulator(1).update(x).tail_index(x.mean(axis=0))[0]
        withheld += alpha <= TAIL_MARGIN * q
    assert withheld / 200 <= 0.40, withheld / 200

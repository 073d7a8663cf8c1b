"""The equal sensitivity-specificity threshold rule against its definition and scikit-learn."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import roc_curve

from timeslice.niche import evaluate as ev

PRES = np.array([0.9, 0.8, 0.4, 0.2])
BACK = np.array([0.7, 0.6, 0.3, 0.1, 0.05])


def test_equal_ss_worked_example():
    # Liu et al. (2005), Ecography 28:385 ("Sens=Spec"; Cantor et al. 1999): the threshold where
    # sensitivity (share of presences >= t) and specificity (share of background < t) are
    # closest. By hand over the candidates, |sens - spec|:
    # t=0.05: 1-0=1.0  0.1: 1-.2=.8  0.2: 1-.4=.6  0.3: .75-.4=.35  0.4: .75-.6=.15
    # 0.6: .5-.6=.1  0.7: .5-.8=.3  0.8: .5-1=.5  0.9: .25-1=.75  -> 0.6
    assert ev.threshold(PRES, BACK, rule="equal_ss") == 0.6
    # exact crossing: presences 0.6, 0.8; background 0.2, 0.7 -> at t=0.7 sens = spec = 0.5,
    # and t=0.6 gives sens 1, spec 0.5; the crossing at 0.7 wins
    assert ev.threshold([0.6, 0.8], [0.2, 0.7], rule="equal_ss") == 0.7


def test_equal_ss_matches_scikit_learn_roc(rng):
    # reference: sklearn.metrics.roc_curve (tpr = share of positives with score >= t, fpr the
    # same for negatives); the rule is argmin |tpr - (1 - fpr)|, lowest threshold on ties
    for _ in range(20):
        p = rng.normal(0.6, 0.2, int(rng.integers(5, 80))).round(2)  # rounding makes ties
        b = rng.normal(0.4, 0.2, int(rng.integers(5, 300))).round(2)
        y = np.r_[np.ones(p.size), np.zeros(b.size)]
        fpr, tpr, thr = roc_curve(y, np.r_[p, b], drop_intermediate=False)
        ok = np.isfinite(thr)
        gap = np.abs(tpr[ok] - (1.0 - fpr[ok]))
        best = thr[ok][gap <= gap.min() + 1e-12].min()
        assert ev.threshold(p, b, rule="equal_ss") == pytest.approx(best)


def test_equal_ss_needs_background():
    from timeslice.errors import ConfigError

    with pytest.raises(ConfigError, match="'equal_ss' needs background"):
        ev.threshold(PRES, rule="equal_ss")
    assert "equal_ss" in ev.THRESHOLD_RULES


def test_equal_ss_on_a_flat_curve_is_the_pooled_median_and_stable(rng):
    # a model that does not separate presences from background (both scores from one
    # distribution, AUC 0.5): sens + spec is flat (about 1 at every t), so max_sss may land
    # anywhere, while sens = spec holds at the common median (P(S >= t) = P(S < t) there; by
    # definition). Over resamples equal_ss stays near the median, max_sss wanders.
    eq, mx = [], []
    for _ in range(40):
        p, b = rng.uniform(0, 1, 300), rng.uniform(0, 1, 3000)
        eq.append(ev.threshold(p, b, rule="equal_ss"))
        mx.append(ev.threshold(p, b, rule="max_sss"))
    assert np.median(eq) == pytest.approx(0.5, abs=0.03)
    assert np.std(eq) < 0.5 * np.std(mx)

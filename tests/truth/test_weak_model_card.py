"""A model weak on spatial cross-validation is reported as such: a red card and one line."""

from __future__ import annotations

import pandas as pd
import pytest

from timeslice.niche.evaluate import WEAK_AUC, WEAK_TSS, weak_model_message
from timeslice.report.html import ReportContext, render_report


def _evaluation(auc: float, tss: float) -> pd.DataFrame:
    # the shape of fit_niche's evaluation table: fold rows, then mean and sd
    return pd.DataFrame({"summary": ["fold", "fold", "mean", "sd"], "fold": [0, 1, -1, -1],
                         "auc": [auc - 0.01, auc + 0.01, auc, 0.01],
                         "tss": [tss - 0.01, tss + 0.01, tss, 0.01]})


def test_rule_values_and_sources():
    # our rule: AUC < 0.7 (Swets 1988's "low accuracy" band, from memory) or TSS < 0.3
    # (common practice)
    assert (WEAK_AUC, WEAK_TSS) == (0.7, 0.3)


@pytest.mark.parametrize(("auc", "tss", "weak"), [
    (0.68, 0.23, True),   # the demo before issue 12: both below
    (0.85, 0.25, True),   # TSS alone below
    (0.65, 0.45, True),   # AUC alone below
    (0.80, 0.45, False),
])
def test_weak_model_message(auc, tss, weak):
    msg = weak_model_message(_evaluation(auc, tss))
    assert (msg is not None) is weak
    if weak:
        assert "\n" not in msg and len(msg) < 300  # one line on stderr
        assert f"{auc:.2f}" in msg or f"{tss:.2f}" in msg


def test_per_fold_table_without_summary_rows():
    ev = _evaluation(0.6, 0.2).query("summary == 'fold'").drop(columns="summary")
    assert "AUC 0.60" in weak_model_message(ev)


def test_unevaluated_model_is_flagged():
    ev = _evaluation(0.8, 0.5).assign(auc=float("nan"), tss=float("nan"))
    assert "not evaluated" in weak_model_message(ev)


def test_report_shows_the_card_first():
    msg = weak_model_message(_evaluation(0.6, 0.2))
    html = render_report(ReportContext(title="t", alerts=[msg],
                                       key_numbers=[("suitable area", "1 km2")]))
    assert 'role="alert"' in html and "weak model" in html
    assert html.index('id="alerts"') < html.index('id="keys"') < html.index('id="cautions"')
    assert 'role="alert"' not in render_report(ReportContext(title="t"))

"""Small classification counts at thresholds, and the measures that would give them back, are withheld."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from riskvet.errors import RiskvetError
from riskvet.measures.decision import threshold_table
from riskvet.reporting.classification import publish_thresholds


def _example():
    rng = np.random.default_rng(4)
    y = (rng.random(120) < 0.3).astype(int)
    prob = np.clip(0.3 + 0.35 * (y - 0.3) + rng.normal(0, 0.2, 120), 0.001, 0.999)
    return y, prob, threshold_table(y, prob, thresholds=[0.05, 0.3, 0.6, 0.95])


def test_no_published_number_gives_back_a_suppressed_count():
    """Attack by brute force: every 2x2 table consistent with the published margins, counts and measures."""
    y, prob, table = _example()
    published = publish_thresholds(table, min_cell_count=5)
    frame = published.to_frame()
    assert published.n_suppressed > 0  # the extreme thresholds leave counts below 5 (checked, not assumed)
    events, nonevents = int(y.sum()), int((1 - y).sum())
    names = ("tp", "fp", "fn", "tn")
    measures = {
        "sensitivity": lambda c: c["tp"] / events, "specificity": lambda c: c["tn"] / nonevents,
        "ppv": lambda c: c["tp"] / (c["tp"] + c["fp"]) if c["tp"] + c["fp"] else np.nan,
        "npv": lambda c: c["tn"] / (c["tn"] + c["fn"]) if c["tn"] + c["fn"] else np.nan,
    }
    for row, shown in frame.iterrows():
        for name in names:
            assert pd.isna(shown[name]) or shown[name] == 0 or shown[name] >= 5, (row, name)
        fits = []
        for tp, fp in itertools.product(range(events + 1), range(nonevents + 1)):
            candidate = {"tp": tp, "fp": fp, "fn": events - tp, "tn": nonevents - fp}
            if any(not pd.isna(shown[n]) and int(shown[n]) != candidate[n] for n in names):
                continue
            if any(not pd.isna(shown[m]) and not abs(f(candidate) - shown[m]) < 1e-9 for m, f in measures.items()):
                continue
            fits.append(candidate)
        assert fits  # the true table is among them
        for name in names:
            if pd.isna(shown[name]):
                assert len({f[name] for f in fits}) > 1, (row, name)


def test_nothing_is_suppressed_with_minimum_zero_and_counts_match_the_table():
    _, _, table = _example()
    published = publish_thresholds(table, min_cell_count=0)
    assert published.n_suppressed == 0 and published.sentence == ""
    assert list(published.to_frame()["tp"]) == [int(v) for v in table.tp]


def test_bad_minimum_is_refused():
    _, _, table = _example()
    with pytest.raises(RiskvetError, match="min_cell_count"):
        publish_thresholds(table, min_cell_count=-1)
    with pytest.raises(RiskvetError, match="ThresholdTable"):
        publish_thresholds({"tp": [1]}, min_cell_count=5)

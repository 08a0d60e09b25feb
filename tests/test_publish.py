"""The publishing layer: what every record page shows is formatted, worded and scrubbed here."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from riskvet.errors import RiskvetError
from riskvet.reporting import publish
from riskvet.reporting.publish import DASH, format_value, scan_text, scrub


@pytest.mark.parametrize(
    "value, kind, shown",
    [
        (1.8e-07, "auto", "0.000"),  # never scientific notation
        (-0.0001, "auto", "0.000"),  # no "-0.000"
        (2.3e06, "auto", "2,300,000"),
        (123.456, "auto", "123.5"),
        (0.51234, "auto", "0.512"),
        (np.int64(1234), "auto", "1,234"),
        (True, "auto", "yes"),
        (np.bool_(False), "auto", "no"),
        (None, "auto", DASH),
        (float("nan"), "auto", DASH),
        (pd.NA, "auto", DASH),
        (0.0004, "p", "<0.001"),
        (0.04, "p", "0.040"),
        (0.123, "share", "12.3%"),
        (12.34, "percent", "12.3%"),
        (math.inf, "auto", "infinite"),
        ("already words", "auto", "already words"),
    ],
)
def test_format_value(value, kind, shown):
    assert format_value(value, kind) == shown


def test_format_value_refuses_an_unknown_kind():
    with pytest.raises(RiskvetError, match="kind"):
        format_value(1.0, "scientific")


def test_table_drops_a_range_index_keeps_a_named_one_and_formats_every_cell():
    frame = pd.DataFrame({
        "measure": ["C", "slope"], "value": [0.81234, np.nan], "people": [10, 2000],
        "p-value": [1e-9, 0.2], "kept": [True, False], "sensitivity_lower": [0.1, 0.2],
    })
    table = publish.table(frame, caption="Two rows.")
    assert table.columns == ("measure", "value", "people", "p-value", "kept", "sensitivity, lower limit")
    assert table.rows == (("C", "0.812", "10", "<0.001", "yes", "0.100"), ("slope", DASH, "2,000", "0.200", "no", "0.200"))
    html = table._repr_html_()
    assert "<caption>Two rows.</caption>" in html and 'data-label="people"' in html and "<th></th>" not in html
    named = publish.table(pd.DataFrame({"n": [1, 2]}, index=pd.Index(["a", "b"], name="term")))
    assert named.columns == ("term", "n") and named.rows == (("a", "1"), ("b", "2"))


def test_limits_become_one_interval_column_named_by_its_kind():
    frame = pd.DataFrame({"cohort": ["a", "b"], "estimate": [0.5, 0.6], "lower limit": [0.1, None], "upper limit": [0.7, 0.8],
                          "interval": ["95% bootstrap percentile interval", None]})
    table = publish.table(frame)
    assert table.columns == ("cohort", "estimate", "95% bootstrap percentile interval")
    assert table.rows == (("a", "0.500", "0.100 to 0.700"), ("b", "0.600", DASH))
    mixed = publish.table(frame.assign(interval=["95% Wald interval", "95% bootstrap percentile interval"]))
    assert mixed.columns == ("cohort", "estimate", "limits of the interval", "interval")
    wald = publish.table(pd.DataFrame({"odds ratio": [1.2], "lower (95% Wald interval)": [1.0], "upper (95% Wald interval)": [1.5]}))
    assert wald.columns == ("odds ratio", "95% Wald interval") and wald.rows == (("1.200", "1.000 to 1.500"),)


def test_empty_table_is_a_sentence_and_none_is_allowed():
    empty = publish.table(pd.DataFrame({"a": []}), empty="No subgroup was asked for.")
    assert empty._repr_html_() == '<p class="rv-empty">No subgroup was asked for.</p>'
    assert "rv-empty" in publish.table(None)._repr_html_()


def test_wide_table_is_split_into_parts_that_repeat_the_row_labels():
    frame = pd.DataFrame({"cut": ["x"], **{f"c{i}": [float(i)] for i in range(12)}})
    table = publish.table(frame)
    parts = table.parts()
    assert len(parts) == 2 and all(p.columns[0] == "cut" for p in parts)
    assert sum(len(p.columns) - 1 for p in parts) == 12
    assert all(len(p.columns) <= publish.MAX_COLUMNS for p in parts)
    assert table._repr_html_().count("<table") == 2


def test_table_refuses_what_is_not_a_frame_and_unknown_kinds():
    with pytest.raises(RiskvetError, match="DataFrame"):
        publish.table([[1, 2]])
    with pytest.raises(RiskvetError, match="kinds"):
        publish.table(pd.DataFrame({"a": [1]}), kinds={"a": "hex"})


def test_scrub_removes_paths_class_names_source_lines_and_scientific_notation():
    text = "/tmp/x/riskvet/modelling/fitter.py:123: ConvergenceWarning: no convergence at 1e-8 for /home/u/study/data.csv"
    assert scrub(text) == "no convergence at less than 0.001 for data.csv"
    assert scrub("slope 2.3e+06") == "slope 2,300,000"


def test_notes_are_words_once_each_in_order():
    notes = publish.notes(["RuntimeWarning: overflow in exp", "overflow in exp", "a second note"])
    assert notes.items == ("Overflow in exp", "A second note")
    assert publish.notes([])._repr_markdown_().startswith("No statistical warnings")


def test_figure_prefers_the_svg_and_needs_a_caption(tmp_path):
    folder = tmp_path / "figures" / "derivation"
    folder.mkdir(parents=True)
    (folder / "roc.png").write_bytes(b"\x89PNG")
    (folder / "roc.svg").write_text("<svg xmlns='http://www.w3.org/2000/svg'/>")
    shown = publish.figure(tmp_path, "figures/derivation/roc.png", caption="ROC curve")
    assert shown.media_type == "image/svg+xml"
    assert 'alt="ROC curve"' in shown._repr_html_() and "data:image/svg+xml;base64," in shown._repr_html_()
    with pytest.raises(RiskvetError, match="figure"):
        publish.figure(tmp_path, "figures/derivation/absent.png", caption="x")


def test_equation_keeps_terms_whole():
    block = publish.equation("LP = 0.0172 x age + 0.0111 x heart_rate - 0.0062 x systolic_bp")._repr_html_()
    assert '<span class="rv-term">+ 0.0111 x heart_rate</span>' in block
    assert '<span class="rv-term">- 0.0062 x systolic_bp</span>' in block


def test_scan_text_finds_what_a_page_must_not_show():
    found = {kind for kind, _ in scan_text("value nan at 1.2e-05 in /tmp/a/b, True, RuntimeWarning: x", internal_names=["x1"])}
    assert found == {"scientific notation", "missing-value word", "Python flag", "absolute path", "warning class name"}
    assert scan_text("C 0.812 (95% bootstrap percentile interval 0.780 to 0.840)") == []
    assert [k for k, _ in scan_text("the term x1 entered", internal_names=["x1"])] == ["internal name"]

"""Tests of riskvet.reporting.figures: each figure has the expected artists and saves as PNG, draws no count below the minimum, and states no statistic inside a calibration panel."""

from __future__ import annotations

import itertools
import json
import re
from types import SimpleNamespace

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PolyCollection
from matplotlib.container import ErrorbarContainer
from matplotlib.figure import Figure
from matplotlib.legend import Legend
from matplotlib.patches import StepPatch
from matplotlib.text import Text
from scipy import special

from riskvet.measures.agreement import bland_altman
from riskvet.measures.calibration import calibration, merge_bins, merge_groups, ordinal_calibration
from riskvet.measures.decision import net_benefit, ordinal_net_benefit, rule_net_benefit, threshold_table
from riskvet.measures.discrimination import dichotomise, roc_curve
from riskvet.errors import RiskvetError
from riskvet.modelling.proportional_odds import brant_test, proportional_odds_lr_test
from riskvet.reporting.disclosure import SUPPRESSED
from riskvet.validation.casemix import CaseMix
from riskvet.reporting.figures.external_validation import plot_case_mix, published_case_mix
from riskvet.modelling.fitter import fit_cumulative
from riskvet.reporting.figures.derivation import plot_odds_ratios, plot_proportional_odds, proportional_odds_sentence, proportional_odds_table
from riskvet.reporting.figures.performance import (
    PALETTE,
    calibration_statistics,
    plot_bland_altman,
    plot_calibration,
    plot_decision_curve,
    plot_roc,
    published_calibration,
    published_groups,
)

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def ordinal_example(n=400, seed=1):
    rng = np.random.default_rng(seed)
    lp = rng.normal(0, 1.2, n)
    cum = special.expit(np.array([-0.5, 1.0])[None, :] - lp[:, None])
    prob = np.diff(np.c_[np.zeros(n), cum, np.ones(n)], axis=1)
    y = (rng.random(n)[:, None] > cum).sum(axis=1)
    return y, prob


def saved_png(fig, tmp_path, name):
    path = tmp_path / f"{name}.png"
    fig.savefig(path)
    data = path.read_bytes()
    assert data[:8] == PNG_MAGIC and len(data) > 5000
    return path


def test_roc_per_cut_with_operating_points(tmp_path):
    y, prob = ordinal_example()
    curves, tables = [], []
    for j in range(2):
        yj, pj = dichotomise(y, prob, cut=j)
        curves.append(roc_curve(yj, pj))
        tables.append(threshold_table(yj, pj, thresholds=[0.2, 0.5]))
    fig = plot_roc(curves, operating_points=tables)
    assert isinstance(fig, Figure)
    ax = fig.axes[0]
    # diagonal + 2 curves + 2 sets of operating points
    assert len(ax.lines) == 5
    np.testing.assert_allclose(ax.lines[1].get_xdata(), 1 - curves[0].specificity)
    np.testing.assert_allclose(ax.lines[2].get_ydata(), tables[0].sensitivity)
    assert [t.get_text() for t in ax.texts] == ["0.2", "0.5", "0.2", "0.5"]
    assert ax.lines[1].get_linestyle() != ax.lines[3].get_linestyle()  # greyscale-distinguishable
    assert "C = " in ax.get_legend().get_texts()[1].get_text()
    saved_png(fig, tmp_path, "roc")


LEVELS = ("home", "ward", "transferred")


def calibration_panels(fig):
    """The calibration panels of a figure: the axes holding the smoothed curve's band."""
    return [ax for ax in fig.axes if any(isinstance(c, PolyCollection) for c in ax.collections)]


def drawn_bins(ax):
    """(left edge, right edge, people) of each bar of a distribution row: a bar's area is its count."""
    return [(p.get_x(), p.get_x() + p.get_width(), p.get_width() * p.get_height()) for p in ax.patches]


def skewed_example(n=150, seed=8):
    """Few events and a long tail of predictions, so that many bins and groups hold 1-4 people."""
    rng = np.random.default_rng(seed)
    p = special.expit(rng.normal(-2.6, 1.1, n))
    return (rng.random(n) < p).astype(int), p


def test_calibration_figure_layout_without_statistics_or_legend(tmp_path):
    y, prob = ordinal_example(seed=2)
    yj, pj = dichotomise(y, prob, cut=0)
    res = calibration(yj, pj, n_groups=8)
    fig = plot_calibration(res, min_cell_count=5, levels=("no", "yes"))
    main, events, nonevents = fig.axes
    assert calibration_panels(fig) == [main]
    np.testing.assert_allclose(main.lines[1].get_ydata(), res.curve_observed)
    containers = [c for c in main.containers if isinstance(c, ErrorbarContainer)]
    assert len(containers) == 1
    np.testing.assert_allclose(containers[0].lines[0].get_ydata(), merge_groups(res, min_count=5).observed)
    # named on the lines, not by a legend; no statistic written in the panel (only the confidence level)
    assert main.get_legend() is None and not fig.legends
    names = [t.get_text() for t in main.texts]
    assert {"smoothed curve", "ideal", "grouped proportions"} <= set(names)
    for text in names:
        assert not re.search(r"\d", text.replace(f"{res.confidence:.0%}", "")) and "=" not in text
    # the interval kinds are stated beneath the figure
    note = fig.get_supxlabel()
    assert "95% pointwise confidence band" in note and "95% Wilson intervals" in note
    # the distribution in rows of its own, one per outcome, not mirrored about an axis
    assert events.get_title(loc="left") == "yes" and nonevents.get_title(loc="left") == "no"
    for ax in (events, nonevents):
        assert all(p.get_height() >= 0 for p in ax.patches) and ax.get_ylim()[0] == 0
    assert sum(c for *_, c in drawn_bins(events)) == pytest.approx(res.n_events)
    assert sum(c for *_, c in drawn_bins(nonevents)) == pytest.approx(res.n - res.n_events)
    assert nonevents.get_xlabel() == "predicted probability"
    saved_png(fig, tmp_path, "calibration")


@pytest.mark.parametrize("m", [5, 10])
def test_calibration_figure_draws_no_count_below_the_minimum(m):
    y, p = skewed_example()
    res = calibration(y, p)
    assert np.any((res.histogram_events > 0) & (res.histogram_events < m))  # the raw bins would show small counts
    assert np.any((res.group_events > 0) & (res.group_events < m))
    fig = plot_calibration(res, min_cell_count=m)
    main, events, nonevents = fig.axes
    for ax in (events, nonevents):
        counts = [round(c) for *_, c in drawn_bins(ax)]
        assert counts and all(c == 0 or c >= m for c in counts)
    # each drawn group point is a merged group holding m events and m non-events
    merged = merge_groups(res, min_count=m)
    assert np.all(merged.events >= m) and np.all(merged.n - merged.events >= m)
    (container,) = [c for c in main.containers if isinstance(c, ErrorbarContainer)]
    np.testing.assert_allclose(container.lines[0].get_xdata(), merged.mean_predicted)
    np.testing.assert_allclose(container.lines[0].get_ydata(), merged.events / merged.n)


def test_calibration_figure_without_a_minimum_draws_no_counts():
    y, p = skewed_example()
    fig = plot_calibration(calibration(y, p))
    (main,) = fig.axes
    assert not [c for c in main.containers if isinstance(c, ErrorbarContainer)] and not main.patches
    assert main.get_xlabel() == "predicted probability"


def test_calibration_of_a_three_level_outcome_one_panel_per_cut(tmp_path):
    y, prob = ordinal_example(seed=3)
    result = ordinal_calibration(y, prob)
    fig = plot_calibration(result, min_cell_count=5, levels=LEVELS)
    panels = calibration_panels(fig)
    assert [ax.get_title() for ax in panels] == ["ward or higher", "transferred"]
    assert len(fig.axes) == 6
    rows = [ax.get_title(loc="left") for ax in fig.axes if ax not in panels]
    assert rows == ["ward or higher", "home", "transferred", "ward or lower"]
    saved_png(fig, tmp_path, "calibration_ordinal")
    # without level labels the cuts are numbered in words, never written as inequalities
    plain = plot_calibration(result)
    assert [ax.get_title() for ax in plain.axes] == ["cut 1", "cut 2"]


def test_calibration_statistics_table_in_words():
    y, prob = ordinal_example(seed=3)
    result = ordinal_calibration(y, prob)
    table = calibration_statistics(result, levels=LEVELS)
    assert isinstance(table.index, pd.RangeIndex) and len(table) == 8
    assert list(table.columns) == ["outcome", "measure", "estimate", "lower limit", "upper limit", "interval", "ideal value"]
    slope = table[(table["outcome"] == "transferred") & (table["measure"] == "calibration slope")].iloc[0]
    assert slope["estimate"] == result.cuts[1].slope and slope["interval"] == "95% Wald interval"
    assert table["interval"].isna().sum() == 2  # the ICI has none
    assert not table["measure"].str.contains("_").any()


def test_merge_bins_hand_worked():
    edges = np.arange(10.0)
    # runs: [0] | [3, 1, 0, 6] = 10 | remainder [2, 0, 0, 1] = 3 joins the run before (common practice of merging)
    new_edges, counts = merge_bins(edges, [0, 3, 1, 0, 6, 2, 0, 0, 1], min_count=5)
    np.testing.assert_array_equal(new_edges, [0.0, 1.0, 9.0])
    np.testing.assert_array_equal(counts, [0, 13])
    new_edges, counts = merge_bins(edges[:4], [5, 0, 7], min_count=5)  # nothing to merge
    np.testing.assert_array_equal(counts, [5, 0, 7])
    assert merge_bins(edges[:4], [0, 2, 1], min_count=5)[1].size == 0  # too few in all: nothing shown
    np.testing.assert_array_equal(merge_bins(edges[:4], [1, 0, 2], min_count=1)[1], [1, 0, 2])


def test_merge_groups_preserves_people_and_order():
    y, p = skewed_example()
    res = calibration(y, p)
    merged = merge_groups(res, min_count=5)
    assert sum(merged.members, ()) == tuple(range(res.n_groups))  # every group once, in order
    assert merged.n.sum() == res.n and merged.events.sum() == res.n_events
    for members, mean in zip(merged.members, merged.mean_predicted):
        expected = np.sum(res.group_mean_predicted[list(members)] * res.group_n[list(members)])
        assert mean == pytest.approx(expected / res.group_n[list(members)].sum(), rel=1e-12)
    assert np.all(merged.observed_lower <= merged.observed) and np.all(merged.observed <= merged.observed_upper)
    same = merge_groups(res, min_count=0)
    np.testing.assert_allclose(same.observed_lower, res.group_observed_lower)
    few = calibration(np.isin(np.arange(43), [5, 20, 35]).astype(int), np.linspace(0.01, 0.3, 43))
    assert merge_groups(few, min_count=5).n.size == 0  # 3 events in all: no group can be drawn


def solutions(published, n, total_events):
    """Every assignment of the suppressed event counts consistent with what is published (brute force)."""
    hidden = [g for g, row in enumerate(published) if row["events"] == SUPPRESSED]
    known = sum(row["events"] for row in published if row["events"] != SUPPRESSED)
    found = []
    for values in itertools.product(*(range(int(n[g]) + 1) for g in hidden)):
        if known + sum(values) == total_events:
            found.append(dict(zip(hidden, values)))
    return hidden, found


def test_published_groups_suppress_small_counts_so_none_is_determined():
    y, p = skewed_example(n=60, seed=9)
    res = calibration(y, p, n_groups=4)
    assert np.any((res.group_events > 0) & (res.group_events < 5))
    published = published_groups(res, min_cell_count=5)
    json.dumps(published)
    for row, n_g in zip(published, res.group_n):
        assert row["people"] == n_g
        for key in ("events", "non_events"):
            assert row[key] == SUPPRESSED or row[key] == 0 or row[key] >= 5
        if SUPPRESSED in (row["events"], row["non_events"]):
            assert row["observed"] == row["observed_lower"] == row["observed_upper"] == SUPPRESSED
    # attack: from the group sizes, the shown counts and the total of events, no hidden count is fixed
    hidden, found = solutions(published, res.group_n, res.n_events)
    assert hidden
    for g in hidden:
        assert len({s[g] for s in found}) > 1


def test_published_calibration_for_a_results_file():
    y, prob = ordinal_example(n=150, seed=12)
    result = ordinal_calibration(y, prob)
    out = json.loads(json.dumps(published_calibration(result, min_cell_count=5)))
    assert out["min_cell_count"] == 5 and out["hosmer_lemeshow"] == result.hosmer_lemeshow
    assert all(v == SUPPRESSED or v == 0 or v >= 5 for row in out["observed"] for v in row)
    for cut, raw in zip(out["cuts"], result.cuts):
        assert not {"group_events", "histogram_events", "group_n"} & set(cut)
        assert cut["slope"] == raw.slope and cut["ici"] == raw.ici  # measures unchanged
        for dist in cut["distribution"].values():
            assert all(c == 0 or c >= 5 for c in dist["counts"]) and len(dist["edges"]) == len(dist["counts"]) + 1
        assert all(e >= 5 for e in cut["groups_drawn"]["events"])


def test_proportional_odds_figure_table_and_sentence(tmp_path):
    rng = np.random.default_rng(21)
    n = 400
    X = pd.DataFrame({"age": rng.normal(50, 10, n), "sex=male": rng.integers(0, 2, n).astype(float)})
    lp = (0.05 * (X["age"] - 50) + 0.7 * X["sex=male"]).to_numpy()
    y = ((rng.logistic(size=n) + lp)[:, None] > np.array([-0.5, 1.0])).sum(axis=1)
    brant, lr = brant_test(X, y), proportional_odds_lr_test(X, y)
    fig = plot_proportional_odds(brant, lr, levels=LEVELS)
    assert [ax.get_title(loc="left") for ax in fig.axes] == ["age", "sex: male"]
    age = fig.axes[0]
    assert [t.get_text() for t in age.get_yticklabels()] == ["ward or higher", "transferred"]
    separate = next(line for line in age.lines if line.get_markerfacecolor() == "white")
    np.testing.assert_allclose(separate.get_xdata(), brant.coef_by_cut.loc["age"].to_numpy())
    legend = " ".join(t.get_text() for t in fig.legends[0].get_texts())
    assert "95% Wald interval" in legend and "separate binary fit" in legend
    saved_png(fig, tmp_path, "proportional_odds")
    table = proportional_odds_table(brant, lr, levels=LEVELS)
    assert list(table["term"]) == ["age", "sex=male"]  # one row per term, no overall row
    assert "p (terms differ between cuts)" in table.columns and isinstance(table.index, pd.RangeIndex)
    assert table.loc[0, "coefficient, transferred"] == lr.nonproportional_fit.coef.loc["age"].iloc[1]
    sentence = proportional_odds_sentence(brant, lr)
    assert f"{brant.statistic:.2f} on {brant.df} degrees of freedom" in sentence and "likelihood-ratio" in sentence
    with pytest.raises(RiskvetError, match=r"plot_proportional_odds\(brant=\)"):
        plot_proportional_odds("brant")  # type: ignore[arg-type]


def all_texts(fig):
    """Every piece of text a figure shows: titles, labels, tick labels, notes and legends."""
    return [t for t in fig.findobj(Text) if t.get_text().strip() and t.get_visible()]


def test_figures_stay_legible_at_a_narrow_screen_and_write_no_inequalities_or_powers():
    y, prob = ordinal_example(seed=13)
    X = pd.DataFrame({"age": np.linspace(20, 80, y.size), "sex=male": (np.arange(y.size) % 2).astype(float)})
    per_cut = fit_cumulative(X, y, proportional=False).to_frame()
    assert per_cut["cut"].str.contains("<=").any()  # the fit names its cuts as inequalities; the figure must not
    figures = [plot_calibration(ordinal_calibration(y, prob), min_cell_count=5, levels=LEVELS),
               plot_roc([roc_curve(*dichotomise(y, prob, cut=j)) for j in range(2)], levels=LEVELS),
               plot_decision_curve(ordinal_net_benefit(y, prob, thresholds=np.linspace(0.05, 0.5, 10)), levels=LEVELS),
               plot_odds_ratios(per_cut),
               plot_proportional_odds(brant_test(X, y), proportional_odds_lr_test(X, y), levels=LEVELS)]
    for fig in figures:
        fig.canvas.draw()  # tick labels are written at drawing
        width_px = fig.get_figwidth() * 96  # an SVG's native size
        for text in all_texts(fig):
            assert not re.search(r"[|^]|<=|>=|\\times|e[+-]\d", text.get_text()), text.get_text()
            # shown at 390 px wide, each text is at least 8 px tall (common practice for legibility)
            assert text.get_fontsize() * 96 / 72 * 390 / width_px >= 8.0, text.get_text()
    assert [ax.get_title() for ax in figures[2].axes] == ["ward or higher", "transferred"]


def test_case_mix_histograms_hold_no_small_bin():
    rng = np.random.default_rng(17)
    lp_d, lp_v = rng.normal(0, 1, 300), rng.normal(0.4, 1.3, 80)
    edges = np.linspace(-5, 5, 41)
    mix = CaseMix(derivation_label="derivation", validation_label="season-2026", n_derivation=300, n_validation=80,
                  table=pd.DataFrame(), lp_mean_derivation=float(lp_d.mean()), lp_sd_derivation=float(lp_d.std()),
                  lp_mean_validation=float(lp_v.mean()), lp_sd_validation=float(lp_v.std()), lp_sd_ratio=1.3,
                  lp_histogram_edges=edges, lp_histogram_derivation=np.histogram(lp_d, edges)[0],
                  lp_histogram_validation=np.histogram(lp_v, edges)[0], membership_c=0.6, membership_c_lower=0.55,
                  membership_c_upper=0.65, membership_c_null=0.52, n_permutations=20, membership_coefficients=pd.DataFrame(), warnings=())
    assert np.any((mix.lp_histogram_validation > 0) & (mix.lp_histogram_validation < 5))
    (ax,) = plot_case_mix(mix, min_cell_count=5).axes
    stairs = [p for p in ax.patches if isinstance(p, StepPatch)]
    assert len(stairs) == 2
    for patch, n in zip(stairs, (300, 80)):
        values, bin_edges = patch.get_data().values, patch.get_data().edges
        counts = np.round(values * n * np.diff(bin_edges)).astype(int)  # a density times the size and width is a count
        assert counts.sum() == n and all(c == 0 or c >= 5 for c in counts)
    published = json.loads(json.dumps(published_case_mix(mix, min_cell_count=5)))
    assert "lp_histogram_validation" not in published and published["membership_c"] == 0.6
    for name, n in (("derivation", 300), ("validation", 80)):
        counts = published["lp_histogram"][name]["counts"]
        assert sum(counts) == n and all(c == 0 or c >= 5 for c in counts)
    (plain,) = plot_case_mix(mix).axes
    assert not [p for p in plain.patches if isinstance(p, StepPatch)]
    with pytest.raises(RiskvetError, match=r"plot_case_mix\(min_cell_count=\)"):
        plot_case_mix(mix, min_cell_count="5")  # type: ignore[arg-type]


def test_bad_input_calibration():
    y, p = skewed_example()
    res = calibration(y, p)
    with pytest.raises(RiskvetError, match=r"plot_calibration\(min_cell_count=\)"):
        plot_calibration(res, min_cell_count=-1)
    with pytest.raises(RiskvetError, match=r"merge_groups\(min_count=\)"):
        merge_groups(res, min_count=2.5)  # type: ignore[arg-type]
    with pytest.raises(RiskvetError, match=r"merge_bins\(edges=, counts=\)"):
        merge_bins([0.0, 1.0], [1, 2], min_count=5)
    with pytest.raises(RiskvetError, match=r"published_groups\(result=\)"):
        published_groups("groups", min_cell_count=5)  # type: ignore[arg-type]
    with pytest.raises(RiskvetError, match=r"calibration_statistics\(result=\)"):
        calibration_statistics(np.zeros(2))  # type: ignore[arg-type]


def test_decision_curve_model_rule_and_references(tmp_path):
    y, prob = ordinal_example(seed=4)
    yj, pj = dichotomise(y, prob, cut=1)
    t = np.linspace(0.02, 0.6, 30)
    model = net_benefit(yj, pj, thresholds=t)
    rule = rule_net_benefit(yj, pj > 0.3, thresholds=t)
    fig = plot_decision_curve([model, rule], labels=["model", "existing rule"])
    ax = fig.axes[0]
    # treat none, treat all, model, rule
    assert len(ax.lines) == 4
    np.testing.assert_allclose(ax.lines[1].get_ydata(), model.treat_all)
    np.testing.assert_allclose(ax.lines[2].get_ydata(), model.net_benefit)
    assert [x.get_text() for x in ax.get_legend().get_texts()] == ["treat none", "treat all", "model", "existing rule"]
    assert ax.get_ylim()[0] == pytest.approx(-0.15 * model.prevalence)
    saved_png(fig, tmp_path, "decision")
    per_cut = plot_decision_curve(ordinal_net_benefit(y, prob, thresholds=t))
    assert len(per_cut.axes) == 2


def _points(ax):
    """The data markers: the one scatter collection holding offsets."""
    (points,) = [c for c in ax.collections if len(c.get_offsets())]
    return points


def test_bland_altman_from_agreement_result_and_plain_object(tmp_path):
    rng = np.random.default_rng(5)
    truth = rng.normal(30, 5, 60)
    a = truth + rng.normal(0.5, 1.0, 60)
    b = truth + rng.normal(0.0, 1.0, 60)
    res = bland_altman(a, b)
    fig = plot_bland_altman(res, units="mmHg", labels=("nurse", "doctor"))
    ax = fig.axes[0]
    # continuous readings: no ties, so one marker per pair, all of one size
    points = _points(ax)
    np.testing.assert_allclose(points.get_offsets()[:, 0], res.means)
    np.testing.assert_allclose(points.get_offsets()[:, 1], res.differences)
    assert len(set(points.get_sizes())) == 1
    levels = sorted(line.get_ydata()[0] for line in ax.lines[1:])
    assert levels == pytest.approx(sorted([res.lower, res.bias, res.upper]))
    assert len([p for p in ax.patches]) == 3  # interval bands
    assert ax.get_ylabel() == "nurse - doctor (mmHg)"
    saved_png(fig, tmp_path, "bland_altman")
    plain = SimpleNamespace(means=[1.0, 2.0, 3.0], differences=[0.1, -0.2, 0.05], bias=-0.02, lower=-0.3, upper=0.26)
    fig2 = plot_bland_altman(plain)
    assert len(fig2.axes[0].patches) == 0


def test_bland_altman_draws_tied_pairs_once_sized_by_count(tmp_path):
    # Whole-number readings (as respiratory rates are) tie often.
    rng = np.random.default_rng(11)
    truth = rng.integers(12, 24, 200)
    a = truth + rng.integers(-2, 3, 200)
    b = truth + rng.integers(-2, 3, 200)
    res = bland_altman(a.astype(float), b.astype(float))
    fig = plot_bland_altman(res)
    ax = fig.axes[0]
    points = _points(ax)
    # Reference: pandas 3.1 value_counts of the (mean, difference) pairs.
    counts = pd.DataFrame({"m": res.means, "d": res.differences}).value_counts()
    drawn = {(float(x), float(y)): float(s) for (x, y), s in zip(points.get_offsets(), points.get_sizes())}
    assert len(drawn) == len(counts) < len(a)
    assert {key: 1 for key in drawn} == {(float(m), float(d)): 1 for m, d in counts.index}
    # marker area proportional to the number of pairs at the point
    area_per_pair = {drawn[(float(m), float(d))] / n for (m, d), n in counts.items()}
    assert max(area_per_pair) == pytest.approx(min(area_per_pair), rel=1e-12)
    # the legend of sizes: one entry per size level, 1 first, the largest count last
    legends = [c for c in ax.get_children() if isinstance(c, Legend)]
    sizes = next(lg for lg in legends if lg.get_title().get_text().startswith("pairs"))
    texts = [t.get_text() for t in sizes.get_texts()]
    assert texts[0] == "1 pair" and texts[-1] == f"{counts.max()} pairs"
    # bias and limits are still drawn
    levels = sorted(line.get_ydata()[0] for line in ax.lines[1:])
    assert levels == pytest.approx(sorted([res.lower, res.bias, res.upper]))
    saved_png(fig, tmp_path, "bland_altman_ties")


def test_palette_is_okabe_ito():
    # Okabe & Ito (2008) colours.
    assert set(PALETTE) == {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}


def test_bad_input():
    with pytest.raises(RiskvetError, match=r"plot_roc\(curves=\)"):
        plot_roc([])
    with pytest.raises(RiskvetError, match=r"plot_calibration\(result=\)"):
        plot_calibration(np.zeros(3))  # type: ignore[arg-type]
    y, prob = ordinal_example(seed=6)
    yj, pj = dichotomise(y, prob, cut=0)
    with pytest.raises(RiskvetError, match=r"plot_roc\(labels=\)"):
        plot_roc(roc_curve(yj, pj), labels=["a", "b"])
    with pytest.raises(RiskvetError, match=r"plot_bland_altman\(result=\).*lacking"):
        plot_bland_altman(SimpleNamespace(means=[1.0]))  # type: ignore[arg-type]


def test_bad_input_decision_curve():
    with pytest.raises(RiskvetError, match=r"plot_decision_curve\(results=\)"):
        plot_decision_curve(["not a result"])  # type: ignore[list-item]
    y, prob = ordinal_example(seed=7)
    yj, pj = dichotomise(y, prob, cut=0)
    with pytest.raises(RiskvetError, match=r"plot_roc\(operating_points=\)"):
        plot_roc(roc_curve(yj, pj), operating_points=[None, None])

"""Tests of riskvet.reporting.figures.performance: each figure has the expected artists and saves as PNG."""

from __future__ import annotations

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
from scipy import special

from riskvet.measures.agreement import bland_altman
from riskvet.measures.calibration import calibration, ordinal_calibration
from riskvet.measures.decision import net_benefit, ordinal_net_benefit, rule_net_benefit, threshold_table
from riskvet.measures.discrimination import dichotomise, roc_curve
from riskvet.errors import RiskvetError
from riskvet.reporting.figures.performance import PALETTE, plot_bland_altman, plot_calibration, plot_decision_curve, plot_roc

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


def test_calibration_plot_has_curve_band_groups_and_histogram(tmp_path):
    y, prob = ordinal_example(seed=2)
    yj, pj = dichotomise(y, prob, cut=0)
    res = calibration(yj, pj, n_groups=8)
    fig = plot_calibration(res)
    main, hist = fig.axes
    assert len(main.lines) >= 2  # ideal + smoothed curve
    np.testing.assert_allclose(main.lines[1].get_ydata(), res.curve_observed)
    assert any(isinstance(c, PolyCollection) for c in main.collections)  # the band
    containers = [c for c in main.containers if isinstance(c, ErrorbarContainer)]
    assert len(containers) == 1
    np.testing.assert_allclose(containers[0].lines[0].get_ydata(), res.group_observed)
    assert len(hist.patches) == 2 * res.histogram_events.size
    assert "slope" in main.texts[0].get_text()
    saved_png(fig, tmp_path, "calibration")


def test_ordinal_calibration_gives_one_panel_per_cut(tmp_path):
    y, prob = ordinal_example(seed=3)
    fig = plot_calibration(ordinal_calibration(y, prob))
    assert len(fig.axes) == 4
    assert fig.axes[0].get_title() == "cut 0: Y > 0" and fig.axes[2].get_title() == "cut 1: Y > 1"
    saved_png(fig, tmp_path, "calibration_ordinal")


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

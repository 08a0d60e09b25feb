"""The agreement stage: results against scikit-learn, numpy and the agreement functions; risk agreement by hand."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
import yaml
from matplotlib.figure import Figure
from sklearn.metrics import cohen_kappa_score

from riskvet.measures.agreement import icc_table, kappa
from riskvet.intake.data import load_cohorts
from riskvet.intake.design import build_design
from riskvet.errors import DataError, ModelFileError, RecordError, RiskvetError, RiskvetWarning, StudyError
from riskvet.modelling.modelfile import PredictionModel, save_model
from riskvet.reporting.figures.agreement import bin_pairs, plot_item_agreement, plot_risk_agreement
from riskvet.chain.scaffold import new_study_folder
from riskvet.chain.stagekit import stage_context
from riskvet.chain.stages import agreement as stage
from riskvet.reporting.disclosure import SUPPRESSED, publish_cross_table
from riskvet.intake.study import load_study, study_from_dict


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    root = tmp_path_factory.mktemp("agreement_study")
    new_study_folder(root, n_derivation=300, n_validation=200, n_ratings=40, n_boot=2, missing_data="complete_case")
    return root


@pytest.fixture(scope="module")
def study(folder):
    return load_study(folder / "study.yaml")


@pytest.fixture(scope="module")
def cohorts(study):
    return load_cohorts(study)


@pytest.fixture(scope="module")
def raw_ratings(folder):
    return pd.read_csv(folder / "data" / "ratings.csv")


@pytest.fixture(autouse=True)
def _quiet():
    # Undefined decision kappas warn (and are recorded on the result); tests check the record.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        yield


def _model(study, cohorts, coef: dict[str, float], *, categorical=None) -> PredictionModel:
    """A cumulative logit model with fixed invented coefficients, thresholds at quantiles of its LP."""
    linear = [c for c in coef if "=" not in c]
    design = build_design(cohorts.derivation.frame, linear=linear, categorical=categorical or {})
    b = np.array([coef[c] for c in design.columns])
    lp = design.transform(cohorts.derivation.frame).to_numpy() @ b
    levels = list(study.outcome.ordered_levels)
    return PredictionModel(design=design, thresholds=np.quantile(lp, [0.55, 0.88]), coef=b, link="logit",
                           outcome={"column": study.outcome.column, "type": study.outcome.type, "levels": levels, "labels": {}})


def _variant(folder, tmp_path, *, extra_columns=None, extra_items=()):
    """The demo study with a changed ratings file (written to tmp_path) and extra rated items."""
    ratings = pd.read_csv(folder / "data" / "ratings.csv", dtype=str, keep_default_na=False)
    for name, values in (extra_columns or {}).items():
        ratings[name] = values
    ratings.to_csv(tmp_path / "ratings.csv", index=False)
    raw = yaml.safe_load((folder / "study.yaml").read_text(encoding="utf-8"))
    raw["data"]["ratings"] = str(tmp_path / "ratings.csv")
    raw["agreement"]["items"] = list(raw["agreement"]["items"]) + list(extra_items)
    path = tmp_path / "study.yaml"
    raw["data"]["derivation"] = str(folder / raw["data"]["derivation"])
    raw["data"]["validation"] = [{"label": v["label"], "path": str(folder / v["path"])} for v in raw["data"]["validation"]]
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return path


# --------------------------------------------------------------------------
# predictor agreement
# --------------------------------------------------------------------------

def test_predictor_agreement_matches_references(folder, study, raw_ratings, tmp_path):
    ctx = stage_context("agreement", study_path=folder / "study.yaml", record_dir=tmp_path / "rec")
    out = stage.run(ctx)
    saved = json.loads(ctx.results_path.read_text(encoding="utf-8"))
    assert saved == json.loads(json.dumps(out.to_dict()))
    items = {i["name"]: i for i in saved["items"]}
    assert list(items) == [it.name for it in study.agreement.items]
    for it in study.agreement.items:
        a, b = raw_ratings[it.rater_a], raw_ratings[it.rater_b]
        got = items[it.name]
        assert got["n_pairs"] == len(raw_ratings)
        if it.scale == "binary":
            # Reference: sklearn.metrics.cohen_kappa_score (scikit-learn 1.9); same
            # formula, so agreement to rounding (1e-12).
            reference = cohen_kappa_score(a, b)
            assert out.item(it.name).kappa.value == pytest.approx(reference, abs=1e-12)
            assert out.item(it.name).kappa.value == pytest.approx(kappa(a.astype(str), b.astype(str)).value, abs=1e-15)
            # the record holds it unrounded, rounded (suppressed counts) or withheld
            places = got["kappa"]["rounded_to"]
            if got["cross_table"]["n_suppressed"] == 0 and "suppressed" not in got["cross_table"]["agreement_counts"]:
                assert places is None and got["kappa"]["value"] == pytest.approx(reference, abs=1e-12)
            elif got["kappa"]["value"] is not None:
                assert got["kappa"]["value"] == round(reference, places)
                assert "expected_agreement" not in got["kappa"] and "se" not in got["kappa"]
            else:
                assert got["kappa"]["withheld"] and "kappa" in got["statistics"]["withheld"]
            assert got["levels"] == ["0", "1"] and got["level_order"] == "numeric"
            assert got["weighted_kappa"] is None and got["icc"] is None
        else:
            table = icc_table(pd.DataFrame({"a": a, "b": b}))
            by_form = {r["form"]: r for r in got["icc"]["results"]}
            for form in ("2,1", "3,1"):
                assert by_form[form]["value"] == pytest.approx(table[form].value, abs=1e-15)
            # Bias and SD of the differences, by numpy (2.4) directly.
            d = (a - b).to_numpy(dtype=float)
            assert got["bland_altman"]["bias"] == pytest.approx(d.mean(), abs=1e-12)
            assert got["bland_altman"]["sd"] == pytest.approx(d.std(ddof=1), abs=1e-12)
            assert "means" not in got["bland_altman"] and "differences" not in got["bland_altman"]
            png = ctx.record_dir / out.item_figure(it.name)
            assert png.is_file() and png.with_suffix(".svg").is_file()
    assert saved["risk"] is None
    assert "needs the frozen model" in saved["risk_note"]
    assert saved["texts"]["summary"].endswith("Agreement of predicted risk was not assessed.")
    confusion = items["confusion"]["kappa"]
    if confusion["value"] is None:
        assert "confusion kappa withheld (small counts)" in saved["texts"]["summary"]
    else:
        assert f"confusion kappa {confusion['value']:.{confusion['rounded_to'] or 2}f}" in saved["texts"]["summary"]
    assert saved["pair_level_plots"] is False and "bins of pairs" in saved["texts"]["figures"]
    # No figure for the risk without a model.
    assert sorted(saved["figures"]) == ["bland_altman_resp_rate"]


def _published_equations(table, published, *, bands):
    """What a reader of the record knows, as linear constraints lo <= sum <= hi on the K x K cells.

    The visible cells, the visible totals (the raters' rates), n, and the
    number of pairs on each agreement line as published: the diagonal and the
    rest, or each distance |i - j| (with a weighted kappa); a suppressed
    agreement count stated as "fewer than m" lies from 1 to m - 1.
    """
    t = np.asarray(table)
    K = t.shape[0]
    m = published.min_cell_count
    rows, lo, hi = [], [], []

    def eq(mask, low, high=None):
        rows.append(mask.ravel().astype(float))
        lo.append(float(low))
        hi.append(float(low if high is None else high))

    for i in range(K):
        for j in range(K):
            if published.cells[i][j] != SUPPRESSED:
                mask = np.zeros((K, K))
                mask[i, j] = 1
                eq(mask, published.cells[i][j])
    for i in range(K):
        if published.row_totals[i] != SUPPRESSED:
            mask = np.zeros((K, K))
            mask[i, :] = 1
            eq(mask, published.row_totals[i])
        if published.column_totals[i] != SUPPRESSED:
            mask = np.zeros((K, K))
            mask[:, i] = 1
            eq(mask, published.column_totals[i])
    eq(np.ones((K, K)), published.n)
    distance = np.abs(np.subtract.outer(np.arange(K), np.arange(K)))
    masks = [distance == d for d in range(K)] if bands else [distance == 0, distance != 0]
    assert len(published.agreement_counts) == len(masks)
    for mask, count, below in zip(masks, published.agreement_counts, published.agreement_below_minimum):
        if count != SUPPRESSED:
            assert count == t[mask].sum()
            eq(mask, count)
        elif below:
            assert 0 < t[mask].sum() < m
            eq(mask, 1, m - 1)
    return np.array(rows), np.array(lo), np.array(hi)


def _other_table_exists(a_eq, bounds, t, hidden, cell):
    """Is there another table of whole counts >= 0, agreeing with everything published, with a different ``cell``?

    A slow, obviously correct exhaustive search, independent of the stage's
    integer programmes: the suppressed cells are filled one at a time with
    every whole number the constraints' remainders allow (each constraint has
    coefficients 0 or 1), with ``cell`` set to each value other than its
    true one; any complete filling that meets every constraint is such a table.
    """
    low, high = bounds
    visible = np.ones(t.size, bool)
    visible[hidden] = False
    known = a_eq[:, visible] @ t.ravel()[visible]
    rest_lo, rest_hi = (low - known).astype(np.int64), (high - known).astype(np.int64)
    members = [np.flatnonzero(a_eq[:, c]) for c in hidden]
    order = [hidden.index(cell)] + [k for k in range(len(hidden)) if hidden[k] != cell]
    last = {}  # constraint -> the position in ``order`` that completes it
    for pos, k in enumerate(order):
        for e in members[k]:
            last[e] = pos

    def fill(pos, used):
        if pos == len(order):
            return True
        k = order[pos]
        top = int(min(rest_hi[members[k]] - used[members[k]])) if len(members[k]) else 0
        for v in range(top + 1):
            if pos == 0 and v == t.ravel()[cell]:
                continue
            after = used.copy()
            after[members[k]] += v
            if all(rest_lo[e] <= after[e] <= rest_hi[e] for e in members[k] if last[e] == pos) and fill(pos + 1, after):
                return True
        return False

    return fill(0, np.zeros(len(rest_lo), dtype=np.int64))


def _assert_protected(table, published, *, bands, m):
    t = np.asarray(table)
    K = t.shape[0]
    a_eq, low, high = _published_equations(t, published, bands=bands)
    hidden = [i * K + j for i in range(K) for j in range(K) if published.cells[i][j] == SUPPRESSED]
    for i in range(K):
        for j in range(K):
            shown = published.cells[i][j]
            if shown != SUPPRESSED:
                assert shown == t[i, j] and not 0 < shown < m
            elif t[i, j] > 0:
                # no suppressed count is fixed by the published counts and totals, by
                # subtraction or otherwise: another whole-count table agrees with
                # everything published and differs in it
                assert _other_table_exists(a_eq, (low, high), t, hidden, i * K + j), (t.tolist(), (i, j), published)
    # the totals shown are true, and none is small
    for i in range(K):
        for shown, true in ((published.row_totals[i], t[i].sum()), (published.column_totals[i], t[:, i].sum())):
            assert shown == SUPPRESSED or (shown == true and not 0 < true < m)
    if not published.margins_shown:
        assert set(published.row_totals) == set(published.column_totals) == {SUPPRESSED}
    # the agreement counts shown (people agreeing, differing) are not small either
    assert not any(isinstance(c, int) and 0 < c < m for c in published.agreement_counts)
    assert "n_small" not in published.to_dict()


@pytest.mark.parametrize("table", [
    [[130, 9], [4, 7]],          # the demo's confusion item: 4 was recoverable from 150 and the rates
    [[140, 2], [0, 8]],          # a visible 0 would give the 2 away
    [[3, 0], [0, 0]],
    [[50, 3, 0], [4, 40, 6], [0, 7, 30]],
    [[20, 1, 0, 0], [2, 15, 3, 0], [0, 4, 12, 1], [0, 0, 2, 9]],
    [[60, 0], [0, 40]],
])
@pytest.mark.parametrize("bands", [False, True])
def test_cross_table_hides_no_recoverable_count(table, bands):
    published = publish_cross_table(table, min_cell_count=5, bands=bands)
    _assert_protected(table, published, bands=bands, m=5)


def test_cross_table_without_small_counts_is_shown_whole():
    published = publish_cross_table([[105, 21], [13, 11]], min_cell_count=5)
    assert published.cells == ((105, 21), (13, 11)) and published.n_suppressed == 0
    assert published.row_totals == (126, 24) and published.column_totals == (118, 32) and published.margins_shown
    # min_cell_count 0 or 1 suppresses nothing
    assert publish_cross_table([[130, 9], [4, 7]], min_cell_count=1).cells == ((130, 9), (4, 7))


from hypothesis import given, settings, strategies as st


@settings(max_examples=80, deadline=None)
@given(st.integers(2, 3).flatmap(lambda k: st.lists(st.lists(st.integers(0, 40), min_size=k, max_size=k), min_size=k, max_size=k)),
       st.booleans(), st.integers(2, 11))
def test_cross_table_property(table, bands, m):
    _assert_protected(table, publish_cross_table(table, min_cell_count=m, bands=bands), bands=bands, m=m)


def test_cross_table_refusals():
    with pytest.raises(DataError, match="square"):
        publish_cross_table([[1, 2, 3]], min_cell_count=5)
    with pytest.raises(DataError, match="whole counts"):
        publish_cross_table([[1, -2], [3, 4]], min_cell_count=5)
    with pytest.raises(DataError, match="min_cell_count"):
        publish_cross_table([[1, 2], [3, 4]], min_cell_count=-1)


def test_record_publishes_the_protected_tables_only(study, cohorts):
    out = stage.assess(study, cohorts=cohorts, model=_model(study, cohorts, COEF, categorical={"sex": "female"}))
    m = study.output.min_cell_count
    for item in out.items:
        if item.kappa is None:
            continue
        published = publish_cross_table(item.kappa.table, min_cell_count=m, bands=item.weighted_kappa is not None)
        assert item.published == published
        _assert_protected(item.kappa.table, published, bands=item.weighted_kappa is not None, m=m)
        shown = item.agreement_table()
        # a plain range index, the first rater's categories in the first column, headers in words
        assert isinstance(shown.index, pd.RangeIndex) and shown.iloc[:, 0].tolist() == [*item.levels, "total"]
        assert shown.iloc[:-1, 1:-1].to_numpy().tolist() == [list(r) for r in published.cells]
        assert shown.iloc[-1, -1] == item.kappa.n
        d = item.to_dict()
        assert d["kappa"]["table"] == [list(r) for r in published.cells] and d["cross_table"]["margins_shown"] == published.margins_shown
        # the raters' rates appear in the sentence only when their totals are published
        assert (f"recorded '{item.levels[-1]}' for" in item.text) == published.margins_shown
    for cut in out.risk.cuts:
        for i, (saved, d) in enumerate(zip(cut.to_dict()["decisions"], cut.decisions)):
            published = cut.published(i)
            _assert_protected(d.decisions.table, published, bands=False, m=m)
            assert saved["decisions"]["table"] == [list(r) for r in published.cells]
            assert (saved["positive_a"], saved["positive_b"]) == (published.row_totals[-1], published.column_totals[-1])
            # the count of people decided differently, as published
            if published.agreement_counts[1] != SUPPRESSED:
                assert saved["different_decisions"] == d.discordant
            else:
                assert saved["different_decisions"] in ("fewer than 5", "all but fewer than 5", "not shown (small counts)")
                assert 0 < d.discordant < m or 0 < d.n - d.discordant < m or published.agreement_counts[0] == SUPPRESSED


def test_small_count_example_of_the_review():
    # 130 | 9 / 4 | 7 of 150 people: with n and the raters' rates a reader could
    # subtract 4 out; now the off-diagonal counts and the rates are suppressed.
    item_table = [[130, 9], [4, 7]]
    published = publish_cross_table(item_table, min_cell_count=5)
    assert published.cells == ((130, SUPPRESSED), (SUPPRESSED, 7))
    assert not published.margins_shown and published.n == 150


def test_ordinal_item_and_missing_pairs(folder, tmp_path):
    rng = np.random.default_rng(5)
    n = 40
    score_a = rng.integers(8, 16, n)
    score_b = np.clip(score_a + rng.integers(-1, 2, n), 8, 15)
    text_b = score_b.astype(str).astype(object)
    text_b[[3, 17]] = ""  # two readings missing
    path = _variant(folder, tmp_path, extra_columns={"alert_a": score_a.astype(str), "alert_b": text_b},
                    extra_items=[{"name": "alertness", "rater_a": "alert_a", "rater_b": "alert_b", "scale": "ordinal"}])
    out = stage.assess(load_study(path))
    item = out.item("alertness")
    keep = np.ones(n, bool)
    keep[[3, 17]] = False
    assert item.n_rows == n and item.n_pairs == n - 2
    # 2 missing of 40: a small count, stated as fewer than the minimum cell count
    assert any("Fewer than 5 of 40 rows" in w for w in item.warnings) and not any("2 of 40" in w for w in item.warnings)
    # Numeric categories are ordered as numbers, not as text ("10" after "9").
    assert item.level_order == "numeric"
    assert list(item.levels) == [str(v) for v in sorted(set(score_a[keep]) | set(score_b[keep]))]
    # Reference: scikit-learn 1.9 cohen_kappa_score, unweighted and quadratic, on the complete pairs.
    assert item.kappa.value == pytest.approx(cohen_kappa_score(score_a[keep], score_b[keep]), abs=1e-12)
    assert item.weighted_kappa.value == pytest.approx(cohen_kappa_score(score_a[keep], score_b[keep], weights="quadratic"), abs=1e-12)
    published = item.statistics["weighted_kappa"]
    assert ("quadratic weights" in item.text) == (published is not None)
    if published is not None:
        assert published == round(item.weighted_kappa.value, item.statistics.decimals["weighted_kappa"] or 17)


# --------------------------------------------------------------------------
# risk and decision agreement
# --------------------------------------------------------------------------

COEF = {"age": 0.02, "confusion": 1.5, "dry_skin": 0.8, "resp_rate": 0.12, "sex=male": 0.2}


def test_risk_agreement_by_hand(folder, study, cohorts, raw_ratings, tmp_path):
    model = _model(study, cohorts, COEF, categorical={"sex": "female"})
    record = tmp_path / "rec"
    save_model(model, record / "models" / "model.json")
    ctx = stage_context("agreement", study_path=folder / "study.yaml", record_dir=record)
    out = stage.run(ctx)
    risk = out.risk
    assert risk is not None and risk.model_sha256 == model.digest()
    assert risk.items_in_model == ("confusion", "dry_skin", "resp_rate")
    assert risk.items_not_in_model == ("cramps",)
    # The others fixed: pandas median and most frequent category of the derivation cohort.
    deriv = cohorts.derivation.frame
    assert risk.fixed == {"age": float(deriv["age"].median()), "sex": deriv["sex"].mode().iloc[0]}
    assert "sensitivity device" in risk.device_note
    frames = []
    for rater in ("rater_a", "rater_b"):
        frames.append(pd.DataFrame({
            "age": risk.fixed["age"], "sex": risk.fixed["sex"],
            "confusion": raw_ratings[f"confusion_{rater}"].astype(float),
            "dry_skin": raw_ratings[f"dry_skin_{rater}"].astype(float),
            "resp_rate": raw_ratings[f"resp_rate_{rater}"].astype(float),
        }))
    pa, pb = model.predict_proba(frames[0]), model.predict_proba(frames[1])
    saved = json.loads(ctx.results_path.read_text(encoding="utf-8"))["risk"]
    for j, cut in enumerate(saved["cuts"]):
        ra, rb = pa[:, j + 1 :].sum(axis=1), pb[:, j + 1 :].sum(axis=1)
        assert cut["risks"]["bias"] == pytest.approx(np.mean(ra - rb), abs=1e-12)
        assert cut["risks"]["sd"] == pytest.approx(np.std(ra - rb, ddof=1), abs=1e-12)
        thresholds = study.thresholds_for_cut(j)
        assert [d["threshold"] for d in cut["decisions"]] == list(thresholds)
        for d, t, kept in zip(cut["decisions"], thresholds, out.risk.cuts[j].decisions):
            da, db = (ra >= t).astype(int), (rb >= t).astype(int)
            assert kept.discordant == int(np.sum(da != db))
            differ = d["different_decisions"]
            assert differ == kept.discordant if isinstance(differ, int) else 0 < kept.discordant < 5 or kept.discordant > len(da) - 5
            # Reference: scikit-learn 1.9 cohen_kappa_score on the two decision vectors.
            if len(set(da) | set(db)) > 1:
                reference = cohen_kappa_score(da, db, labels=[0, 1])
                assert kept.decisions.value == pytest.approx(reference, abs=1e-12)
                if d["decisions"]["rounded_to"] is None and d["decisions"]["value"] is not None:
                    assert d["decisions"]["value"] == pytest.approx(reference, abs=1e-12)
                elif d["decisions"]["value"] is not None:
                    assert d["decisions"]["value"] == round(reference, d["decisions"]["rounded_to"])
            else:
                assert math.isnan(kept.decisions.value) and kept.decisions.warnings
        png = ctx.record_dir / out.risk_figure(j)
        assert png.is_file() and png.with_suffix(".svg").is_file()
    assert out.risk_frame()["quantity"].str.startswith("risk").sum() == 3 * len(saved["cuts"])


def test_other_predictors_from_the_ratings_file(folder, study, cohorts, tmp_path):
    n = len(pd.read_csv(folder / "data" / "ratings.csv"))
    ages = np.linspace(20, 70, n).round(1)
    path = _variant(folder, tmp_path, extra_columns={"age": ages.astype(str)})
    model = _model(study, cohorts, {"age": 0.02, "confusion": 1.5})
    out = stage.assess(load_study(path), model=model)
    assert out.risk.from_ratings_file == ("age",)
    assert out.risk.fixed == {}
    assert "Every predictor of the model comes from the ratings file" in out.risk_note
    # Only confusion differs between the raters, so where they agree the risks agree.
    ratings = pd.read_csv(tmp_path / "ratings.csv")
    same = (ratings["confusion_rater_a"] == ratings["confusion_rater_b"]).to_numpy()
    diffs = out.risk.cuts[0].risks.differences
    assert np.all(diffs[same] == 0) and np.all(diffs[~same] != 0)


def test_model_without_rated_items_and_wrong_levels(study, cohorts):
    out = stage.assess(study, cohorts=cohorts, model=_model(study, cohorts, {"age": 0.02, "wbgt": 0.1}))
    assert out.risk is None and "None of the rated items" in out.risk_note
    bad = _model(study, cohorts, COEF, categorical={"sex": "female"})
    bad = PredictionModel(design=bad.design, thresholds=bad.thresholds, coef=bad.coef, link="logit",
                          outcome={**bad.outcome, "levels": ["a", "b", "c"]})
    with pytest.raises(ModelFileError, match="outcome levels"):
        stage.assess(study, cohorts=cohorts, model=bad)


# --------------------------------------------------------------------------
# record rules, refusals, figure
# --------------------------------------------------------------------------

def test_run_is_deterministic_and_write_once(folder, tmp_path):
    a = stage_context("agreement", study_path=folder / "study.yaml", record_dir=tmp_path / "a")
    b = stage_context("agreement", study_path=folder / "study.yaml", record_dir=tmp_path / "b")
    stage.run(a)
    stage.run(b)
    assert a.results_path.read_bytes() == b.results_path.read_bytes()
    for suffix in (".png", ".svg"):
        name = "bland_altman_resp_rate" + suffix
        assert (a.figures_dir / name).read_bytes() == (b.figures_dir / name).read_bytes()
    with pytest.raises(RecordError, match="never overwritten"):
        stage.run(a)


def test_refusals(folder, study, cohorts):
    raw = yaml.safe_load((folder / "study.yaml").read_text(encoding="utf-8"))
    raw.pop("agreement")
    with pytest.raises(StudyError, match="agreement"):
        stage.assess(study_from_dict(raw, base_dir=folder))
    with pytest.raises(StudyError, match="assess\\(study\\)"):
        stage.assess("study.yaml")
    with pytest.raises(StudyError, match="item\\(name\\)"):
        stage.assess(study, cohorts=cohorts).item("no such item")


def _line_levels(fig):
    return sorted(float(line.get_ydata()[0]) for line in fig.axes[0].lines if line.get_linestyle() != "None")


def _drawn_bins(fig):
    """(mean from, mean to, difference from, difference to, people) of each bin a figure draws."""
    return [(p.get_x(), p.get_x() + p.get_width(), p.get_y(), p.get_y() + p.get_height(), int(p.get_gid().split(":")[1]))
            for p in fig.axes[0].patches if (p.get_gid() or "").startswith("bin:")]


def _assert_bins_match(fig, means, differences, m):
    drawn = _drawn_bins(fig)
    assert drawn
    for x0, x1, y0, y1, count in drawn:
        # each drawn bin's count, counted again from the pairs with numpy (2.4) comparisons
        inside = (means >= x0) & (means < x1) & (differences >= y0) & (differences < y1)
        assert count == int(inside.sum()) >= m
    # no marker for single pairs
    assert not [c for c in fig.axes[0].collections if len(c.get_offsets())]


def test_figures_draw_the_results(study, cohorts):
    out = stage.assess(study, cohorts=cohorts, model=_model(study, cohorts, COEF, categorical={"sex": "female"}))
    item = out.item("resp_rate")
    m = item.min_cell_count
    fig = plot_item_agreement(item)
    assert isinstance(fig, Figure)
    ba = item.bland_altman
    assert _line_levels(fig) == pytest.approx(sorted([0.0, ba.bias, ba.lower, ba.upper]), abs=1e-12)
    _assert_bins_match(fig, ba.means, ba.differences, m)
    assert item.rater_a in fig.axes[0].get_ylabel()
    # Risks are drawn in percent: every line and bin is the result times 100.
    cut = out.risk.cuts[0]
    fig = plot_risk_agreement(cut)
    r = cut.risks
    assert _line_levels(fig) == pytest.approx(sorted([0.0, 100 * r.bias, 100 * r.lower, 100 * r.upper]), abs=1e-10)
    _assert_bins_match(fig, 100 * r.means, 100 * r.differences, m)
    assert cut.label in fig.axes[0].get_title(loc="left")
    # where the study allows pair-level plots: one marker per distinct (mean, difference) pair, area by count;
    # reference: pandas 3.1 value_counts
    fig = plot_item_agreement(item, pair_level=True)
    (points,) = [c for c in fig.axes[0].collections if len(c.get_offsets())]
    counts = pd.DataFrame({"m": ba.means, "d": ba.differences}).value_counts()
    drawn = {(float(x), float(y)): float(s) for (x, y), s in zip(points.get_offsets(), points.get_sizes())}
    assert sorted(drawn) == sorted((float(a), float(d)) for a, d in counts.index)
    assert len({round(drawn[(float(a), float(d))] / n, 9) for (a, d), n in counts.items()}) == 1
    assert not _drawn_bins(fig)
    fig = plot_risk_agreement(cut, pair_level=True)
    (points,) = [c for c in fig.axes[0].collections if len(c.get_offsets())]
    assert set(np.round(points.get_offsets()[:, 0], 9)) == set(np.round(100 * r.means, 9))
    with pytest.raises(RiskvetError, match="continuous item"):
        plot_item_agreement(out.item("confusion"))
    with pytest.raises(RiskvetError, match="CutRiskAgreement"):
        plot_risk_agreement(r)


def test_bins_of_pairs():
    rng = np.random.default_rng(3)
    means = rng.normal(20, 4, 300)
    differences = np.round(rng.normal(0, 2, 300))
    bins = bin_pairs(means, differences, min_cell_count=5)
    # every pair is in one bin (numpy 2.4 histogram2d semantics); the drawn ones hold at least 5
    assert bins.counts.sum() == 300 and (bins.counts[bins.drawn] >= 5).all() and (bins.counts[~bins.drawn] < 5).all()
    assert bins.counts[bins.drawn].sum() >= 0.8 * 300
    # edges a whole step apart (the differences are whole numbers), half a unit off them: no edge marks a reading
    step = np.diff(bins.y_edges)[0]
    assert np.allclose(np.diff(bins.y_edges), step) and step % 1 == 0 and np.allclose(bins.y_edges % 1, 0.5)
    assert not np.isin(bins.x_edges, means).any() and not np.isin(bins.y_edges, differences).any()
    # continuous readings: edges half a round step off its multiples, so 0 is a bin centre
    step = np.diff(bins.x_edges)[0]
    assert np.allclose((bins.x_edges / step) % 1, 0.5)
    # without a minimum every bin holding someone is drawn
    every = bin_pairs(means, differences, min_cell_count=0)
    assert (every.drawn == (every.counts > 0)).all()
    for bad in (-1, 2.5, True):
        with pytest.raises(RiskvetError, match="min_cell_count"):
            bin_pairs(means, differences, min_cell_count=bad)
    with pytest.raises(RiskvetError, match="equal length"):
        bin_pairs(means, differences[:-1], min_cell_count=5)


def test_pair_level_plots_follow_the_study(folder, tmp_path):
    # The study schema may not hold the setting yet; the stage reads it with a default of False.
    study = load_study(folder / "study.yaml")
    allowed = study.model_copy(update={"output": study.output.model_copy(update={"pair_level_plots": True})})
    out = stage.assess(allowed)
    assert out.pair_level_plots and "single pairs" in out.figure_note
    assert not stage.assess(study).pair_level_plots

"""The agreement stage: results against scikit-learn, numpy and the agreement functions; risk agreement by hand."""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
import yaml
from matplotlib.figure import Figure
from sklearn.metrics import cohen_kappa_score

from riskvet.agreement import icc_table, kappa
from riskvet.data import load_cohorts
from riskvet.design import build_design
from riskvet.errors import ModelFileError, RecordError, RiskvetError, RiskvetWarning, StudyError
from riskvet.modelfile import PredictionModel, save_model
from riskvet.plots_agreement import plot_item_agreement, plot_risk_agreement
from riskvet.scaffold import new_study_folder
from riskvet.stagekit import stage_context
from riskvet.stages import agreement as stage
from riskvet.study import load_study, study_from_dict


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    root = tmp_path_factory.mktemp("agreement_study")
    new_study_folder(root, n_derivation=300, n_validation=200, n_ratings=40, n_boot=2)
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
            assert got["kappa"]["value"] == pytest.approx(cohen_kappa_score(a, b), abs=1e-12)
            assert got["kappa"]["value"] == pytest.approx(kappa(a.astype(str), b.astype(str)).value, abs=1e-15)
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
    assert f"confusion kappa {items['confusion']['kappa']['value']:.2f}" in saved["texts"]["summary"]
    # No figure for the risk without a model.
    assert sorted(saved["figures"]) == ["bland_altman_resp_rate"]


def test_cross_table_suppresses_small_counts(study, cohorts):
    out = stage.assess(study, cohorts=cohorts)
    m = study.output.min_cell_count
    for item in out.items:
        if item.kappa is None:
            continue
        shown = item.agreement_table().to_numpy().ravel().tolist()
        true = np.array(item.kappa.table).ravel().tolist()
        for s, t in zip(shown, true):
            assert s == (f"<{m}" if 0 < t < m else t)
        assert item.to_dict()["kappa"]["table"] == item.agreement_table().to_numpy().tolist()


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
    assert any("2 of 40 rows" in w for w in item.warnings)
    # Numeric categories are ordered as numbers, not as text ("10" after "9").
    assert item.level_order == "numeric"
    assert list(item.levels) == [str(v) for v in sorted(set(score_a[keep]) | set(score_b[keep]))]
    # Reference: scikit-learn 1.9 cohen_kappa_score, unweighted and quadratic, on the complete pairs.
    assert item.kappa.value == pytest.approx(cohen_kappa_score(score_a[keep], score_b[keep]), abs=1e-12)
    assert item.weighted_kappa.value == pytest.approx(cohen_kappa_score(score_a[keep], score_b[keep], weights="quadratic"), abs=1e-12)
    assert "quadratic weights" in item.text


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
        for d, t in zip(cut["decisions"], thresholds):
            da, db = (ra >= t).astype(int), (rb >= t).astype(int)
            assert d["discordant"] == int(np.sum(da != db))
            if d["decisions"]["value"] is not None:
                # Reference: scikit-learn 1.9 cohen_kappa_score on the two decision vectors.
                assert d["decisions"]["value"] == pytest.approx(cohen_kappa_score(da, db, labels=[0, 1]), abs=1e-12)
            else:
                assert len(set(da) | set(db)) == 1 and d["decisions"]["warnings"]
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


def test_figures_draw_the_results(study, cohorts):
    out = stage.assess(study, cohorts=cohorts, model=_model(study, cohorts, COEF, categorical={"sex": "female"}))
    item = out.item("resp_rate")
    fig = plot_item_agreement(item)
    assert isinstance(fig, Figure)
    ba = item.bland_altman
    assert _line_levels(fig) == pytest.approx(sorted([0.0, ba.bias, ba.lower, ba.upper]), abs=1e-12)
    points = next(line for line in fig.axes[0].lines if line.get_linestyle() == "None")
    assert np.array_equal(points.get_ydata(), ba.differences)
    assert item.rater_a in fig.axes[0].get_ylabel()
    # Risks are drawn in percent: every line and point is the result times 100.
    cut = out.risk.cuts[0]
    fig = plot_risk_agreement(cut)
    r = cut.risks
    assert _line_levels(fig) == pytest.approx(sorted([0.0, 100 * r.bias, 100 * r.lower, 100 * r.upper]), abs=1e-10)
    points = next(line for line in fig.axes[0].lines if line.get_linestyle() == "None")
    assert np.allclose(points.get_xdata(), 100 * r.means, rtol=0, atol=1e-12)
    assert cut.label in fig.axes[0].get_title(loc="left")
    with pytest.raises(RiskvetError, match="continuous item"):
        plot_item_agreement(out.item("confusion"))
    with pytest.raises(RiskvetError, match="CutRiskAgreement"):
        plot_risk_agreement(r)

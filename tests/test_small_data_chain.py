"""Small and separated data through ``riskvet run``: each finding of a user on small real data, end to end.

Every data set here is invented test data, drawn in the test from a fixed
seed; the checks are on what the record says (its results files and pages),
not on the numbers' values.  Each study runs only the stages it needs, with
few bootstrap replicates, to keep the suite fast.
"""

from __future__ import annotations

import io
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from bs4 import BeautifulSoup

from riskvet.chain.runner import run_study
from riskvet.errors import StudyError
from riskvet.reporting.publish import scan_text


def _write_study(folder: Path, frame: pd.DataFrame, *, outcome: dict, candidates: dict, model: dict | None = None,
                 selection: dict | None = None, internal: dict | None = None, thresholds: dict | None = None) -> Path:
    """A study file and its data in ``folder``: derivation and internal validation only, small B."""
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "derivation.csv", index=False)
    study = {
        "study": {"name": folder.name},
        "data": {"derivation": "derivation.csv"},
        "outcome": outcome,
        "predictors": {"candidates": candidates},
        "model": model or {},
        "selection": selection or {"method": "none"},
        "internal_validation": {"n_boot": 4, "seed": 3, "cv_repeats": 0, "shrink": False, **(internal or {})},
        "output": {"min_cell_count": 1},
    }
    if thresholds:
        study["thresholds"] = thresholds
    path = folder / "study.yaml"
    path.write_text(yaml.safe_dump(study, sort_keys=False))
    return path


def _run(path: Path):
    return run_study(path, out=io.StringIO())


def _results(result, stage: str) -> dict:
    return json.loads((result.record_dir / "results" / f"{stage}.json").read_text())


def _page_text(result, stage: str) -> str:
    """A page's visible text; it must show no missing-value word, class name, path or scientific notation."""
    page = next((result.record_dir / "html").glob(f"*_{stage}.html"))
    text = " ".join(BeautifulSoup(page.read_text(), "html.parser").get_text(" ").split())
    assert scan_text(text) == [], scan_text(text)
    return text


def _separated_binary(n: int = 160, seed: int = 5) -> pd.DataFrame:
    """Invented test data: a binary outcome that never occurs in the category ``c`` of ``site`` (quasi-complete separation)."""
    rng = np.random.default_rng(seed)
    age = rng.normal(50, 12, n).round(1)
    site = rng.choice(["a", "b", "c"], n, p=[0.45, 0.35, 0.2])
    lp = -0.5 + 0.04 * (age - 50)
    event = rng.random(n) < 1 / (1 + np.exp(-lp))
    event[site == "c"] = False
    return pd.DataFrame({"age": age, "site": site, "outcome": np.where(event, "yes", "no")})


_BINARY = {"column": "outcome", "type": "binary", "levels": ["no", "yes"], "event": "yes"}
_SITE = {"age": "linear", "site": {"form": "categorical", "reference": "a"}}


def test_a_separated_binary_model_stops_with_the_term_named(tmp_path):
    """Quasi-complete separation of a category: the derivation stops (model.on_separation: stop) and says which term."""
    path = _write_study(tmp_path / "sep-stop", _separated_binary(), outcome=_BINARY, candidates=_SITE,
                        internal={"enabled": False})
    result = _run(path)
    failed = result.failed_stage
    assert failed is not None and failed.stage == "derivation"
    message = failed.error["evalue"]
    assert "separated by site" in message and "model.on_separation: firth" in message
    assert "infinite" in message


def test_a_separated_binary_model_refitted_by_firth_through_the_chain(tmp_path):
    """model.on_separation: firth: the chosen model is refitted by Firth's method; the page names the term and the
    method, and the bootstrap replicates (each separated the same way) are refitted too, not failed."""
    path = _write_study(tmp_path / "sep-firth", _separated_binary(), outcome=_BINARY, candidates=_SITE,
                        model={"on_separation": "firth"})
    result = _run(path)
    assert result.ok, result.failed_stage and result.failed_stage.error
    derivation = _results(result, "derivation")
    assert derivation["estimation"] == "firth" and derivation["refit_with_firth"] is True
    assert derivation["separated_terms"] and derivation["separated_terms"][0].startswith("site")
    estimates = [row["estimate"] for row in derivation["parameters"]]
    assert all(math.isfinite(v) and abs(v) < 10 for v in estimates)
    text = _page_text(result, "derivation")
    assert "separated by site" in text and "refitted by Firth's method" in text
    assert "profile penalised-likelihood interval" in text
    internal = _results(result, "internal_validation")["bootstrap"]
    assert "separation" not in {f["reason"] for f in internal["failures"]}


def test_an_ordinal_non_proportional_model_separated_by_a_category_is_fitted_by_firth(tmp_path):
    """A dummy that never occurs in the lowest level, in a model with a slope per cut: the separation is found and
    named, and Firth's estimates are finite."""
    rng = np.random.default_rng(11)
    n = 240
    age = rng.normal(50, 12, n).round(1)
    site = rng.choice(["a", "b", "c"], n, p=[0.45, 0.35, 0.2])
    u = 0.04 * (age - 50) + rng.logistic(size=n)
    level = np.digitize(u, [-0.6, 0.9])
    level[(site == "c") & (level == 0)] = 1  # no one at site c in the lowest level
    frame = pd.DataFrame({"age": age, "site": site, "grade": np.array(["none", "moderate", "severe"])[level]})
    outcome = {"column": "grade", "type": "ordinal", "levels": ["none", "moderate", "severe"]}
    path = _write_study(tmp_path / "sep-ordinal", frame, outcome=outcome, candidates=_SITE,
                        model={"proportional": False, "estimation": "firth"}, internal={"enabled": False})
    result = _run(path)
    assert result.ok, result.failed_stage and result.failed_stage.error
    derivation = _results(result, "derivation")
    assert derivation["estimation"] == "firth"
    assert derivation["separated_terms"] and derivation["separated_terms"][0].startswith("site")
    assert all(math.isfinite(row["estimate"]) and abs(row["estimate"]) < 15 for row in derivation["parameters"])
    assert "separated by site" in _page_text(result, "derivation")


def test_a_fifteen_row_study_with_no_selected_term_runs_and_counts_its_failures(tmp_path):
    """A 15-row study: forward selection on a noise predictor keeps no term (a valid model, calibration slope
    undefined), and every replicate that cannot be derived is a counted failure with its reason."""
    rng = np.random.default_rng(2)
    frame = pd.DataFrame({"noise": rng.normal(size=15).round(2), "outcome": ["yes"] * 6 + ["no"] * 9})
    path = _write_study(tmp_path / "fifteen", frame, outcome=_BINARY, candidates={"noise": "linear"},
                        selection={"method": "forward", "folds": 3, "seed": 1},
                        internal={"n_boot": 8, "max_failed_share": 1.0})
    result = _run(path)
    assert result.ok, result.failed_stage and result.failed_stage.error
    derivation = _results(result, "derivation")
    assert derivation["terms"] == []
    internal = _results(result, "internal_validation")["bootstrap"]
    assert internal["n_boot"] == 8 and internal["n_succeeded"] + len(internal["failures"]) == 8
    assert all(f["reason"] and f["message"] for f in internal["failures"])
    assert "ZeroDivisionError" not in json.dumps(internal)
    slope = next(e for e in internal["estimates"] if e["measure"] == "calibration_slope")
    assert slope["apparent"] is None and slope["undefined_reason"]
    auc = next(e for e in internal["estimates"] if e["measure"] == "auc")
    assert auc["apparent"] == 0.5
    text = _page_text(result, "internal_validation")
    assert "undefined:" in text
    derivation_page = _page_text(result, "derivation")
    assert "the calibration slope is undefined (shown as a dash)" in derivation_page
    assert "Hosmer–Lemeshow test is not computed" in derivation_page


def test_more_folds_than_people_in_a_level_is_refused_before_anything_runs(tmp_path):
    rng = np.random.default_rng(2)
    frame = pd.DataFrame({"noise": rng.normal(size=15).round(2), "outcome": ["yes"] * 6 + ["no"] * 9})
    path = _write_study(tmp_path / "folds", frame, outcome=_BINARY, candidates={"noise": "linear"},
                        selection={"method": "forward", "folds": 10}, internal={"enabled": False})
    with pytest.raises(StudyError, match=r"selection.folds: expected at most 6, the people in the smallest outcome level"):
        _run(path)
    assert not (path.parent / "records").exists() or not any((path.parent / "records").iterdir())


@pytest.fixture(scope="module")
def rare_level_lasso(tmp_path_factory):
    """Invented test data: an ordered outcome whose top level is rare, derived by the lasso."""
    rng = np.random.default_rng(21)
    n = 260
    X = rng.normal(size=(n, 4)).round(3)
    u = X @ np.array([0.9, -0.6, 0.0, 0.0]) + rng.logistic(size=n)
    level = np.digitize(u, [0.3, 4.2])
    frame = pd.DataFrame(X, columns=["a", "b", "c", "d"])
    frame["grade"] = np.array(["none", "moderate", "severe"])[level]
    outcome = {"column": "grade", "type": "ordinal", "levels": ["none", "moderate", "severe"]}
    path = _write_study(tmp_path_factory.mktemp("rare") / "rare", frame, outcome=outcome,
                        candidates={c: "linear" for c in "abcd"},
                        selection={"method": "lasso", "folds": 3, "seed": 4, "n_penalties": 12},
                        internal={"n_boot": 6, "max_failed_share": 0.5})
    result = _run(path)
    assert result.ok, result.failed_stage and result.failed_stage.error
    return frame, result


def test_a_lasso_derivation_reports_its_penalty_and_its_spread(rare_level_lasso):
    frame, result = rare_level_lasso
    derivation = _results(result, "derivation")
    assert derivation["estimation"] == "penalized"
    assert derivation["selection"]["penalty"]["alpha"] > 0
    text = _page_text(result, "derivation")
    assert "Lasso regression on every candidate term" in text and "no valid standard errors" in text
    assert "Van Calster" in text and "Riley" in text
    internal = _results(result, "internal_validation")["bootstrap"]
    assert internal["penalty_spread"]["n_replicates"] >= 1
    text = _page_text(result, "internal_validation")
    assert "Each replicate tuned its own penalty" in text and "Van Calster" in text


def test_a_rare_level_per_cut_slope_is_marked_unstable_not_corrected(rare_level_lasso):
    frame, result = rare_level_lasso
    assert (frame["grade"] == "severe").sum() < 10
    internal = _results(result, "internal_validation")["bootstrap"]
    rows = {row["measure"]: row for row in internal["estimates"]}
    top_cut = [k for k in rows if k.endswith("_cut1")]
    assert top_cut and all(rows[k]["unstable"] is True for k in top_cut)
    assert "Not read, because unstable" in _page_text(result, "internal_validation")


def test_riskvet_check_names_a_separating_term_before_anything_is_fitted(tmp_path, capsys):
    from riskvet.chain import cli
    from riskvet.intake.study import load_study
    from riskvet.intake.data import load_cohorts
    from riskvet.modelling.derive import separating_terms

    path = _write_study(tmp_path / "sep-check", _separated_binary(), outcome=_BINARY, candidates=_SITE,
                        internal={"enabled": False})
    study = load_study(path)
    cohort = load_cohorts(study).derivation
    assert separating_terms(study, cohort.frame, cohort.y) == ("site",)
    assert cli.main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "warning: separation: the derivation data are separated by site (categories)" not in out  # term names, not labels
    assert "warning: separation: the derivation data are separated by site in the model with every candidate" in out
    assert "the derivation will stop (model.on_separation: stop)" in out
    # data that are not separated say nothing about it
    frame = _separated_binary()
    frame.loc[frame.index[frame["site"] == "c"][:5], "outcome"] = "yes"
    assert separating_terms(study, frame, (frame["outcome"] == "yes").to_numpy().astype(int)) == ()


def test_the_lasso_page_shows_its_penalty_curve_table_and_figure(rare_level_lasso):
    frame, result = rare_level_lasso
    text = _page_text(result, "derivation")
    assert "Cross-validated log-likelihood at each penalty tried" in text
    assert "terms with a non-zero coefficient" in text
    assert (result.record_dir / "figures" / "derivation" / "penalty_curve.svg").is_file()
    # the optimism figure draws an unstable estimate without its corrected value, and says so
    svg = (result.record_dir / "figures" / "internal_validation" / "optimism.svg").read_text()
    assert "unstable: not corrected" in svg


def test_a_binary_model_with_the_loglog_link_runs_and_writes_its_equation(tmp_path):
    """link: loglog (the event-side complementary log-log model) from the study file to the model file and page."""
    frame = _separated_binary()
    frame.loc[frame.index[frame["site"] == "c"][:6], "outcome"] = "yes"  # no longer separated
    path = _write_study(tmp_path / "loglog", frame, outcome=_BINARY, candidates=_SITE, model={"link": "loglog"},
                        internal={"enabled": False})
    result = _run(path)
    assert result.ok, result.failed_stage and result.failed_stage.error
    model = json.loads((result.record_dir / "models" / "model.json").read_text())
    assert model["link"] == "loglog"
    assert "H(t) = exp(-exp(-t))" in _page_text(result, "derivation")

"""The internal-external stage end to end, in the small demo records of conftest.

The demo's derivation data carry the first-aid tent that saw each attendee
(nine invented tents with different case-mix); the demo study names it as
``data.cluster_column`` (kind ``site``) and enables ``internal_external``.
These tests read what ``riskvet run`` wrote: the results file, the page, the
figures, the TRIPOD+AI mapping and the internal validation's resampling unit.
"""

from __future__ import annotations

import json
import math

from riskvet.reporting.tripod import tripod_table


def _results(result, stage: str) -> dict:
    return json.loads((result.record_dir / "results" / f"{stage}.json").read_text(encoding="utf-8"))


def test_every_tent_is_left_out_and_the_measures_are_pooled(chain):
    found = _results(chain, "internal_external")["internal_external"]
    assert found["cluster_column"] == "tent" and found["cluster_kind"] == "site"
    assert found["n_clusters"] == 9 and len(found["clusters"]) == 9
    assert all(c["status"] == "ok" for c in found["clusters"])
    pooled = {(p["measure"], p["cut"]): p for p in found["pooled"] if p["measure"] != "net_benefit"}
    c0 = pooled[("c", 0)]
    assert c0["n_clusters"] >= 3 and 0.5 < c0["estimate"] < 1
    assert c0["lower"] < c0["estimate"] < c0["upper"]
    # the prediction interval for a new site is at least as wide as the confidence interval (common practice: it adds tau^2)
    assert c0["prediction_lower"] <= c0["lower"] and c0["prediction_upper"] >= c0["upper"]
    # every cluster is named in each pooled measure: pooled or left out with a reason
    for p in found["pooled"]:
        assert p["n_clusters"] + len(p["left_out"]) == 9
        assert all(entry["reason"] for entry in p["left_out"])


def test_no_small_count_reaches_the_results_or_the_page(chain):
    content = _results(chain, "internal_external")
    m = 5  # output.min_cell_count of the demo study
    for row in content["sizes"]:
        for key, value in row.items():
            if key.startswith("people"):
                assert value == "suppressed" or value == 0 or value >= m, (row["cluster"], key, value)
    for cluster in content["internal_external"]["clusters"]:
        for value in cluster["level_counts"].values():
            assert value == "suppressed" or value == 0 or value >= m
    # a reason for a measure left out names the rule, never the count
    reasons = {m["reason"] for m in content["internal_external"]["measures"] if m["reason"]}
    assert all(not any(ch.isdigit() for ch in r.replace("min_events", "").replace(f"fewer than {m}", "")) for r in reasons), reasons


def test_page_figures_and_tripod_items(chain):
    record = chain.record_dir
    page = (record / "html" / "05_internal_external.html").read_text(encoding="utf-8")
    for heading in ("How it was done", "Pooled performance", "Performance in each site or period", "Measures not estimated"):
        assert heading in page
    assert "Statistical evaluation is not clearance for clinical use" in page
    assert (record / "figures" / "internal_external" / "clusters_cut1.png").is_file()
    assert (record / "figures" / "internal_external" / "clusters_cut2.svg").is_file()
    results = {p.stem: json.loads(p.read_text(encoding="utf-8")) for p in (record / "results").glob("*.json")}
    study = json.loads((record / "study.json").read_text(encoding="utf-8"))
    enabled = [s["stage"] for s in json.loads((record / "manifest.json").read_text(encoding="utf-8"))["stages"]]
    table = tripod_table(record, results=results, enabled=enabled, checklist="TRIPOD+AI 2024", study=study).to_frame()
    rows = table.set_index("item")
    # TRIPOD+AI 2024 (Collins et al., BMJ 2024): 12d clustering and how it was handled, 23b heterogeneity across clusters
    assert rows.loc["23b", "status"] == "answered"
    assert rows.loc["12d", "status"] == "answered"
    assert "Pooled performance" in rows.loc["23b", "where in the record"]


def test_internal_validation_resampled_whole_tents(chain):
    boot = _results(chain, "internal_validation")["bootstrap"]
    assert boot["resampled"] == "clusters" and boot["n_clusters"] == 9 and boot["cluster_kind"] == "site"
    assert "whole sites" in _results(chain, "internal_validation")["texts"]["summary"]


def test_binary_record_has_one_forest_figure(binary_chain):
    _, result = binary_chain
    found = _results(result, "internal_external")["internal_external"]
    assert found["levels"] == ["released", "transferred"]
    assert (result.record_dir / "figures" / "internal_external" / "clusters.png").is_file()
    slope = next(p for p in found["pooled"] if p["measure"] == "calibration_slope")
    assert slope["reason"] or math.isfinite(slope["estimate"])


def test_check_names_the_clusters(tmp_path, capsys):
    from riskvet.chain.cli import main
    from riskvet.chain.scaffold import new_study_folder

    study = new_study_folder(tmp_path / "demo", n_derivation=300, n_validation=100, n_ratings=20, n_boot=2, missing_data="complete_case")
    assert main(["check", str(study)]) == 0
    printed = capsys.readouterr().out
    assert "internal_external" in printed.splitlines()[1]  # the enabled stages
    assert "clusters ('tent', kind site): 9 sites" in printed


def test_several_validation_cohorts_are_pooled_by_random_effects(chain, tmp_path):
    import numpy as np
    import yaml

    from riskvet import demo
    from riskvet.chain.stages.external_validation import pool_cohorts
    from riskvet.intake.data import expand_cohort, load_cohorts
    from riskvet.intake.study import load_study
    from riskvet.modelling.modelfile import load_model
    from riskvet.pooling import back_transform, logit_c, random_effects
    from riskvet.validation.external import apply_model
    from riskvet.validation.iecv import cluster_measures

    record = chain.record_dir
    raw = json.loads((record / "study.json").read_text(encoding="utf-8"))  # the resolved study: its paths are absolute
    for seed, label in ((31, "later-a"), (32, "later-b")):
        demo.validation_cohort(seed=seed, n=400).to_csv(tmp_path / f"{label}.csv", index=False)
    raw["data"]["validation"] = [*raw["data"]["validation"], {"label": "later-a", "path": str(tmp_path / "later-a.csv")},
                                 {"label": "later-b", "path": str(tmp_path / "later-b.csv")}]
    raw["output"]["records"] = str(tmp_path / "records")
    raw["missing_data"] = {"method": "complete_case"}  # the cohorts' own rows, as the by-hand pooling below takes them
    path = tmp_path / "three.yaml"
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    study = load_study(path)
    model = load_model(record / "models" / "model.json")
    cohorts = load_cohorts(study)
    pooled = pool_cohorts(study, model, cohorts)
    c0 = next(p for p in pooled if p.measure == "c" and p.cut == 0)
    assert c0.n_clusters == 3 and not c0.reason
    # by hand: each cohort's C and DeLong SE, pooled on the logit scale by REML (the study's default)
    est, se = [], []
    for label, cohort in cohorts.validation.items():
        people = expand_cohort(cohort)
        rows = cluster_measures(label, people.y, apply_model(model, people.frame, label=label), thresholds={}, min_events=5)
        c = next(r for r in rows if r.measure == "c" and r.cut == 0)
        est.append(c.estimate)
        se.append(c.se)
    logit, var = logit_c(np.array(est), np.array(se) ** 2)
    expected = back_transform(random_effects(logit, var, method="reml"), scale="logit")
    assert c0.estimate == expected.estimate and c0.prediction_upper == expected.prediction_upper


def test_forest_axis_cuts_only_an_outlying_interval():
    from riskvet.reporting.figures.internal_external import _limits
    from riskvet.validation.iecv import ClusterMeasure, PooledMeasure

    rows = {f"s{i}": ClusterMeasure(f"s{i}", "calibration_slope", 0, float("nan"), 1.0, 0.2, 0.6, 1.4) for i in range(5)}
    rows["wide"] = ClusterMeasure("wide", "calibration_slope", 0, float("nan"), 5.0, 5.0, -5.0, 15.0)
    pooled = PooledMeasure("calibration_slope", 0, float("nan"), "identity", 6, 1.0, 0.8, 1.2, 0.5, 1.5, 0.0, 0.0)
    low, high = _limits(rows, pooled, log=False)
    assert low <= 0.6 and high >= 5.0  # typical intervals and every estimate are drawn whole
    assert low > -5.0 and high < 15.0  # the outlying interval is cut at the edge (drawn with arrowheads)

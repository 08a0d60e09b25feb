"""Sentences of the summary page: what the record holds and how to read it."""

from __future__ import annotations

from typing import Any, Mapping

import pandas as pd

from .common import CAUTION

__all__ = ["STAGE_TITLES", "summary_texts"]

#: Each stage's name in words.
STAGE_TITLES = {
    "planning": "sample-size planning",
    "agreement": "rater agreement",
    "derivation": "derivation",
    "internal_validation": "internal validation",
    "external_validation": "external validation",
    "updating": "updating",
}


def summary_texts(study: Mapping[str, Any], stages: pd.DataFrame, model: Mapping[str, Any] | None) -> dict[str, str]:
    """The summary page's sentences: the study, which stages ran, the frozen model, how to read the tables.

    ``study`` holds the study's name and outcome (column, type, levels and
    labels), ``stages`` the stage status table and ``model`` the frozen
    model's summary (None when the record holds none).
    """
    ran = stages.loc[stages["status"] == "ran", "stage"].map(STAGE_TITLES).tolist()
    not_run = stages.loc[stages["status"] == "enabled, not run in this record", "stage"].map(STAGE_TITLES).tolist()
    off = stages.loc[stages["status"] == "not enabled in the study file", "stage"].map(STAGE_TITLES).tolist()
    parts = [f"This record holds the results of {_join(ran) if ran else 'no earlier stage'}."]
    if not_run:
        parts.append(f"Enabled in the study but not run in this record: {_join(not_run)} (a partial run; see the manifest).")
    if off:
        parts.append(f"Not enabled in the study file: {_join(off)}.")
    if model is None:
        model_text = "The record holds no frozen model."
    else:
        model_text = (
            f"The frozen model was {model['source']}; its content SHA-256 is {model['sha256'][:12]}… "
            f"({model['n_columns']} design columns, {model['link']} link, "
            f"{'proportional' if model['proportional'] else 'non-proportional'} cumulative model "
            f"over {len(model['outcome_levels'])} levels)."
        )
    levels = ", ".join(study["outcome_labels"].get(lv, lv) for lv in study["outcome_levels"])
    return {
        "caution": CAUTION,
        "study": f"Study {study['name']!r}: {study['outcome_type']} outcome {study['outcome_column']!r} with levels {levels}.",
        "stages": " ".join(parts),
        "model": model_text,
        "key_results": (
            "The numbers below are copied from each stage's results file (the key column says where), with the "
            "interval that stage reports, if any (its notebook says which kind); the stage notebooks interpret them."
        ),
        "tripod": (
            "For each TRIPOD item the analysis covers, where this record answers it: the executed notebook and "
            "section, and the results key. Items about the writing itself are left to the authors' report."
        ),
    }


def _join(words: list[str]) -> str:
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]

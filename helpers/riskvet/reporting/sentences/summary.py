"""Sentences of the summary page: what the record holds and how to read it."""

from __future__ import annotations

from typing import Any, Mapping

import pandas as pd

from .common import CAUTION

__all__ = ["STAGE_TITLES", "summary_texts", "selection_stability_sentence"]

#: Each stage's name in words.
STAGE_TITLES = {
    "planning": "sample-size planning",
    "agreement": "rater agreement",
    "derivation": "derivation",
    "internal_validation": "internal validation",
    "internal_external": "internal-external cross-validation",
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
            "The numbers below are copied from each stage's results file (results/summary.json says where each one is), "
            "with the interval that stage reports, if any; the stage's page names the kind of each interval and interprets the numbers."
        ),
        "tripod": (
            "For each item of the checklist, whether this record answers it, answers it in part (and what is missing) "
            "or leaves it to the authors, and the page and section where it is answered; the links below go to those sections."
        ),
    }


def _join(words: list[str]) -> str:
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


def selection_stability_sentence(stability: Mapping[str, Any]) -> str | None:
    """How often the bootstrap replicates of the whole derivation chose each term again, in words.

    ``stability`` is the ``bootstrap.stability`` entry of the internal
    validation's results: ``share_selected`` (term -> share of replicates),
    ``apparent_terms`` (the final model's selected terms), ``forced_terms``
    and ``n_replicates``.  Returns None when there was no selection to repeat.
    The page calls a selection unstable when a selected term is chosen again
    in fewer than 80% of replicates or a left-out term in 20% or more (a
    reading aid, common practice, not a test).
    """
    share = stability.get("share_selected") if isinstance(stability, Mapping) else None
    if not isinstance(share, Mapping) or not share or stability.get("method") in (None, "none"):
        return None
    forced = set(stability.get("forced_terms") or ())
    chosen = [t for t in (stability.get("apparent_terms") or ()) if t not in forced and t in share]
    others = sorted(((t, v) for t, v in share.items() if t not in forced and t not in chosen and v > 0), key=lambda tv: (-tv[1], tv[0]))
    n = stability.get("n_replicates")
    parts = [f"Selection stability over {n} bootstrap replicates of the whole derivation:"]
    if chosen:
        parts.append("the selected terms were chosen again in " + ", ".join(f"{share[t]:.0%} ({t})" for t in chosen) + " of replicates")
    else:
        parts.append("the final model selected no term beyond the forced ones")
    if others:
        parts[-1] += "; terms left out of the final model were chosen in up to " + ", ".join(f"{v:.0%} ({t})" for t, v in others[:3])
    unstable = any(share[t] < 0.8 for t in chosen) or any(v >= 0.2 for _, v in others)
    parts[-1] += "."
    parts.append(
        "The selection is unstable: other data of the same size would often give another model, so read single terms' "
        "effects with caution." if unstable else "The selection is stable: the same terms are chosen in most replicates."
    )
    return " ".join(parts)

"""Tests of the missing-data report, its figures and its sentences.

riskvet.reporting.missingness.missing_data_report,
riskvet.reporting.figures.missing_data and
riskvet.reporting.sentences.missing_data, on cohorts generated here with
numpy: an age missing completely at random, a lactate missing at random
given the outcome (measured less often in people without the event), an
ordered severity missing completely at random or in only three people, and
a wide frame with many patterns.  Counts are checked against pandas, the
suppression against the package's integer-programming check and an
independent one that also knows what a reader knows (each listed pattern
holds at least one person), the rule of thumb against White, Royston &
Wood (2011).  Small data, few imputations and cycles keep the module to a
few seconds.
"""

from __future__ import annotations

import io
import json
import math

import numpy as np
import pandas as pd
import pytest
from riskvet.errors import DataError, RiskvetError
from riskvet.imputation import impute
from riskvet.imputation.procedure import imputations_needed
from riskvet.reporting.disclosure import SUPPRESSED, determined_counts
from riskvet.reporting.figures.missing_data import (
    MAX_CHAIN_COLUMNS,
    plot_imputation_chains,
    plot_observed_imputed,
)
from riskvet.reporting.missingness import (
    COMPLETE_PATTERN,
    MAX_PATTERNS,
    OTHER_PATTERNS,
    TABLES,
    WITHHELD,
    MissingDataReport,
    missing_data_report,
)
from riskvet.reporting.sentences.missing_data import TRIPOD_ITEMS, missing_data_texts
from scipy.optimize import Bounds, LinearConstraint, milp
from scipy.special import expit

COLUMNS = ["age", "lactate", "sex", "severity"]
LEVELS = ["mild", "moderate", "severe"]


# ---- data ---------------------------------------------------------------------------------------------


def cohort(n: int = 400, seed: int = 1, severity_missing: int | None = None) -> pd.DataFrame:
    """Age MCAR (12%), lactate MAR on the outcome (25% without the event, 8% with it), severity MCAR (10%) or
    missing in the first ``severity_missing`` people; sex complete."""
    rng = np.random.default_rng(seed)
    age = np.round(rng.normal(62, 12, n))
    lactate = np.round(rng.gamma(2.0, 1.0, n), 1)
    severity = pd.Categorical(rng.choice(LEVELS, n, p=[0.5, 0.3, 0.2]), categories=LEVELS, ordered=True)
    y = (rng.random(n) < expit(-1.0 + 0.04 * (age - 62) + 0.4 * (lactate - 2.0))).astype(int)
    frame = pd.DataFrame({"age": age, "lactate": lactate, "sex": pd.Categorical(rng.choice(["female", "male"], n)),
                          "severity": severity, "y": y})
    frame.loc[rng.random(n) < 0.12, "age"] = np.nan
    frame.loc[rng.random(n) < np.where(y == 1, 0.08, 0.25), "lactate"] = np.nan
    if severity_missing is None:
        frame.loc[rng.random(n) < 0.10, "severity"] = np.nan
    else:
        frame.loc[frame.index[:severity_missing], "severity"] = np.nan
    return frame


def wide(n: int = 300, seed: int = 2, k: int = 10, share: float = 0.2) -> pd.DataFrame:
    """``k`` numeric columns, each missing completely at random with probability ``share``: many patterns."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, k)) + rng.normal(size=(n, 1))
    frame = pd.DataFrame(np.round(x, 2), columns=[f"x{j}" for j in range(k)])
    frame["y"] = (rng.random(n) < expit(x[:, 0])).astype(int)
    for j in range(k):
        frame.loc[rng.random(n) < share, f"x{j}"] = np.nan
    return frame


@pytest.fixture(scope="module")
def mcar():
    frame = cohort()
    return frame, impute(frame, m=5, seed=11, outcome="y", iterations=5)


@pytest.fixture(scope="module")
def few():
    frame = cohort(severity_missing=3)
    return frame, impute(frame, m=5, seed=12, outcome="y", iterations=5)


@pytest.fixture(scope="module")
def many():
    frame = wide()
    return frame, impute(frame, m=2, seed=13, outcome="y", iterations=2)


@pytest.fixture(scope="module")
def rare():
    """Twelve columns with about 3% missing each (about 40 patterns) and one column missing in three people only."""
    frame = wide(n=1000, seed=3, k=12, share=0.03)
    frame["x1"] = frame["x1"].fillna(0.0)
    frame.loc[frame.index[[5, 50, 500]], "x1"] = np.nan
    return frame, impute(frame, m=2, seed=14, outcome="y", iterations=2)


def true_patterns(frame: pd.DataFrame, columns: list[str]) -> dict[tuple, int]:
    """People per pattern of missing columns, by pandas (isna, then value_counts of the rows)."""
    gone = frame[columns].isna()
    counts = gone.value_counts()
    return {tuple(c for c, g in zip(columns, key) if g): int(v) for key, v in counts.items()}


def published_pattern(text: str) -> tuple:
    return () if text == COMPLETE_PATTERN else tuple(text.split(", "))


# ---- counts ---------------------------------------------------------------------------------------------


def test_counts_and_shares_match_pandas(mcar):
    frame, imp = mcar
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=0, cohort_label="derivation", n_people=len(frame))
    table = report.to_frame("columns")
    assert list(table.columns) == ["column", "used as", "people missing", "share missing", "imputation method"]
    # pandas isna count and its share of the rows
    assert table["people missing"].tolist() == [int(frame[c].isna().sum()) for c in COLUMNS]
    assert table["share missing"].tolist() == pytest.approx([frame[c].isna().mean() for c in COLUMNS], abs=5e-5)  # rounded to 4 decimals
    assert table["imputation method"].tolist() == ["predictive mean matching", "predictive mean matching", "none needed (complete)",
                                                   "proportional-odds (cumulative logit) model"]
    patterns = report.to_frame("patterns")
    assert list(patterns.columns) == ["columns missing", "people", "share"]
    assert patterns["people"].sum() == len(frame)
    # pandas value_counts of the isna rows: every pattern (there are fewer than 10) with its count
    truth = true_patterns(frame, COLUMNS)
    assert len(truth) <= MAX_PATTERNS and OTHER_PATTERNS not in patterns["columns missing"].tolist()
    assert {published_pattern(t): n for t, n in zip(patterns["columns missing"], patterns["people"])} == truth
    assert patterns["columns missing"].iloc[0] == COMPLETE_PATTERN
    # listed by number of columns missing, then column order: the order says nothing about a suppressed size
    keys = [published_pattern(t) for t in patterns["columns missing"]]
    assert keys == sorted(keys, key=lambda p: (len(p), [COLUMNS.index(c) for c in p]))
    complete = frame[COLUMNS].notna().all(axis=1)
    assert report.complete_people == int(complete.sum()) and report.complete_share == pytest.approx(complete.mean(), abs=5e-5)
    assert report.n_suppressed == 0 and report.withheld_columns == ()
    json.dumps(report.to_dict(), allow_nan=False)


def test_nobody_complete_still_has_a_complete_row_and_small_minimums_hide_nothing():
    n = 60
    rng = np.random.default_rng(4)
    frame = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n), "y": rng.integers(0, 2, n)})
    frame.loc[frame.index[::2], "a"] = np.nan
    frame.loc[frame.index[1::2], "b"] = np.nan
    imp = impute(frame, m=2, seed=1, outcome="y", iterations=1)
    for m in (0, 1):
        report = missing_data_report(imp, columns=["a", "b"], min_cell_count=m, cohort_label="all incomplete")
        patterns = report.to_frame("patterns")
        assert patterns.iloc[0].tolist() == [COMPLETE_PATTERN, 0, 0.0]
        assert patterns["people"].sum() == n and report.n_suppressed == 0
        assert report.last_half == (1, 1)  # one cycle: the range is over that cycle alone
        assert (report.to_frame("convergence")["range of the mean over the last half"] == 0.0).all()


def test_patterns_beyond_the_first_ten_share_one_row(many):
    frame, imp = many
    columns = [c for c in frame.columns if c != "y"]
    report = missing_data_report(imp, columns=columns, min_cell_count=0, cohort_label="wide")
    patterns = report.to_frame("patterns")
    truth = true_patterns(frame, columns)
    assert len(truth) > MAX_PATTERNS
    assert len(patterns) == MAX_PATTERNS + 1 and patterns["columns missing"].iloc[-1] == OTHER_PATTERNS
    assert patterns["people"].sum() == len(frame)  # the rows add up to everyone
    listed = {published_pattern(t): n for t, n in zip(patterns["columns missing"][:-1], patterns["people"][:-1])}
    assert all(truth[p] == n for p, n in listed.items())
    # the listed incomplete patterns are the most frequent (pandas value_counts): none left out is larger
    unlisted = [n for p, n in truth.items() if p not in listed]
    assert min(n for p, n in listed.items() if p) >= max(unlisted)
    assert patterns["people"].iloc[-1] == sum(unlisted)


# ---- disclosure control -------------------------------------------------------------------------------------

SETTINGS = {"m", "iterations", "seed", "donors", "min_cell_count", "last_half", "n_suppressed", "n_fallbacks", "imputation"}


def numbers_in(value, key=None):
    """Every number in a JSON-ready value with the key it sits under, leaving out settings and imputation numbers."""
    if isinstance(value, dict):
        for k, v in value.items():
            if k not in SETTINGS:
                yield from numbers_in(v, k)
    elif isinstance(value, list):
        for v in value:
            yield from numbers_in(v, key)
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        yield key, value


def test_no_small_count_or_its_share_is_published(few):
    frame, imp = few
    m = 5
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=m, cohort_label="derivation")
    n = len(frame)
    small = sorted({v for v in [*true_patterns(frame, COLUMNS).values(), *(int(frame[c].isna().sum()) for c in COLUMNS)] if 0 < v < m})
    assert small, "the cohort is built with small counts"
    published = report.to_dict()
    for key, value in numbers_in(published):
        if isinstance(value, int):
            assert not 0 < value < m, f"count {value} under {key!r}"
        else:
            assert all(not math.isclose(value, s / n, abs_tol=5e-5) for s in small), f"share {value} under {key!r} gives a small count"
    for table in ("columns", "patterns"):
        frame_ = report.to_frame(table)
        counts = frame_["people missing" if table == "columns" else "people"]
        shares = frame_["share missing" if table == "columns" else "share"]
        assert ((counts == SUPPRESSED) == (shares == SUPPRESSED)).all()  # a share is shown only with its count
    sev = report.to_frame("columns").set_index("column").loc["severity"]
    assert sev["people missing"] == SUPPRESSED and sev["share missing"] == SUPPRESSED
    assert report.n_suppressed > 0


def _reader(frame: pd.DataFrame, report: MissingDataReport) -> tuple[dict, list, set, dict]:
    """What a reader of the columns and patterns tables can write down: the pattern rows summing to everyone,
    and per column the listed patterns it is missing in, plus its people among the other patterns, summing to its
    missing count.  Cells: ("p", k) pattern row k (the "other patterns" row too), ("c", i) column i, ("n", 0)
    everyone, ("x", i) column i's people among the other patterns (never shown, at most that row: ("s", i) is
    the rest of the row).  True values from pandas."""
    columns, n = list(report.columns), len(frame)
    patterns = report.to_frame("patterns")
    truth = true_patterns(frame, columns)
    rows = patterns["columns missing"].tolist()
    keys = [published_pattern(t) for t in rows if t != OTHER_PATTERNS]
    values = {("p", k): truth.get(p, 0) for k, p in enumerate(keys)}
    values |= {("c", i): int(frame[c].isna().sum()) for i, c in enumerate(columns)} | {("n", 0): n}
    lines = [[("p", k) for k in range(len(rows))] + [("n", 0)]]
    hidden = {("p", k) for k, v in enumerate(patterns["people"]) if v == SUPPRESSED}
    hidden |= {("c", i) for i, v in enumerate(report.to_frame("columns")["people missing"]) if v == SUPPRESSED}
    other = OTHER_PATTERNS in rows
    if other:
        rest = {p: v for p, v in truth.items() if p not in keys}
        values[("p", len(keys))] = sum(rest.values())
    for i, c in enumerate(columns):
        if not values[("c", i)]:
            continue
        line = [("p", k) for k, p in enumerate(keys) if c in p]
        if other:
            values[("x", i)] = sum(v for p, v in rest.items() if c in p)
            values[("s", i)] = values[("p", len(keys))] - values[("x", i)]
            lines.append([("x", i), ("s", i), ("p", len(keys))])
            line.append(("x", i))
            hidden |= {("x", i), ("s", i)}
        lines.append(line + [("c", i)])
    # a listed pattern (and the other row) holds someone; a column shown with an imputation method is missing somewhere
    lower = {("p", k): 1 for k, t in enumerate(rows) if t != COMPLETE_PATTERN}
    lower |= {("c", i): 1 for i in range(len(columns)) if values[("c", i)]}
    return values, lines, hidden, lower


def _fixed_knowing_lower_bounds(values: dict, lines: list, hidden: set, lower: dict) -> set:
    """Hidden non-zero counts with one value only over all whole-number solutions of the published sums, each
    hidden count at least its lower bound: the smallest and largest value by scipy.optimize.milp."""
    unknown = sorted(hidden)
    at = {c: i for i, c in enumerate(unknown)}
    rows, rhs = [], []
    for line in lines:
        coef = np.zeros(len(unknown))
        known = sum(values[c] for c in line[:-1] if c not in at) - (0 if line[-1] in at else values[line[-1]])
        for c in line[:-1]:
            if c in at:
                coef[at[c]] += 1
        if line[-1] in at:
            coef[at[line[-1]]] -= 1
        if coef.any():
            rows.append(coef)
            rhs.append(-known)
    bounds = Bounds([lower.get(c, 0) for c in unknown], [np.inf] * len(unknown))
    fixed = set()
    for c in unknown:
        ends = []
        for sign in (1, -1):
            goal = np.zeros(len(unknown))
            goal[at[c]] = sign
            res = milp(goal, constraints=LinearConstraint(np.array(rows), rhs, rhs), integrality=np.ones(len(unknown)), bounds=bounds)
            assert res.status == 0
            ends.append(sign * res.fun)
        if values[c] and ends[0] == ends[1]:
            fixed.add(c)
    return fixed


@pytest.mark.parametrize("data, m", [("few", 5), ("mcar", 5), ("mcar", 40), ("rare", 5)])
def test_suppressed_counts_cannot_be_worked_out(data, m, request):
    frame, imp = request.getfixturevalue(data)
    columns = [c for c in frame.columns if c != "y"]
    report = missing_data_report(imp, columns=columns, min_cell_count=m, cohort_label="derivation")
    values, lines, hidden, lower = _reader(frame, report)
    shown_hidden = {c for c in hidden if c[0] in ("p", "c")}
    if data in ("few", "rare"):  # small counts that folding rare patterns into "other patterns" cannot absorb
        assert shown_hidden, "the settings are chosen so that something is suppressed"
    # the package's check: integer programming over the published sums, counts >= 0
    fixed = determined_counts(values, lines, hidden, known=[("n", 0)])
    # a column's people among the other patterns are never shown; worked out, they must not be a small count
    assert not fixed & shown_hidden and all(values[c] >= m for c in fixed if c[0] == "x"), fixed
    # the same with what a reader knows besides (a listed pattern holds at least one person), by scipy milp
    fixed = _fixed_knowing_lower_bounds(values, lines, hidden, lower)
    assert not fixed & shown_hidden and all(values[c] >= m for c in fixed if c[0] == "x"), fixed
    # what the tables show is the truth (pandas) wherever it is shown
    published = report.to_frame("columns")["people missing"]
    for i, c in enumerate(columns):
        if ("c", i) not in hidden:
            assert published.iloc[i] == int(frame[c].isna().sum())
    counts = report.to_frame("patterns")["people"]
    for k, v in enumerate(counts):
        if ("p", k) not in hidden:
            assert v == values[("p", k)] and not 0 < v < m


def test_other_patterns_row_protects_its_small_patterns(many):
    frame, imp = many
    columns = [c for c in frame.columns if c != "y"]
    report = missing_data_report(imp, columns=columns, min_cell_count=5, cohort_label="wide")
    patterns = report.to_frame("patterns")
    shown = patterns[patterns["people"] != SUPPRESSED]
    assert all(v == 0 or v >= 5 for v in shown["people"])
    # rows add up to everyone: a single suppressed row would be given away, so none or at least two are
    assert (patterns["people"] == SUPPRESSED).sum() != 1
    if (patterns["people"] == SUPPRESSED).sum() == 0:
        assert patterns["people"].sum() == len(frame)


def test_withheld_summaries_where_few_values_were_imputed(few):
    _, imp = few
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=5, cohort_label="derivation")
    assert report.withheld_columns == ("severity",)
    table = report.to_frame("observed_imputed")
    assert list(table.columns) == ["column", "summary", "observed", "imputed", "note"]
    sev = table[table["column"] == "severity"]
    assert len(sev) == len(LEVELS) and (sev["observed"] == WITHHELD).all() and (sev["imputed"] == WITHHELD).all()
    assert sev["note"].str.startswith("withheld").all()
    conv = report.to_frame("convergence")
    assert (conv[conv["column"] == "severity"].iloc[:, 3:] == WITHHELD).all().all()
    # three imputed values: their quartiles would be three people's values, and none is published
    pooled = np.concatenate([v["severity"] for v in imp.values])
    assert pooled.size == 3 * imp.m
    assert (table[table["column"] != "severity"]["note"] == "shown").all()


def test_observed_against_imputed_numbers(mcar):
    frame, imp = mcar
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=5, cohort_label="derivation")
    table = report.to_frame("observed_imputed").set_index(["column", "summary"])
    # imputed values taken from the completed data sets at the missing cells (an independent route)
    completed = [imp.completed(j) for j in range(imp.m)]
    age_missing = frame["age"].isna()
    imputed_age = np.concatenate([d.loc[age_missing, "age"].to_numpy(float) for d in completed])
    observed_age = frame["age"].dropna().to_numpy(float)
    assert table.loc[("age", "mean"), "observed"] == pytest.approx(observed_age.mean(), rel=1e-12)
    assert table.loc[("age", "sd"), "observed"] == pytest.approx(observed_age.std(ddof=1), rel=1e-12)
    assert table.loc[("age", "median"), "imputed"] == pytest.approx(np.median(imputed_age), rel=1e-12)
    # pandas quantile (linear interpolation, as numpy's default)
    assert table.loc[("age", "75th percentile"), "imputed"] == pytest.approx(pd.Series(imputed_age).quantile(0.75), rel=1e-12)
    sev_missing = frame["severity"].isna()
    imputed_sev = pd.concat([d.loc[sev_missing, "severity"] for d in completed]).astype(str)
    observed_share = frame["severity"].dropna().astype(str).value_counts(normalize=True)  # pandas value_counts
    for level in LEVELS:
        assert table.loc[("severity", f"share {level}"), "observed"] == pytest.approx(observed_share[level], abs=5e-5)
        assert table.loc[("severity", f"share {level}"), "imputed"] == pytest.approx((imputed_sev == level).mean(), abs=5e-5)


def test_a_level_with_few_observed_people_is_not_shown():
    n = 200
    rng = np.random.default_rng(5)
    grade = np.where(np.arange(n) < 2, "rare", rng.choice(["low", "high"], n))
    frame = pd.DataFrame({"x": rng.normal(size=n), "grade": grade, "y": rng.integers(0, 2, n)})
    frame.loc[frame.index[10:50], "grade"] = None  # 40 missing, the two "rare" people observed
    imp = impute(frame, m=2, seed=2, outcome="y", iterations=2)
    report = missing_data_report(imp, columns=["x", "grade"], min_cell_count=5, cohort_label="levels")
    table = report.to_frame("observed_imputed").set_index("summary")
    assert table.loc["share rare", "observed"] == SUPPRESSED
    # the levels' shares add up to 1, so a second one is hidden with it
    assert (table["observed"] == SUPPRESSED).sum() >= 2
    assert all(not math.isclose(v, 2 / 160, abs_tol=5e-5) for _, v in numbers_in(report.to_dict()))
    fig = plot_observed_imputed(imp, min_cell_count=5)
    _draws(fig)
    assert "too few" in _texts(fig)


def test_convergence_summary_from_the_chain(mcar):
    frame, imp = mcar
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=5, cohort_label="derivation")
    conv = report.to_frame("convergence")
    assert len(conv) == imp.m * len(imp.columns_imputed)
    assert report.last_half == (3, 5)  # the last ceil(5 / 2) = 3 cycles
    lactate_missing = frame["lactate"].isna()
    for j in range(imp.m):
        row = conv[(conv["column"] == "lactate") & (conv["imputation"] == j + 1)].iloc[0]
        # the chain's state after the last cycle is the completed data set
        final = imp.completed(j).loc[lactate_missing, "lactate"]
        assert row["mean at last iteration"] == pytest.approx(final.mean(), rel=1e-12)
        assert row["sd at last iteration"] == pytest.approx(final.std(ddof=0), rel=1e-9) or \
            row["sd at last iteration"] == pytest.approx(final.std(ddof=1), rel=1e-9)
        chain = imp.chain[(imp.chain["column"] == "lactate") & (imp.chain["imputation"] == j) & (imp.chain["iteration"] >= 3)]
        assert row["range of the mean over the last half"] == pytest.approx(np.ptp(chain["mean"]), rel=1e-12)


# ---- the rule of thumb ---------------------------------------------------------------------------------------


@pytest.mark.parametrize("complete, expected", [(0.77, 23), (0.98, 5), (0.5, 50), (0.0, 100), (1.0, 5), (0.694, 31)])
def test_rule_of_thumb(complete, expected):
    # White, Royston & Wood 2011, section 7: m at least the percentage of incomplete cases (here at least 5, at most 100)
    assert imputations_needed(complete) == expected


def test_rule_of_thumb_limits_and_bad_input():
    assert imputations_needed(0.1, maximum=60) == 60
    assert imputations_needed(0.9, minimum=20) == 20
    for bad in (-0.1, 1.5, "0.5", None, True, float("nan")):
        with pytest.raises(DataError, match="imputations_needed"):
            imputations_needed(bad)
    with pytest.raises(DataError, match="minimum <= maximum"):
        imputations_needed(0.5, minimum=10, maximum=5)


# ---- figures -----------------------------------------------------------------------------------------------


def _draws(fig) -> None:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=50)
    assert buffer.getvalue()[:4] == b"\x89PNG"


def _texts(fig) -> str:
    return " ".join(t.get_text() for t in fig.findobj(lambda a: hasattr(a, "get_text")))


def test_figures_draw_with_the_expected_panels(mcar, few):
    _, imp = mcar
    fig = plot_imputation_chains(imp)
    _draws(fig)
    assert len(fig.axes) == 2 * len(imp.columns_imputed)
    fig = plot_observed_imputed(imp, min_cell_count=5)
    _draws(fig)
    assert len(fig.axes) == len(imp.columns_imputed)
    _, imp = few
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=5, cohort_label="derivation")
    fig = plot_imputation_chains(imp, min_cell_count=5, withhold=report.withheld_columns)
    _draws(fig)
    assert len(fig.axes) == 2 * (len(imp.columns_imputed) - 1) and "severity" in _texts(fig)
    fig = plot_observed_imputed(imp, min_cell_count=5)
    _draws(fig)
    assert len(fig.axes) == len(imp.columns_imputed) and "not drawn" in _texts(fig)


def test_chain_figure_names_the_columns_left_out(many):
    _, imp = many
    assert len(imp.columns_imputed) > MAX_CHAIN_COLUMNS
    fig = plot_imputation_chains(imp)
    _draws(fig)
    assert len(fig.axes) == 2 * MAX_CHAIN_COLUMNS
    # the columns with the fewest imputed values are the ones left out (visited first)
    for column in imp.columns_imputed[: len(imp.columns_imputed) - MAX_CHAIN_COLUMNS]:
        assert column in _texts(fig)


def test_figures_refuse_bad_input(mcar):
    _, imp = mcar
    with pytest.raises(RiskvetError, match="plot_imputation_chains"):
        plot_imputation_chains("not imputations")
    with pytest.raises(RiskvetError, match="min_cell_count"):
        plot_observed_imputed(imp, min_cell_count=-1)
    with pytest.raises(RiskvetError, match="withhold"):
        plot_observed_imputed(imp, min_cell_count=5, withhold=["no such column"])


# ---- sentences ---------------------------------------------------------------------------------------------


def test_sentences_state_the_numbers(mcar):
    frame, imp = mcar
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=5, cohort_label="derivation")
    texts = missing_data_texts(report, method="multiple_imputation", m=5, m_rule="fixed", iterations=5, seed=11)
    assert set(texts) == {"missing", "suppression", "handling", "imputations", "tripod", "assumption", "checks"}
    assert f"({len(frame)} people)" in texts["missing"]
    assert f"{int(frame['lactate'].isna().sum())} people" in texts["missing"]
    assert f"{report.complete_people} people" in texts["missing"]
    assert "predictive mean matching for age and lactate" in texts["handling"]
    assert "proportional-odds" in texts["handling"] and "outcome (y)" in texts["handling"]
    incomplete = 1.0 - float(report.complete_share)
    # White, Royston & Wood 2011, section 7: m at least the percentage of incomplete cases
    assert f"gives {math.ceil(100 * incomplete - 1e-9)}" in texts["imputations"] and "White, Royston & Wood 2011" in texts["imputations"]
    assert "TRIPOD 2015 item 9" in texts["tripod"] and "TRIPOD+AI 2024 item 11" in texts["tripod"]
    assert "missing at random" in texts["assumption"] and "cannot confirm" in texts["assumption"]
    assert "cycles 3 to 5" in texts["checks"]
    rule = missing_data_texts(report, method="multiple_imputation", m=5, m_rule="rule_of_thumb", iterations=5, seed=11)
    assert "at least the percentage of incomplete cases" in rule["imputations"]
    cc = missing_data_texts(report, method="complete_case", m=None, m_rule=None, iterations=None, seed=None)
    assert f"{len(frame) - report.complete_people} people" in cc["handling"] and cc["imputations"] == ""


def test_sentences_do_not_state_a_suppressed_count(few):
    _, imp = few
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=5, cohort_label="derivation")
    texts = missing_data_texts(report, method="multiple_imputation", m=5, m_rule="fixed", iterations=5, seed=12)
    assert "suppressed for severity" in texts["missing"]
    assert "withheld for severity" in texts["suppression"]
    everything = " ".join(texts.values())
    for n in range(1, 5):
        assert f" {n} people" not in everything and f"({n} people" not in everything


def test_tripod_items_are_the_projects_own_numbers():
    # the project's TRIPOD index (riskvet/resources/tripod_*.json): the items on how missing data were handled
    from riskvet.reporting.tripod import load_checklist

    for name, item in TRIPOD_ITEMS:
        topics = {i.item: i.topic for i in load_checklist(name).items}
        assert topics[item].startswith("how missing data were handled")


def test_sentences_refuse_bad_input(mcar):
    _, imp = mcar
    report = missing_data_report(imp, columns=COLUMNS, min_cell_count=5, cohort_label="derivation")
    ok = {"method": "multiple_imputation", "m": 5, "m_rule": "fixed", "iterations": 5, "seed": 11}
    with pytest.raises(RiskvetError, match="report"):
        missing_data_texts("report", **ok)
    for key, bad in (("method", "drop"), ("m_rule", "guess"), ("m", 6), ("iterations", 9), ("seed", 0)):
        with pytest.raises(RiskvetError, match=key):
            missing_data_texts(report, **(ok | {key: bad}))


# ---- bad input to the report ---------------------------------------------------------------------------------


def test_report_refuses_bad_input(mcar):
    frame, imp = mcar
    good = {"columns": COLUMNS, "min_cell_count": 5, "cohort_label": "derivation"}
    cases = [
        ("not imputations", good, "imputations"),
        (imp, good | {"columns": "age"}, "columns"),
        (imp, good | {"columns": []}, "columns"),
        (imp, good | {"columns": ["age", "nope"]}, "nope"),
        (imp, good | {"columns": ["age", "age", "lactate", "severity"]}, "more than once"),
        (imp, good | {"columns": [*COLUMNS, "y"]}, "outcome"),
        (imp, good | {"columns": ["age", "sex"]}, "every imputed column"),
        (imp, good | {"min_cell_count": -1}, "min_cell_count"),
        (imp, good | {"min_cell_count": 2.5}, "min_cell_count"),
        (imp, good | {"cohort_label": " "}, "cohort_label"),
        (imp, good | {"n_people": len(frame) + 1}, "n_people"),
    ]
    for first, kwargs, match in cases:
        with pytest.raises(DataError, match=match):
            missing_data_report(first, **kwargs)
    report = missing_data_report(imp, **good)
    assert [report.to_frame(t).shape[0] > 0 for t in TABLES] == [True] * len(TABLES)
    with pytest.raises(DataError, match="to_frame"):
        report.to_frame("everything")


def test_rare_combinations_are_folded_and_the_column_counts_stay_on_the_page():
    # common practice in disclosure control: merge rare categories before suppressing the margins around them
    rng = np.random.default_rng(11)
    n = 2000
    frame = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n), "c": rng.normal(size=n)})
    frame["y"] = pd.Categorical((frame["a"] + rng.logistic(size=n) > 0).astype(int), categories=[0, 1], ordered=True)
    for column, share in (("a", 0.02), ("b", 0.03), ("c", 0.05)):
        frame.loc[rng.random(n) < share, column] = np.nan
    imp = impute(frame, m=2, seed=1, iterations=2, outcome="y")
    report = missing_data_report(imp, columns=["a", "b", "c"], min_cell_count=5, cohort_label="derivation")
    shown = report.to_frame("columns").set_index("column")["people missing"]
    for column in ("a", "b", "c"):  # pandas isna count, every one on the page
        assert shown[column] == int(frame[column].isna().sum())
    assert report.complete_people == int((~frame[["a", "b", "c"]].isna().any(axis=1)).sum())
    patterns = report.to_frame("patterns")
    assert all(v == 0 or v >= 5 for v in patterns["people"] if v != SUPPRESSED)
    assert patterns["people"].sum() == n

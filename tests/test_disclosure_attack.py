"""Disclosure control by attack: try to recover the suppressed counts of an agreement record from what it publishes.

A small record of the real derivation and agreement notebooks (the demo study
with 150 rated people, no variable selection so that the rated items are in
the model and the decisions at each threshold are compared) is read as an
outsider would read it: the results file, the sentences and the page.  For
every published cross-table, every table of whole counts >= 0 with the same n
is tried (a brute force written here, independent of the package's search),
and kept when it agrees with everything the record states about that table:
the visible cells and totals, the numbers agreeing and differing (or that one
is "fewer than 5"), and every published statistic at its published rounding.
No suppressed count may take only one value over the tables kept (other
than 0, which gives no count away), nor may the suppressed counts of a line
always be the same numbers.
"""

from __future__ import annotations

import html
import io
import json
import math
import re
import warnings

import numpy as np
import pytest

from riskvet.chain.runner import run_study
from riskvet.chain.scaffold import new_study_folder
from riskvet.chain.stages import agreement as stage
from riskvet.errors import RiskvetWarning
from riskvet.intake.study import load_study
from riskvet.modelling.modelfile import load_model
from riskvet.reporting.disclosure import SUPPRESSED, publish_cross_table, publish_statistics

# z for a 95% interval (scipy.stats.norm.ppf(0.975), scipy 1.17)
Z95 = 1.959963984540054

# The statistics the record may publish for a 2 x 2 table, by name.
STATISTICS = ("uninformative_reason", "observed_agreement", "kappa", "kappa_lower", "kappa_upper", "pabak",
              "positive_agreement", "negative_agreement", "prevalence_index", "bias_index")


@pytest.fixture(scope="module")
def record(tmp_path_factory):
    """A record of the derivation and agreement stages: (study, record folder)."""
    folder = tmp_path_factory.mktemp("attack") / "demo"
    study_path = new_study_folder(folder, n_derivation=400, n_validation=300, n_ratings=150, n_boot=2, missing_data="complete_case")
    text = study_path.read_text(encoding="utf-8")
    assert "  method: forward " in text
    study_path.write_text(text.replace("  method: forward ", "  method: none "), encoding="utf-8")
    result = run_study(study_path, stages=["derivation", "agreement"], out=io.StringIO())
    assert result.ok, result.failed_stage and result.failed_stage.error
    return load_study(study_path), result.record_dir


def _published_tables(results):
    """Every cross-table the results file publishes: (where, cross_table, statistics, kappa, indices, extra)."""
    out = []
    for item in results["items"]:
        if item["cross_table"] is not None:
            out.append((f"item {item['name']}", item["cross_table"], item["statistics"], item["kappa"], item["agreement_indices"], {}))
    for cut in (results["risk"] or {}).get("cuts", []):
        for d in cut["decisions"]:
            extra = {"positive_a": d["positive_a"], "positive_b": d["positive_b"], "different_decisions": d["different_decisions"]}
            out.append((f"cut {cut['cut']} threshold {d['threshold']}", d["cross_table"], d["statistics"], d["decisions"],
                        d["agreement_indices"], extra))
    return out


def _all_tables(n):
    """Every 2 x 2 table of whole counts >= 0 summing to n, as four arrays (n00, n01, n10, n11)."""
    grid = np.arange(n + 1, dtype=np.int32)
    a, b, c = np.meshgrid(grid, grid, grid, indexing="ij")
    keep = a + b + c <= n
    a, b, c = a[keep], b[keep], c[keep]
    return np.stack([a, b, c, n - a - b - c]).astype(float)


def _statistics(cells):
    """The published statistics of many 2 x 2 tables at once, from their textbook formulas.

    Kappa (Cohen 1960) with the large-sample standard error of Fleiss, Cohen &
    Everitt (Psychol Bull 1969) written out for two categories; PABAK 2 p_o - 1
    and the prevalence and bias indices (Byrt, Bishop & Carlin, J Clin
    Epidemiol 1993); positive and negative agreement (Cicchetti & Feinstein,
    J Clin Epidemiol 1990); kappa uninformative when one category holds at
    least 95% of the readings (code 1) or a rater used one category (code 2).
    """
    a, b, c, d = cells
    n = a + b + c + d
    p = {(0, 0): a / n, (0, 1): b / n, (1, 0): c / n, (1, 1): d / n}
    r = [(a + b) / n, (c + d) / n]
    col = [(a + c) / n, (b + d) / n]
    po = (a + d) / n
    pe = r[0] * col[0] + r[1] * col[1]
    with np.errstate(divide="ignore", invalid="ignore"):
        defined = pe < 1 - 1e-12
        k = np.where(defined, (po - pe) / (1 - pe), np.nan)
        var = (p[0, 0] * (1 - (r[0] + col[0]) * (1 - k)) ** 2 + p[1, 1] * (1 - (r[1] + col[1]) * (1 - k)) ** 2
               + (1 - k) ** 2 * (p[0, 1] * (col[0] + r[1]) ** 2 + p[1, 0] * (col[1] + r[0]) ** 2)
               - (k - pe * (1 - k)) ** 2) / (n * (1 - pe) ** 2)
        se = np.sqrt(np.maximum(var, 0))
        share = np.maximum(r[0] + col[0], r[1] + col[1]) / 2
        single = (np.minimum(r[0], r[1]) == 0) | (np.minimum(col[0], col[1]) == 0)
        return {
            "uninformative_reason": np.where(share >= 0.95, 1.0, np.where(single, 2.0, 0.0)),
            "observed_agreement": po, "kappa": k, "kappa_lower": k - Z95 * se, "kappa_upper": k + Z95 * se,
            "pabak": 2 * po - 1,
            "positive_agreement": np.where(2 * d + b + c > 0, 2 * d / (2 * d + b + c), np.nan),
            "negative_agreement": np.where(2 * a + b + c > 0, 2 * a / (2 * a + b + c), np.nan),
            "prevalence_index": (d - a) / n, "bias_index": (c - b) / n,
        }


def _consistent(cells, table, stats, kappa_dict, indices, extra):
    """Which of the candidate tables agree with everything the record states about ``table``."""
    a, b, c, d = cells
    grid = [[a, b], [c, d]]
    keep = np.ones(a.shape, bool)
    m = table["min_cell_count"]
    for i in range(2):
        for j in range(2):
            if table["cells"][i][j] != SUPPRESSED:
                keep &= grid[i][j] == table["cells"][i][j]
        if table["row_totals"][i] != SUPPRESSED:
            keep &= grid[i][0] + grid[i][1] == table["row_totals"][i]
        if table["column_totals"][i] != SUPPRESSED:
            keep &= grid[0][i] + grid[1][i] == table["column_totals"][i]
    for count, below, value in zip(table["agreement_counts"], table["agreement_below_minimum"], (a + d, b + c)):
        if count != SUPPRESSED:
            keep &= value == count
        elif below:
            keep &= (value >= 1) & (value <= m - 1)
    # the decision record repeats the "at or above" totals and the people decided differently
    for key, value in (("positive_a", c + d), ("positive_b", b + d)):
        if key in extra and extra[key] != SUPPRESSED:
            keep &= value == extra[key]
    if isinstance(extra.get("different_decisions"), int):
        keep &= b + c == extra["different_decisions"]
    computed = _statistics(cells)
    for name, value in stats["values"].items():
        if name in stats["withheld"]:
            continue
        x = computed[name]
        if value is None:  # published as undefined
            keep &= np.isnan(x)
            continue
        places = stats["decimals"][name]
        half = 1e-9 if places is None else 0.5 * 10.0 ** -places + 1e-9  # unrounded: the exact value
        keep &= np.abs(x - value) <= half
    # the kappa entry and the indices repeat the statistics; they must not say more
    for key, name in (("value", "kappa"), ("lower", "kappa_lower"), ("upper", "kappa_upper")):
        assert kappa_dict[key] == stats["values"][name]
    for key, value in indices.items():
        if key in stats["values"]:
            assert value == stats["values"][key], key
    assert not {"se", "se_null", "z", "p_value", "expected_agreement", "observed_agreement"} & set(kappa_dict)
    return keep


def test_no_suppressed_count_can_be_recovered(record):
    study, folder = record
    results = json.loads((folder / "results" / "agreement.json").read_text(encoding="utf-8"))
    tables = _published_tables(results)
    assert results["risk"] is not None and len(tables) >= 6
    # the true tables, to check that the attack keeps the truth (it reads the record correctly)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RiskvetWarning)
        truth = stage.assess(study, model=load_model(folder / "models" / "model.json"))
    true_tables = [it.kappa.table for it in truth.items if it.kappa is not None]
    true_tables += [d.decisions.table for c in truth.risk.cuts for d in c.decisions]
    attacked = 0
    cache = {}
    for (where, table, stats, kappa_dict, indices, extra), true in zip(tables, true_tables):
        assert len(table["cells"]) == 2  # every cross-table of this record is 2 x 2 (binary items, decisions)
        suppressed = [(i, j) for i in range(2) for j in range(2) if table["cells"][i][j] == SUPPRESSED]
        if not suppressed:
            assert stats["rounded"] is False
            continue
        attacked += 1
        n = table["n"]
        cells = cache.setdefault(n, _all_tables(n))
        keep = _consistent(cells, table, stats, kappa_dict, indices, extra)
        flat = [v for row in true for v in row]
        is_true = np.all(cells == np.array(flat, dtype=float)[:, None], axis=0)
        assert keep[is_true].all(), f"{where}: the attack lost the true table"
        kept = cells[:, keep].astype(int)
        for i, j in suppressed:
            # a suppressed cell that can only be 0 gives no count away (a published total of 0 says as much)
            values = set(kept[2 * i + j].tolist())
            assert len(values) >= 2 or values == {0}, f"{where}: suppressed cell ({i}, {j}) is {values} in every table that fits the record"
        # nor may the record fix which numbers the suppressed cells of a line hold ("4 and 9"), though not which is which
        for line in ([(0, 0), (1, 1)], [(0, 1), (1, 0)]):
            hidden = [2 * i + j for i, j in line if (i, j) in suppressed]
            if hidden:
                splits = {tuple(sorted(kept[h, t] for h in hidden)) for t in range(kept.shape[1])}
                assert len(splits) >= 2, f"{where}: the suppressed counts of {line} are {splits} in every table that fits"
    assert attacked >= 2  # the record has tables with suppressed counts to attack


def _page_text(folder):
    page = next((folder / "html").glob("*agreement.html")).read_text(encoding="utf-8")
    page = re.sub(r"<(style|script)\b.*?</\1>", " ", page, flags=re.S)
    page = re.sub(r"<img\b[^>]*>", " ", page)
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


def _strings(value):
    if isinstance(value, str):
        yield value
    elif isinstance(value, dict):
        for v in value.values():
            yield from _strings(v)
    elif isinstance(value, list):
        for v in value:
            yield from _strings(v)


def test_no_small_count_is_stated(record):
    study, folder = record
    m = study.output.min_cell_count
    results = json.loads((folder / "results" / "agreement.json").read_text(encoding="utf-8"))
    small = "|".join(str(k) for k in range(1, m))
    near_words = re.compile(rf"(?<![\d.,−-])({small})\s+(?:of|people|persons?|patients?|events?|pairs?|rows?|readings?|decisions?)\b"
                            rf"|\b(?:for|of|in)\s+({small})(?![\d.,%])\b(?!\s*(?:decimal|categor|item|in\b))", re.IGNORECASE)
    texts = list(_strings(results)) + [_page_text(folder)]
    for text in texts:
        found = near_words.findall(text)
        assert not found, (found, text[:300])
    # the small decision count is said as such
    assert f"fewer than {m} of 150 people" in texts[-1]


def test_page_states_what_the_figures_draw(record):
    _, folder = record
    results = json.loads((folder / "results" / "agreement.json").read_text(encoding="utf-8"))
    assert "bins of pairs" in results["texts"]["figures"] and results["pair_level_plots"] is False
    assert results["texts"]["figures"] in _page_text(folder)


def test_figures_draw_no_small_bin(record):
    study, folder = record
    m = study.output.min_cell_count
    svgs = sorted((folder / "figures" / "agreement").glob("*.svg"))
    assert len(svgs) >= 2
    for svg in svgs:
        text = svg.read_text(encoding="utf-8")
        counts = [int(v) for v in re.findall(r'id="bin:(\d+)"', text)]
        assert counts and min(counts) >= m, (svg.name, counts)


def test_sentences_state_only_published_numbers(record):
    study, folder = record
    results = json.loads((folder / "results" / "agreement.json").read_text(encoding="utf-8"))
    for where, table, stats, kappa_dict, indices, extra in _published_tables(results):
        if not stats["rounded"]:
            continue
        allowed = {str(table["n"]), str(table["min_cell_count"]), "95", "2", "1", "0"}
        shown = [v for row in table["cells"] for v in row] + list(table["row_totals"]) + list(table["column_totals"])
        shown += list(table["agreement_counts"])
        for v in shown:
            if v != SUPPRESSED:
                allowed |= {str(v), f"{v / table['n']:.0%}".rstrip("%")}
        for name, value in stats["values"].items():
            if value is not None and math.isfinite(value):
                allowed.add(f"{value:.{stats['decimals'][name]}f}".replace("-", "−"))
                allowed.add(f"{value:.0%}".rstrip("%"))
        if where.startswith("item"):
            sentence = next(i["text"] for i in results["items"] if f"item {i['name']}" == where)
        else:
            cut, threshold = re.match(r"cut (\d+) threshold (\S+)", where).groups()
            text = next(c["text"] for c in results["risk"]["cuts"] if c["cut"] == int(cut))
            start = text.index(f"At the threshold {float(threshold):g},")
            sentence = text[start:].split(" At the threshold ")[0].split(" Risk of ")[0]
            allowed.add(f"{float(threshold):g}")
        for number in re.findall(r"−?\d+(?:\.\d+)?", sentence):
            assert number in allowed, (where, number, sentence)


def test_rounded_kappa_no_longer_gives_the_split_away():
    # 130 and 7 agree of 150; the off-diagonal 4 and 9 are suppressed.  At three decimals kappa (0.473) and
    # its interval leave only the split {4, 9} (checked by brute force over the 14 splits with the formulas
    # above); at two decimals, as published, several splits fit.
    table = [[130, 9], [4, 7]]
    published = publish_cross_table(table, min_cell_count=5)
    stats = publish_statistics(table, published, stage.table_statistics(weighted=False),
                               groups=[("kappa", "kappa_lower", "kappa_upper")])
    b = np.arange(14.0)
    cells = np.stack([np.full(14, 130.0), b, 13 - b, np.full(14, 7.0)])
    computed = _statistics(cells)

    def splits(decimals):
        keep = np.ones(14, bool)
        for name in ("kappa", "kappa_lower", "kappa_upper"):
            keep &= np.round(computed[name], decimals) == round(float(computed[name][4]), decimals)
        return {tuple(sorted((int(v), 13 - int(v)))) for v in b[keep]}

    assert splits(3) == {(4, 9)}
    assert stats.decimals["kappa"] == 2 and stats["kappa"] == 0.47 and len(splits(2)) >= 2
    assert "expected_agreement" not in stats.values


from hypothesis import example, given, settings, strategies as st


@settings(max_examples=60, deadline=None)
@example(cells=[4, 0, 4, 0], m=5)  # agreeing and differing both "fewer than 5" of 8 would give both away
@example(cells=[130, 9, 4, 7], m=5)
@example(cells=[0, 2, 0, 148], m=5)
@given(st.lists(st.integers(0, 25), min_size=4, max_size=4).filter(lambda v: sum(v) >= 3), st.sampled_from([3, 5, 10]))
def test_attack_on_random_tables(cells, m):
    # Any 2 x 2 table, published through the package: the brute force above recovers no suppressed count.
    table = [cells[:2], cells[2:]]
    published = publish_cross_table(table, min_cell_count=m)
    stats = publish_statistics(table, published, stage.table_statistics(weighted=False),
                               groups=[("kappa", "kappa_lower", "kappa_upper")])
    if not published.suppressed:
        assert not stats.rounded and not stats.withheld
        return
    as_dict, stats_dict = published.to_dict(), stats.to_dict()
    kappa_dict = {key: stats_dict["values"][name] for key, name in (("value", "kappa"), ("lower", "kappa_lower"), ("upper", "kappa_upper"))}
    candidates = _all_tables(published.n)
    keep = _consistent(candidates, as_dict, stats_dict, kappa_dict, {}, {})
    is_true = np.all(candidates == np.array(cells, dtype=float)[:, None], axis=0)
    assert keep[is_true].all()
    kept = candidates[:, keep].astype(int)
    suppressed = [(i, j) for i in range(2) for j in range(2) if published.cells[i][j] == SUPPRESSED]
    for i, j in suppressed:
        values = set(kept[2 * i + j].tolist())
        assert len(values) >= 2 or values == {0}, (table, m, (i, j), values, stats.values)
    for line in ([(0, 0), (1, 1)], [(0, 1), (1, 0)]):
        hidden = [2 * i + j for i, j in line if (i, j) in suppressed]
        if any(0 < cells[h] < m for h in hidden):
            assert len({tuple(sorted(kept[h, t] for h in hidden)) for t in range(kept.shape[1])}) >= 2, (table, m, line)

"""Tests of riskvet.planning.samplesize: published formulas worked by hand, reference libraries, invariants."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import special, stats
from sklearn.metrics import roc_auc_score

from riskvet.errors import StudyError
from riskvet.planning.samplesize import (
    DevelopmentSize,
    development_size,
    justification_text,
    max_r2_cs,
    ordinal_development_size,
    r2_from_c,
    validation_size,
)


# --------------------------------------------------------------------------
# development
# --------------------------------------------------------------------------

def test_development_worked_example_by_hand():
    # Inputs of the binary worked example in Riley et al., BMJ 2020;368:m441
    # (recalled from memory): 24 candidate parameters, outcome proportion
    # 0.174, anticipated Cox-Snell R2 0.288; criterion (i) needs 623
    # (recalled from memory).  Every criterion is also worked by hand here
    # from the formulas of Riley et al., Stat Med 2019 (Part II), which is the
    # firm check (exact integers after rounding up).
    p, phi, r2 = 24, 0.174, 0.288
    r = development_size(n_parameters=p, prevalence=phi, r2_cs=r2)
    n_i = p / ((0.9 - 1) * math.log(1 - r2 / 0.9))
    lnl0 = phi * math.log(phi) + (1 - phi) * math.log(1 - phi)
    max_r2 = 1 - math.exp(2 * lnl0)
    s_ii = r2 / (r2 + 0.05 * max_r2)
    n_ii = p / ((s_ii - 1) * math.log(1 - r2 / s_ii))
    n_iii = (1.96 / 0.05) ** 2 * phi * (1 - phi)
    assert r.max_r2_cs == pytest.approx(max_r2, rel=1e-12)
    assert r.shrinkage_for_optimism == pytest.approx(s_ii, rel=1e-12)
    assert [c.n for c in r.criteria] == [math.ceil(n_i), math.ceil(n_ii), math.ceil(n_iii)]
    assert r.criteria[0].n == 623  # recalled from memory (Riley et al. BMJ 2020)
    assert r.n == max(math.ceil(n_i), math.ceil(n_ii), math.ceil(n_iii))
    assert r.binding == "optimism"
    assert r.events == pytest.approx(r.n * phi, rel=1e-12)
    assert r.events_per_parameter == pytest.approx(r.n * phi / p, rel=1e-12)
    assert r.r2_nagelkerke == pytest.approx(r2 / max_r2, rel=1e-12)


def test_overall_risk_criterion_by_hand():
    # Criterion (iii), Riley et al. Stat Med 2019: (1.96/0.05)^2 * 0.5 * 0.5 = 384.16 -> 385.
    r = development_size(n_parameters=1, prevalence=0.5, r2_cs=0.01)
    assert r.criteria[2].n == 385
    r = development_size(n_parameters=1, prevalence=0.5, r2_cs=0.01, margin=0.1)
    assert r.criteria[2].n == 97  # 96.04 rounded up


def test_default_r2_is_fifteen_percent_of_maximum():
    # Riley et al. BMJ 2020 (recalled from memory): without other information,
    # take R2cs = 0.15 * max R2cs (Nagelkerke R2 of 0.15).
    r = development_size(n_parameters=10, prevalence=0.2)
    assert r.r2_cs == pytest.approx(0.15 * max_r2_cs(0.2), rel=1e-12)
    assert r.r2_nagelkerke == pytest.approx(0.15, rel=1e-12)
    assert r.r2_source.startswith("default")
    # Max R2cs by hand at prevalence 0.5: 1 - exp(2 ln 0.5) = 0.75 (Nagelkerke, Biometrika 1991).
    assert max_r2_cs(0.5) == pytest.approx(0.75, abs=1e-12)


def test_development_from_c_statistic():
    r = development_size(n_parameters=12, prevalence=0.3, c_statistic=0.78)
    assert r.r2_cs == pytest.approx(r2_from_c(0.78, 0.3), rel=1e-12)
    assert r.r2_source == "from C statistic"
    assert r.c_statistic == 0.78


def test_development_monotone():
    # Invariants of the formulas: more parameters, smaller optimism margin or
    # higher target shrinkage never need fewer people; a larger R2 needs fewer
    # for criterion (i).
    base = dict(prevalence=0.15, r2_cs=0.1)
    ns = [development_size(n_parameters=p, **base).n for p in (2, 5, 10, 20, 40)]
    assert ns == sorted(ns) and ns[0] < ns[-1]
    assert development_size(n_parameters=10, delta=0.02, **base).criteria[1].n > development_size(n_parameters=10, delta=0.05, **base).criteria[1].n
    assert development_size(n_parameters=10, shrinkage=0.95, **base).criteria[0].n > development_size(n_parameters=10, **base).criteria[0].n
    assert development_size(n_parameters=10, prevalence=0.15, r2_cs=0.2).criteria[0].n < development_size(n_parameters=10, **base).criteria[0].n
    assert development_size(n_parameters=10, margin=0.025, **base).criteria[2].n > development_size(n_parameters=10, **base).criteria[2].n


def test_development_outputs_and_text():
    r = development_size(n_parameters=24, prevalence=0.174, r2_cs=0.288)
    frame = r.to_frame()
    assert list(frame["name"]) == ["shrinkage", "optimism", "overall risk"]
    assert frame["binding"].sum() == 1
    json.dumps(r.to_dict(), allow_nan=False)
    text = justification_text(r)
    for piece in ("24 candidate", "0.174", "0.288", "623", f"{r.n}", "optimism", f"{r.events:.0f} events"):
        assert piece in text
    with pytest.raises(AttributeError):
        r.n = 1  # frozen


def test_development_bad_input():
    with pytest.raises(StudyError, match="n_parameters"):
        development_size(n_parameters=0, prevalence=0.2)
    with pytest.raises(StudyError, match="prevalence"):
        development_size(n_parameters=5, prevalence=1.2)
    with pytest.raises(StudyError, match="at most one"):
        development_size(n_parameters=5, prevalence=0.2, r2_cs=0.1, c_statistic=0.7)
    with pytest.raises(StudyError, match="maximum"):
        development_size(n_parameters=5, prevalence=0.05, r2_cs=0.5)  # max R2cs at 0.05 is 0.33
    with pytest.raises(StudyError, match="c_statistic"):
        development_size(n_parameters=5, prevalence=0.2, c_statistic=0.4)
    with pytest.raises(StudyError, match="shrinkage"):
        development_size(n_parameters=5, prevalence=0.2, shrinkage=1.0)
    with pytest.raises(StudyError, match="justification_text"):
        justification_text({"n": 3})


# --------------------------------------------------------------------------
# R2 from C
# --------------------------------------------------------------------------

def test_r2_from_c_matches_simulation_with_statsmodels_fit():
    # The published procedure (Riley, Van Calster & Collins, Stat Med 2021):
    # simulate normal linear predictors in events and non-events, fit a
    # logistic regression (statsmodels 0.15.0 Logit), R2 = 1 - exp(-LR/n).
    # Our quadrature is its n -> infinity limit.  Tolerance 0.003: the
    # simulated R2 at n = 400,000 has a Monte Carlo SD of about 0.0007
    # (measured over seeds), so this is about 4 SD.
    for c, phi in [(0.8, 0.1), (0.7, 0.4)]:
        exact = r2_from_c(c, phi)
        simulated = r2_from_c(c, phi, method="simulation", n_sim=400_000, seed=7)
        assert simulated == pytest.approx(exact, abs=0.003)
    # Deterministic for a seed.
    assert r2_from_c(0.75, 0.2, method="simulation", n_sim=20_000, seed=3) == r2_from_c(0.75, 0.2, method="simulation", n_sim=20_000, seed=3)


def test_r2_from_c_separation_gives_the_c_statistic():
    # The binormal separation sqrt(2)*Phi^-1(C) gives AUC = C; checked against
    # scikit-learn 1.9.1 roc_auc_score on simulated predictors.  Tolerance
    # 0.004: AUC SE at 20,000 events and 180,000 non-events is about 0.0015.
    rng = np.random.default_rng(1)
    c, phi, n = 0.8, 0.1, 200_000
    delta = math.sqrt(2) * stats.norm.ppf(c)
    n1 = int(n * phi)
    x = np.concatenate([rng.normal(delta, 1, n1), rng.normal(0, 1, n - n1)])
    y = np.concatenate([np.ones(n1), np.zeros(n - n1)])
    assert roc_auc_score(y, x) == pytest.approx(c, abs=0.004)


def test_r2_from_c_invariants():
    assert r2_from_c(0.5, 0.3) == pytest.approx(0.0, abs=1e-12)
    values = [r2_from_c(c, 0.2) for c in (0.55, 0.65, 0.75, 0.85, 0.95)]
    assert values == sorted(values)
    assert all(0 < v < max_r2_cs(0.2) for v in values)
    with pytest.raises(StudyError, match="method"):
        r2_from_c(0.7, 0.2, method="guess")
    with pytest.raises(StudyError, match="seed"):
        r2_from_c(0.7, 0.2, method="simulation", seed="x")
    with pytest.raises(StudyError, match="n_sim"):
        r2_from_c(0.7, 0.2, method="simulation", n_sim=10)
    with pytest.raises(StudyError, match="c_statistic"):
        r2_from_c(1.2, 0.2)
    with pytest.raises(StudyError, match="prevalence"):
        max_r2_cs(0.0)


# --------------------------------------------------------------------------
# ordered outcomes
# --------------------------------------------------------------------------

def test_ordinal_is_the_largest_binary_cut():
    props = [0.5, 0.3, 0.2]
    r = ordinal_development_size(n_parameters=10, proportions=props, r2_cs=[0.15, 0.12])
    cut0 = development_size(n_parameters=10, prevalence=0.5, r2_cs=0.15)
    cut1 = development_size(n_parameters=10, prevalence=0.2, r2_cs=0.12)
    assert r.cuts[0].n == cut0.n and r.cuts[1].n == cut1.n
    assert r.n == max(cut0.n, cut1.n)
    assert r.binding_cut == int(np.argmax([cut0.n, cut1.n]))
    assert r.level_counts == pytest.approx(tuple(r.n * p for p in props))
    # Two levels reduce to the binary calculation.
    two = ordinal_development_size(n_parameters=7, proportions=[0.8, 0.2], r2_cs=0.1)
    assert two.n == development_size(n_parameters=7, prevalence=0.2, r2_cs=0.1).n
    frame = r.to_frame()
    assert len(frame) == 6 and set(frame["cut"]) == {0, 1}
    json.dumps(r.to_dict(), allow_nan=False)
    text = justification_text(r)
    assert "extension" in text and f"{r.n}" in text


def test_ordinal_bad_input():
    with pytest.raises(StudyError, match="proportions"):
        ordinal_development_size(n_parameters=3, proportions=[0.5, 0.4])
    with pytest.raises(StudyError, match="one per cut"):
        ordinal_development_size(n_parameters=3, proportions=[0.5, 0.3, 0.2], r2_cs=[0.1])


# --------------------------------------------------------------------------
# validation
# --------------------------------------------------------------------------

def test_validation_oe_criterion_by_hand():
    # Riley et al., Stat Med 2021, criterion 1: SE(ln O/E) = sqrt((1 - phi)/(n phi)).
    # Hand computation: for O/E = 1 and a 95% interval of width 0.2,
    # exp(1.96 SE) - exp(-1.96 SE) = 0.2  =>  SE = asinh(0.1)/1.96 = 0.05094,
    # n = 0.9 / (0.1 * SE^2) = 3468.x -> 3469.
    r = validation_size(prevalence=0.1, c_statistic=0.8, slope_ci_width=None, c_ci_width=None)
    se = math.asinh(0.1) / 1.96
    assert r.criteria[0].name == "O/E"
    assert r.criteria[0].n == math.ceil(0.9 / (0.1 * se**2)) == 3469
    # The interval at n is no wider than 0.2 and at n - 1 it is wider.
    width = lambda n: math.exp(1.96 * math.sqrt(0.9 / (n * 0.1))) - math.exp(-1.96 * math.sqrt(0.9 / (n * 0.1)))  # noqa: E731
    assert width(3469) <= 0.2 < width(3468)
    assert r.binding == "O/E" and r.n == 3469


def _newcombe_se(c, phi, n):
    # Newcombe RG, Stat Med 2006 (Part 2), as used by Riley et al. Stat Med 2021.
    return math.sqrt(c * (1 - c) * (1 + (n / 2 - 1) * (1 - c) / (2 - c) + (n / 2 - 1) * c / (1 + c)) / (n**2 * phi * (1 - phi)))


def test_validation_c_criterion():
    r = validation_size(prevalence=0.2, c_statistic=0.75, oe_ci_width=None, slope_ci_width=None, c_ci_width=0.1)
    n = r.n
    assert 2 * 1.96 * _newcombe_se(0.75, 0.2, n) <= 0.1 < 2 * 1.96 * _newcombe_se(0.75, 0.2, n - 1)
    # With equal groups Newcombe's formula is Hanley & McNeil's (Radiology 1982)
    # with Q1 = A/(2 - A), Q2 = 2A^2/(1 + A); checked at n = 400, A = 0.8.
    a, m = 0.8, 200
    q1, q2 = a / (2 - a), 2 * a**2 / (1 + a)
    hanley = math.sqrt((a * (1 - a) + (m - 1) * (q1 - a**2) + (m - 1) * (q2 - a**2)) / (m * m))
    assert _newcombe_se(0.8, 0.5, 400) == pytest.approx(hanley, rel=1e-12)


def test_validation_slope_criterion_against_statsmodels_fit():
    # Independent check of the Fisher-information calculation: simulate a large
    # validation sample from the assumed LP distribution and true risk, fit the
    # calibration model logit P = alpha + beta*LP with statsmodels 0.15.0 Logit,
    # and scale its slope SE to the criterion's n.  It must give the target SE
    # width/(2*1.96).  Tolerance 3%: at 300,000 people the observed information
    # differs from the expected by well under 1%; the rest is margin.
    for kwargs in (dict(prevalence=0.2, c_statistic=0.8), dict(prevalence=0.1, c_statistic=0.75, oe=0.9, slope=0.85)):
        r = validation_size(oe_ci_width=None, c_ci_width=None, slope_ci_width=0.2, **kwargs)
        rng = np.random.default_rng(2)
        big = 300_000
        lp = rng.normal(r.lp_mean, r.lp_sd, big)
        y = rng.binomial(1, special.expit(r.outcome_intercept + r.slope * lp))
        fit = sm.Logit(y, sm.add_constant(lp)).fit(disp=0)
        se_at_n = fit.bse[1] * math.sqrt(big / r.n)
        assert se_at_n == pytest.approx(0.2 / (2 * 1.96), rel=0.03)
        # The matched LP distribution reproduces the anticipated inputs:
        # prevalence (tolerance 0.003, binomial SE 0.0007), C (scikit-learn
        # 1.9.1 roc_auc_score, tolerance 0.005, SE about 0.0013), slope
        # (tolerance 0.03, SE about 0.008) and O/E (tolerance 0.02).
        assert y.mean() == pytest.approx(kwargs["prevalence"], abs=0.003)
        assert roc_auc_score(y, lp) == pytest.approx(kwargs["c_statistic"], abs=0.005)
        assert fit.params[1] == pytest.approx(r.slope, abs=0.03)
        assert y.mean() / special.expit(lp).mean() == pytest.approx(r.oe, abs=0.02)


def test_validation_given_lp_distribution():
    r = validation_size(prevalence=0.2, c_statistic=0.8, lp_mean=-1.8, lp_sd=1.2)
    assert r.lp_source == "given" and r.lp_mean == -1.8 and r.lp_sd == 1.2
    # a is chosen so that the mean true risk is the prevalence (numerical check
    # with scipy quad, tolerance 1e-6).
    from scipy import integrate

    mean_risk = integrate.quad(lambda x: special.expit(r.outcome_intercept + x) * stats.norm.pdf(x, -1.8, 1.2), -20, 20)[0]
    assert mean_risk == pytest.approx(0.2, abs=1e-6)


def test_validation_net_benefit_criterion():
    thr = 0.1
    r = validation_size(prevalence=0.1, c_statistic=0.8, net_benefit_threshold=thr, nb_ci_width=0.2)
    w = thr / (1 - thr)
    sens, spec, phi = r.sensitivity, r.specificity, 0.1
    # Net benefit of Vickers & Elkin, Med Decis Making 2006: sens*phi - (1 - spec)(1 - phi) w.
    assert r.net_benefit == pytest.approx(sens * phi - (1 - spec) * (1 - phi) * w, rel=1e-12)
    assert r.standardised_net_benefit == pytest.approx(r.net_benefit / phi, rel=1e-12)
    # The variance formula, checked by simulating the 2x2 counts at n
    # (multinomial, 20,000 samples): SD of the estimated standardised net
    # benefit matches sqrt(var/n).  Tolerance 3%: Monte Carlo SE of an SD
    # with 20,000 draws is 0.5%, the rest allows for the delta method.
    nb_crit = next(c for c in r.criteria if c.name == "net benefit")
    n = nb_crit.n
    rng = np.random.default_rng(4)
    cells = rng.multinomial(n, [sens * phi, (1 - sens) * phi, (1 - spec) * (1 - phi), spec * (1 - phi)], size=20_000)
    tp, fn, fp = cells[:, 0], cells[:, 1], cells[:, 2]
    snb = (tp - w * fp) / (tp + fn)
    assert snb.std(ddof=1) == pytest.approx(0.2 / (2 * 1.96), rel=0.03)
    # Sensitivity and specificity implied by the LP agree with simulation
    # (tolerance 0.01; binomial SE about 0.003 with 20,000 events).
    big = 200_000
    lp = rng.normal(r.lp_mean, r.lp_sd, big)
    y = rng.binomial(1, special.expit(r.outcome_intercept + r.slope * lp))
    pos = special.expit(lp) >= thr
    assert pos[y == 1].mean() == pytest.approx(sens, abs=0.01)
    assert (~pos[y == 0]).mean() == pytest.approx(spec, abs=0.01)
    # Given sensitivity and specificity are used as given.
    g = validation_size(prevalence=0.1, c_statistic=0.8, net_benefit_threshold=thr, nb_ci_width=0.2, sensitivity=0.7, specificity=0.6)
    assert (g.sensitivity, g.specificity) == (0.7, 0.6)


def test_validation_monotone_and_outputs():
    base = dict(prevalence=0.15, c_statistic=0.78)
    wide = validation_size(**base)
    narrow = validation_size(oe_ci_width=0.1, slope_ci_width=0.1, c_ci_width=0.05, **base)
    for a, b in zip(wide.criteria, narrow.criteria):
        assert b.n > a.n, a.name
    # Halving a width multiplies the O/E and slope n by about 4 (SE ~ 1/sqrt(n)).
    assert narrow.criteria[1].n / wide.criteria[1].n == pytest.approx(4, rel=0.01)
    # A rarer outcome needs more people for O/E.
    assert validation_size(prevalence=0.05, c_statistic=0.78).criteria[0].n > wide.criteria[0].n
    assert wide.n == max(c.n for c in wide.criteria)
    assert wide.events == pytest.approx(wide.n * 0.15)
    frame = wide.to_frame()
    assert list(frame["name"]) == ["O/E", "calibration slope", "C statistic"]
    assert frame["binding"].sum() == 1
    json.dumps(wide.to_dict(), allow_nan=False)
    text = justification_text(wide)
    assert f"{wide.n:,}" in text and "Riley et al." in text and wide.binding in text


def test_validation_bad_input():
    with pytest.raises(StudyError, match="lp_mean, lp_sd"):
        validation_size(prevalence=0.1, c_statistic=0.8, lp_mean=-2.0)
    with pytest.raises(StudyError, match="nb_ci_width"):
        validation_size(prevalence=0.1, c_statistic=0.8, net_benefit_threshold=0.1)
    with pytest.raises(StudyError, match="net_benefit_threshold"):
        validation_size(prevalence=0.1, c_statistic=0.8, nb_ci_width=0.1)
    with pytest.raises(StudyError, match="slope"):
        validation_size(prevalence=0.1, c_statistic=0.8, slope=-1)
    with pytest.raises(StudyError, match="at least one criterion"):
        validation_size(prevalence=0.1, c_statistic=0.8, oe_ci_width=None, slope_ci_width=None, c_ci_width=None)
    with pytest.raises(StudyError, match="c_statistic"):
        validation_size(prevalence=0.1, c_statistic=1.0)
    with pytest.raises(StudyError, match="oe"):
        validation_size(prevalence=0.5, c_statistic=0.8, oe=0.4)
    assert isinstance(development_size(n_parameters=2, prevalence=0.3), DevelopmentSize)

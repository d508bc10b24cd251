"""Level contrasts, Holm's adjustment, averaged probabilities, what-if differences, odds scale."""
import itertools
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import special, stats

import ordwidgets as ow
from ordwidgets.core.contrasts import holm_adjust
from ordwidgets.core.oddsscale import EXP_BETA_MEANING
from ordwidgets.demo import street_trees

FORMULA = "grade ~ diameter + years + species + arterial"


@pytest.fixture(scope="module")
def trees():
    return street_trees(500, seed=5)


@pytest.fixture(scope="module")
def res(trees):
    return ow.fit(FORMULA, trees)


def test_holm_on_a_published_example():
    # The worked example of the Holm-Bonferroni method in the Wikipedia article of that name
    # (recalled from memory): p = 0.01, 0.04, 0.03, 0.005 at alpha = 0.05.  By hand, sorted
    # 0.005, 0.01, 0.03, 0.04 are multiplied by 4, 3, 2, 1: 0.02, 0.03, 0.06, 0.04, and made
    # non-decreasing: 0.02, 0.03, 0.06, 0.06.  H1 and H4 are rejected, H2 and H3 are not.
    adjusted = holm_adjust([0.01, 0.04, 0.03, 0.005])
    np.testing.assert_allclose(adjusted, [0.03, 0.06, 0.06, 0.02], rtol=1e-12)
    assert list(adjusted <= 0.05) == [True, False, False, True]


def test_holm_equals_closed_testing_with_bonferroni():
    # Holm's procedure is the closed testing procedure (Marcus, Peritz & Gabriel 1976) with
    # Bonferroni tests of each intersection: adjusted p_i = max over sets S containing i of
    # min(1, |S| min_{j in S} p_j).  Brute force over all subsets.
    rng = np.random.default_rng(3)
    for _ in range(20):
        p = rng.uniform(0, 0.2, size=5) ** rng.uniform(0.5, 3)
        brute = [max(min(1.0, len(S) * min(p[list(S)])) for r in range(1, 6)
                     for S in itertools.combinations(range(5), r) if i in S) for i in range(5)]
        np.testing.assert_allclose(holm_adjust(p), brute, rtol=1e-12)
    np.testing.assert_allclose(holm_adjust([0.2, np.nan, 0.01]), [0.2, np.nan, 0.02])


def test_latent_differences_from_estimates_and_covariance(res):
    out = res.contrasts("species")
    d = out.differences
    assert out.levels[0] == "linden"  # the reference level (first category) comes first
    assert len(d) == 6  # four levels, 4 * 3 / 2 pairs
    b, V = res.coefficients, res.covariance
    q = stats.norm.isf(0.025)
    for a, c in itertools.combinations(out.levels, 2):
        pair = f"{c} - {a}"
        ca, cc = f"species[T.{a}]", f"species[T.{c}]"
        est = b.get(cc, 0.0) - b.get(ca, 0.0)
        var = (V.loc[cc, cc] if cc in b else 0.0) + (V.loc[ca, ca] if ca in b else 0.0)
        if ca in b and cc in b:
            var -= 2 * V.loc[ca, cc]
        se = np.sqrt(var)
        assert d.loc[pair, "estimate"] == pytest.approx(est, rel=1e-12, abs=1e-12)
        assert d.loc[pair, "std_error"] == pytest.approx(se, rel=1e-10)
        assert d.loc[pair, "p_value"] == pytest.approx(2 * stats.norm.sf(abs(est / se)), rel=1e-8)
        assert d.loc[pair, "wald_low"] == pytest.approx(est - q * se, rel=1e-10)
        assert d.loc[pair, "wald_high"] == pytest.approx(est + q * se, rel=1e-10)
    np.testing.assert_allclose(d["p_holm"], holm_adjust(d["p_value"]))
    assert np.all(d["p_holm"] >= d["p_value"])


def _probabilities(res, D, params):
    """Category probabilities of a parallel fit, written out: F(theta_j - x'beta) differences."""
    m = res.n_thresholds
    cum = res.link.cdf(params[:m][None, :] - (D @ params[m:])[:, None])
    cum = np.hstack([np.zeros((len(D), 1)), cum, np.ones((len(D), 1))])
    return np.diff(cum, axis=1)


def _gradient(f, x, h=1e-6):
    """Central differences of a vector function (columns = parameters)."""
    cols = []
    for k in range(len(x)):
        e = np.zeros(len(x))
        e[k] = h
        cols.append((f(x + e) - f(x - e)) / (2 * h))
    return np.column_stack(cols)


def test_averaged_probabilities_with_delta_method_intervals(trees, res):
    out = res.contrasts("species").probabilities
    rows = res.training.frame
    z = stats.norm.isf(0.025)
    for lv in ["linden", "maple", "locust"]:
        frame = rows.assign(species=pd.Categorical([lv] * len(rows), categories=rows["species"].cat.categories))
        mean = res.predict(frame).mean().to_numpy()
        np.testing.assert_allclose(out.loc[lv, "estimate"].to_numpy(), mean, rtol=1e-10)
        D = res.design(frame)
        G = _gradient(lambda p: _probabilities(res, D, p).mean(axis=0), res.params)
        se = np.sqrt(np.einsum("jp,pq,jq->j", G, res.cov, G))
        lo = special.expit(special.logit(mean) - z * se / (mean * (1 - mean)))
        hi = special.expit(special.logit(mean) + z * se / (mean * (1 - mean)))
        np.testing.assert_allclose(out.loc[lv, "lower"].to_numpy(), lo, rtol=1e-5)
        np.testing.assert_allclose(out.loc[lv, "upper"].to_numpy(), hi, rtol=1e-5)


def test_whatif_difference_with_delta_method_interval(trees, res):
    base = trees.iloc[[3]]
    scen = base.assign(diameter=base["diameter"] + 20.0, species=pd.Categorical(
        ["maple"], categories=trees["species"].cat.categories))
    out = res.probability_difference(scen, base)
    pb, ps = res.predict(base).to_numpy()[0], res.predict(scen).to_numpy()[0]
    np.testing.assert_allclose(out["difference"].to_numpy()[:-1], ps - pb, rtol=1e-10)
    Db, Ds = res.design(base), res.design(scen)
    scores = np.arange(1, 5)

    def diff(p):
        d = (_probabilities(res, Ds, p) - _probabilities(res, Db, p))[0]
        return np.append(d, scores @ d)

    G = _gradient(diff, res.params)
    se = np.sqrt(np.einsum("jp,pq,jq->j", G, res.cov, G))
    np.testing.assert_allclose(out["std_error"].to_numpy(), se, rtol=1e-5)
    z = stats.norm.isf(0.05)
    lo = res.probability_difference(scen, base, level=0.9)["low"].to_numpy()
    np.testing.assert_allclose(lo, diff(res.params) - z * se, rtol=1e-5, atol=1e-9)
    assert out.index[-1] == "expected score (1..J)"
    assert out.loc["expected score (1..J)", "difference"] == pytest.approx(scores @ (ps - pb), rel=1e-10)


def test_odds_scale_is_the_exponentiated_wald_interval(res):
    odds = res.odds_scale()
    tab = res.table()
    names = list(res.coef_names)
    z = stats.norm.isf(0.025)
    est, se = tab.loc[names, "estimate"], tab.loc[names, "std_error"]
    np.testing.assert_allclose(odds["odds_ratio"], np.exp(est), rtol=1e-12)
    np.testing.assert_allclose(odds["wald_low"], np.exp(est - z * se), rtol=1e-10)
    np.testing.assert_allclose(odds["wald_high"], np.exp(est + z * se), rtol=1e-10)
    # Closed form of the logit model: the odds of Y > j change by exp(beta) per unit, at every j.
    row = res.training.frame.iloc[[0]]
    p0 = res.predict(row, kind="cumulative").to_numpy()[0, :-1]
    p1 = res.predict(row.assign(diameter=row["diameter"] + 1), kind="cumulative").to_numpy()[0, :-1]
    np.testing.assert_allclose(((1 - p1) / p1) / ((1 - p0) / p0), odds.loc["diameter", "odds_ratio"], rtol=1e-9)


def test_other_links_refuse_and_say_what_exp_beta_means(trees):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fits = {name: ow.fit(FORMULA, trees, link=name) for name in ("cloglog", "loglog", "probit")}
    for name, fit in fits.items():
        with pytest.raises(ValueError, match="no odds ratio"):
            fit.odds_scale()
    # The statements about cloglog and loglog, checked on the fitted models (closed forms of
    # F(t) = 1 - exp(-exp(t)) and F(t) = exp(-exp(-t))).
    row = trees.iloc[[0]]
    up = row.assign(diameter=row["diameter"] + 1)
    for name, side, factor in (("cloglog", "above", lambda b: np.exp(-b)), ("loglog", "below", np.exp)):
        fit = fits[name]
        c0, c1 = (fit.predict(r, kind="cumulative").to_numpy()[0, :-1] for r in (row, up))
        q0, q1 = (1 - c0, 1 - c1) if side == "above" else (c0, c1)
        b = fit.coefficients["diameter"]
        np.testing.assert_allclose(np.log(q1) / np.log(q0), factor(b), rtol=1e-8)
    assert "exp(-beta) multiplies -log P(Y > j)" in EXP_BETA_MEANING["cloglog"]
    assert "exp(beta) multiplies -log P(Y <= j)" in EXP_BETA_MEANING["loglog"]


def test_contrasts_refuse_a_numeric_term_and_a_nonparallel_factor(trees, res):
    with pytest.raises(ValueError, match="diameter"):
        res.contrasts("diameter")
    with pytest.raises(ValueError, match="not a term"):
        res.contrasts("colour")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        free = ow.fit(FORMULA, trees, nonparallel=["species"])
    with pytest.raises(ValueError, match="per-threshold"):
        free.contrasts("species")


def test_a_string_column_factor_works_like_a_categorical(trees, res):
    frame = trees.assign(species=trees["species"].astype(str))
    as_text = ow.fit(FORMULA, frame)
    a, b = as_text.contrasts("species"), res.contrasts("species")
    # formulaic sorts string levels, so the reference level may differ: compare the same pairs.
    for pair in a.differences.index:
        left, right = pair.split(" - ")
        other = b.differences
        est = other.loc[pair, "estimate"] if pair in other.index else -other.loc[f"{right} - {left}", "estimate"]
        assert a.differences.loc[pair, "estimate"] == pytest.approx(est, abs=1e-6)
    np.testing.assert_allclose(a.probabilities.loc[list(b.levels)].to_numpy(), b.probabilities.to_numpy(),
                               atol=1e-6)

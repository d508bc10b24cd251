"""Wald and profile intervals, likelihood-ratio comparisons and link comparison."""
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

import ordwidgets as ow

from . import reference as R
from . import reference_extended as RX


def small_data(n=150, seed=0, link="logit"):
    X, y = R.simulate(n, [0.8, -0.5], [-0.7, 0.6], link=link, seed=seed)
    return pd.DataFrame({"y": y, "x": X[:, 0], "v": X[:, 1]}), X, y


def test_wald_interval_is_estimate_plus_minus_z_se():
    # Definition of the Wald interval; z from scipy.stats.norm.
    df, _, _ = small_data()
    res = ow.fit("y ~ x + v", df)
    ci = res.intervals(0.9)
    z = stats.norm.ppf(0.95)
    np.testing.assert_allclose(ci["lower"], res.params - z * res.std_errors, rtol=1e-12)
    np.testing.assert_allclose(ci["upper"], res.params + z * res.std_errors, rtol=1e-12)
    assert list(ci.index) == list(res.std_errors.index)


def test_table_wald_columns_are_estimate_plus_minus_z_se():
    # Same definition through FitResult.table(); z from scipy.stats.norm.
    df, _, _ = small_data()
    res = ow.fit("y ~ x + v", df)
    tab = res.table(level=0.9)
    assert list(tab.columns) == ["estimate", "std_error", "z", "p_value", "wald_low", "wald_high"]
    z = stats.norm.ppf(0.95)
    np.testing.assert_allclose(tab["wald_low"], res.params - z * res.std_errors, rtol=1e-12)
    np.testing.assert_allclose(tab["wald_high"], res.params + z * res.std_errors, rtol=1e-12)
    assert "95% Wald interval" in res._repr_html_()


def _independent_profile_end(negll, est, k, m, sign, se, level):
    """Profile end by scipy: BFGS over the other parameters, brentq on the deviance.

    The thresholds (the first ``m`` parameters, never the profiled one) are optimised as a
    first value plus log increments so BFGS cannot leave the ordered region.
    """
    def full(t, z):
        theta = np.cumsum(np.concatenate([z[:1], np.exp(z[1:m])]))
        return np.insert(np.concatenate([theta, z[m:]]), k, t)

    start = np.delete(est, k)
    start = np.concatenate([start[:1], np.log(np.diff(start[:m])), start[m:]])
    llmax, cut = -negll(est), stats.chi2.ppf(level, 1)

    def deviance(t):
        z = optimize.minimize(lambda v: negll(full(t, v)), start, method="BFGS", options={"gtol": 1e-9}).x
        return 2 * (llmax + negll(full(t, z))) - cut

    return optimize.brentq(deviance, est[k], est[k] + sign * 6 * se, xtol=1e-10)


def test_profile_interval_matches_an_independent_scipy_profile():
    # Reference: the published log-likelihood (tests/reference.py), profiled with BFGS and
    # Brent's root finder from scipy; nothing of ordwidgets' optimiser is used.
    df, X, y = small_data(n=120, seed=1)
    res = ow.fit("y ~ x + v", df)
    ci = res.intervals(0.95, method="profile")
    negll = lambda p: -R.loglik(p, X, y, 2, "logit")  # noqa: E731
    for k in (2, 3):
        ends = [_independent_profile_end(negll, res.params, k, 2, s, res.std_errors.iloc[k], 0.95) for s in (-1, 1)]
        assert ci.iloc[k].to_numpy() == pytest.approx(ends, abs=1e-5)


def test_profile_interval_of_a_scale_effect_matches_an_independent_profile():
    df, X, y = small_data(n=150, seed=2)
    res = ow.fit("y ~ x", df, scale_by=["v"])
    ci = res.intervals(0.9, method="profile")
    Xl, Z = df[["x"]].to_numpy(float), df[["v"]].to_numpy(float)
    negll = lambda p: -RX.loglik(p, Xl, np.empty((len(y), 0)), Z, y, 2, "logit")  # noqa: E731
    k, se = 3, res.std_errors.iloc[3]
    expect = [_independent_profile_end(negll, res.params, k, 2, s, se, 0.9) for s in (-1, 1)]
    assert ci.loc["scale: v"].to_numpy() == pytest.approx(expect, abs=1e-5)


def _binomial_lr_interval(c, n, level):
    """Likelihood-ratio interval of a binomial proportion (Wilks), by brentq."""
    ph = c / n
    cut = stats.chi2.ppf(level, 1)
    dev = lambda p: 2 * (c * np.log(ph / p) + (n - c) * np.log((1 - ph) / (1 - p))) - cut  # noqa: E731
    return optimize.brentq(dev, 1e-12, ph), optimize.brentq(dev, ph, 1 - 1e-12)


@pytest.mark.parametrize("link", ["logit", "probit", "cloglog"])
def test_thresholds_only_profile_is_the_inverse_link_of_the_binomial_lr_interval(link):
    # Closed form: with no predictors the profile of theta_j is the binomial profile of the
    # cumulative proportion P(Y <= j) (the multinomial factorises), mapped through F^{-1}.
    counts = [30, 50, 20]
    df = pd.DataFrame({"y": np.repeat([0, 1, 2], counts)})
    res = ow.fit("y ~ 1", df, link=link)
    ci = res.intervals(0.95, method="profile")
    F = R.DISTS[link]
    for j, c in enumerate(np.cumsum(counts)[:-1]):
        lo, hi = _binomial_lr_interval(c, 100, 0.95)
        assert ci.iloc[j].to_numpy() == pytest.approx(F.ppf([lo, hi]), abs=1e-7)


def test_profile_end_the_likelihood_never_reaches_is_infinite():
    # Quasi-separation: all rows with g = 1 are in the top category, so the likelihood keeps
    # rising with the effect of g and the upper end does not exist.
    rng = np.random.default_rng(3)
    g = np.repeat([0, 1], [80, 20])
    y = np.where(g == 1, 2, rng.choice(3, 100))
    df = pd.DataFrame({"y": y, "g": g, "x": rng.normal(size=100)})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = ow.fit("y ~ g + x", df)
    ci = res.intervals(method="profile")
    assert ci.loc["g", "upper"] == np.inf and np.isfinite(ci.loc["g", "lower"])
    assert np.all(np.isfinite(ci.loc["x"]))


def test_compare_matches_chi2_on_independent_logliks():
    # Statistic from the reference fits' log-likelihoods; p-value from scipy.stats.chi2.
    df, X, y = small_data(seed=4)
    small, large = ow.fit("y ~ x", df), ow.fit("y ~ x + v", df)
    _, ll_small = R.fit(X[:, :1], y, "logit")
    _, ll_large = R.fit(X, y, "logit")
    table = ow.compare(small, large)
    stat = 2 * (ll_large - ll_small)
    assert table.loc["larger", "statistic"] == pytest.approx(stat, abs=1e-6)
    assert table.loc["larger", "df"] == 1
    assert table.loc["larger", "p_value"] == pytest.approx(stats.chi2.sf(stat, 1), rel=1e-5)
    npar = ow.fit("y ~ x + v", df, nonparallel=["v"])
    assert ow.compare(large, npar).loc["larger", "df"] == 1  # three levels: one extra cut


def test_compare_refuses_non_nested_and_different_rows():
    df, _, _ = small_data(seed=5)
    a, b = ow.fit("y ~ x", df), ow.fit("y ~ v", df)
    with pytest.raises(ow.ComparisonError, match="not nested.*x"):
        ow.compare(a, b)
    with pytest.raises(ow.ComparisonError, match="different rows"):
        ow.compare(a, ow.fit("y ~ x + v", df.iloc[:-5]))
    with pytest.raises(ow.ComparisonError, match="different links"):
        ow.compare(a, ow.fit("y ~ x + v", df, link="probit"))
    big = ow.fit("y ~ x + v", df, nonparallel=["x"])
    with pytest.raises(ow.ComparisonError, match="freer in the smaller fit: x"):
        ow.compare(big, ow.fit("y ~ x + v", df, scale_by=["v"]))
    with pytest.raises(ow.ComparisonError, match="no extra parameters"):
        ow.compare(a, ow.fit("y ~ x", df))
    shifted = df.assign(x=df.x + 1.0)
    with pytest.raises(ow.ComparisonError, match="different values: x"):
        ow.compare(a, ow.fit("y ~ x + v", shifted))



def test_compare_checks_the_rows_of_fits_that_kept_no_training_rows():
    # Halves of the same size give equal row counts: only the rows themselves tell them apart.
    df, X, y = small_data(n=200, seed=6)
    first, second = df.iloc[:100].reset_index(drop=True), df.iloc[100:].reset_index(drop=True)
    small = ow.fit("y ~ x", first, keep_data=False)
    with pytest.raises(ow.ComparisonError, match="different rows"):
        ow.compare(small, ow.fit("y ~ x + v", second, keep_data=False))
    with pytest.raises(ow.ComparisonError, match="different rows"):
        ow.compare(ow.fit("y ~ x", first), ow.fit("y ~ x + v", second, keep_data=False))
    reweighted = ow.fit("y ~ x + v", first, weights=np.linspace(0.5, 2.0, 100), keep_data=False)
    with pytest.raises(ow.ComparisonError, match="different rows"):
        ow.compare(small, reweighted)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the same rows: no refusal and no warning
        table = ow.compare(small, ow.fit("y ~ x + v", first, keep_data=False))
        mixed = ow.compare(ow.fit("y ~ x", first), ow.fit("y ~ x + v", first, keep_data=False))
    # the statistic still comes from the fits' log-likelihoods (reference fits, scipy.optimize)
    _, ll_small = R.fit(X[:100, :1], y[:100], "logit")
    _, ll_large = R.fit(X[:100], y[:100], "logit")
    assert table.loc["larger", "statistic"] == pytest.approx(2 * (ll_large - ll_small), abs=1e-6)
    assert mixed.loc["larger", "statistic"] == pytest.approx(table.loc["larger", "statistic"], abs=1e-9)

def test_compare_links_ranks_by_aic_with_the_fits_loglik():
    df, _, _ = small_data(seed=6, link="probit")
    table = ow.compare_links("y ~ x + v", df)
    assert set(table.index) == set(ow.link_names()) and table.index.name == "link"
    assert table["aic"].is_monotonic_increasing and table["converged"].all()
    for name in table.index:
        assert table.loc[name, "loglik"] == pytest.approx(ow.fit("y ~ x + v", df, link=name).loglik, rel=1e-12)
    sub = ow.compare_links("y ~ x + v", df, link=["logit", "probit"], nonparallel=["x"])
    assert list(sub["n_params"]) == [2 + 2 + 1, 2 + 2 + 1]  # two cuts, x at each cut, v


def test_compare_links_says_whether_the_fits_are_weighted():
    # An aggregated, balanced table: each (grade, group) once, with a count column.  Unweighted,
    # every group shows each grade once, so every link has the closed-form maximum 6 log(1/3)
    # (thresholds at the cumulative thirds, no effect); weighted, the links differ.
    table = pd.DataFrame({"grade": [1, 1, 2, 2, 3, 3], "grp": ["a", "b"] * 3, "count": [10, 30, 20, 20, 30, 10]})
    plain = ow.compare_links("grade ~ grp", table)
    np.testing.assert_allclose(plain["loglik"], 6 * np.log(1 / 3), rtol=1e-12)
    assert plain.columns.name == plain.attrs["weighting"] == "unweighted" and "unweighted" in str(plain)
    weighted = ow.compare_links("grade ~ grp", table, weights="count")
    assert weighted.columns.name == "weighted by column 'count'" and "weighted by column 'count'" in str(weighted)
    assert weighted["loglik"].max() - weighted["loglik"].min() > 0.1


def test_bad_levels_and_methods_are_refused():
    df, _, _ = small_data(n=60, seed=7)
    res = ow.fit("y ~ x", df)
    for bad in (0, 1, 1.5, -0.1, True):
        with pytest.raises(ValueError, match="level must be strictly between 0 and 1"):
            res.intervals(bad)
        with pytest.raises(ValueError, match="level must be strictly between 0 and 1"):
            res.predict(df, level=bad)
    with pytest.raises(ValueError, match="'wald' or 'profile'"):
        res.intervals(method="bootstrap")


def test_compare_warns_when_the_larger_fit_is_worse():
    # A larger nested model can never have a lower maximum: that means a failed fit.
    import dataclasses

    df, _, _ = small_data(seed=8)
    small, large = ow.fit("y ~ x", df), ow.fit("y ~ x + v", df)
    broken = dataclasses.replace(large, loglik=small.loglik - 1.0)
    with pytest.warns(ow.ConvergenceWarning, match="not at its maximum"):
        table = ow.compare(small, broken)
    assert np.isnan(table.loc["larger", "p_value"])


def test_refits_refuse_a_display_sample_of_the_rows():
    # A Dask fit keeps a sample of rows; refits on it are not comparable with res.loglik.
    import dataclasses

    df, _, _ = small_data(n=80, seed=9)
    res = ow.fit("y ~ x + v", df)
    sampled = dataclasses.replace(res, training=dataclasses.replace(res.training, sampled_from=10_000))
    with pytest.raises(ValueError, match="profile interval needs every fitted row.*sample of 80 of 10,000"):
        sampled.intervals(method="profile")
    with pytest.raises(ValueError, match="proportional-odds test needs every fitted row"):
        sampled.proportional_odds_test()
    assert np.all(np.isfinite(sampled.intervals().to_numpy()))  # Wald needs no rows


def test_compare_links_of_a_result_uses_its_formula_rows_and_weights():
    # Reference: the same table from the formula, data and weights written out (the
    # log-likelihoods of ow.fit for each link, weighted by the column).
    df, _, _ = small_data(seed=9, link="probit")
    df = df.assign(w=np.random.default_rng(9).integers(1, 4, len(df)).astype(float))
    res = ow.fit("y ~ x + v", df, link="cloglog", weights="w")
    table = ow.compare_links(res)
    explicit = ow.compare_links("y ~ x + v", df, weights="w")
    assert list(table.index) == list(explicit.index)
    np.testing.assert_allclose(table["loglik"], explicit["loglik"], rtol=1e-12)
    assert table.loc["cloglog", "loglik"] == res.loglik
    for name in table.index:
        assert table.loc[name, "loglik"] == pytest.approx(ow.fit("y ~ x + v", df, link=name, weights="w").loglik,
                                                          rel=1e-12)
    assert table.columns.name == table.attrs["weighting"] == "weighted by column 'w'"
    plain = ow.compare_links(ow.fit("y ~ x + v", df))
    assert plain.attrs["weighting"] == "unweighted"
    assert not np.allclose(plain.sort_index()["loglik"], table.sort_index()["loglik"])
    with pytest.raises(ValueError, match="takes its data and options from the fit"):
        ow.compare_links(res, weights="w")

"""Residual diagnostics: outside references (scipy.stats, pandas) and published behaviour.

Liu & Zhang (2018, J. Amer. Statist. Assoc. 113:845-854) show that surrogate residuals of a
misspecified model reveal the misspecification the way continuous residuals do: an omitted
quadratic term as a U-shape against the predictor, a wrong link in the QQ plot, a
non-constant scale as a spread changing with the predictor.
"""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

import ordwidgets as ow
from ordwidgets.core.diagnostics import (binned_means, display_rows, distance_test, qq_points,
                                         spread_test, trend_test)
from ordwidgets.core.residuals import reference_distribution

from . import reference as R
from .residual_helpers import row_of

N = 20_000
CUTS = [-1.0, 0.3, 1.6]


def latent_frame(n, seed, *, curvature=0.0, spread=0.0, link="logit"):
    """``y* = x + curvature x^2 + exp(spread z) e``, cut at ``CUTS``."""
    rng = np.random.default_rng(seed)
    x, z = rng.normal(size=n), rng.normal(size=n)
    e = R.DISTS[link].rvs(size=n, random_state=rng)
    latent = x + curvature * x**2 + np.exp(spread * z) * e
    return pd.DataFrame({"y": np.searchsorted(CUTS, latent), "x": x, "z": z})


@pytest.fixture(scope="module")
def correct():
    return ow.fit("y ~ x + z", latent_frame(N, 0))


# ---- shapes and plain-data contract ------------------------------------------------------------
def test_entry_point_returns_documented_frames(correct):
    d = correct.residual_diagnostics(x="z", draws=3, seed=1)
    assert d.kind == "latent" and "latent surrogate" in d.description
    assert list(d.qq.columns) == ["theoretical", "sample"] and len(d.qq) == 1000
    for frame in (d.versus_fitted, d.versus_x):
        assert list(frame.columns) == ["center", "mean", "lower", "upper", "count"]
        assert frame["count"].sum() == N  # statistics use every row
        assert np.all(np.diff(frame["center"]) > 0)
    assert list(d.tests.columns) == ["test", "against", "method", "statistic", "p_value", "flagged", "message"]
    assert set(d.tests["against"]) == {"link distribution", "fitted", "x", "z"}
    assert d.residuals.shape == (N, 3)
    assert len(d.rows) == 5000 and list(d.points().columns) == ["row", "fitted", "x", "residual"]


def test_display_rows_are_a_reproducible_subset():
    a = display_rows(100_000, max_points=5000, seed=3)
    assert np.array_equal(a, display_rows(100_000, max_points=5000, seed=3))
    assert not np.array_equal(a, display_rows(100_000, max_points=5000, seed=4))
    assert len(np.unique(a)) == 5000 and np.all(np.diff(a) > 0) and a.max() < 100_000
    assert np.array_equal(display_rows(300, max_points=5000), np.arange(300))


def test_edited_thresholds_reach_the_residuals(correct):
    edited = correct.thresholds.to_numpy() + [0.4, 0.0, -0.3]
    d = correct.residual_diagnostics(thresholds=edited, seed=5)
    assert np.array_equal(d.residuals[:, 0], correct.surrogate_residuals(thresholds=edited, seed=5))
    assert not np.array_equal(d.residuals[:, 0], correct.surrogate_residuals(seed=5))


# ---- outside references ------------------------------------------------------------------------
@pytest.mark.parametrize("rows, method", [(5000, "exact"), (N, "asymp")])
def test_distance_statistic_equals_scipy_kstest(correct, rows, method):
    r = correct.surrogate_residuals(seed=6)[:rows]
    stat, p = distance_test(r, reference_distribution("logit"))
    check = stats.kstest(r, stats.logistic.cdf, method=method)
    assert stat == pytest.approx(check.statistic, rel=1e-12)
    assert p == pytest.approx(check.pvalue, rel=1e-6)


def test_qq_points_are_reference_quantiles_against_sample_quantiles(correct):
    r = correct.surrogate_residuals(draws=2, seed=7)
    qq = qq_points(r, reference_distribution("logit"), quantiles=400)
    probs = (np.arange(400) + 0.5) / 400
    assert np.allclose(qq["theoretical"], stats.logistic.ppf(probs))
    inner = (probs > 0.01) & (probs < 0.99)
    # sd of a sample quantile: sqrt(p(1-p)/n) / f(q); two draws average, so this is generous
    sd = np.sqrt(probs * (1 - probs) / N) / stats.logistic.pdf(stats.logistic.ppf(probs))
    assert np.all(np.abs(qq["sample"] - qq["theoretical"])[inner] < 5 * sd[inner])


def test_binned_means_of_a_discrete_variable_equal_pandas_groupby():
    rng = np.random.default_rng(8)
    x = rng.integers(0, 6, size=3000).astype(float)
    r = rng.normal(size=3000) + 0.1 * x
    got = binned_means(x, r, bins=20, level=0.9)
    ref = pd.Series(r).groupby(x).agg(["mean", "std", "count"])
    half = stats.norm.ppf(0.95) * ref["std"] / np.sqrt(ref["count"])
    assert np.allclose(got["center"], ref.index) and np.allclose(got["count"], ref["count"])
    assert np.allclose(got["mean"], ref["mean"])
    assert np.allclose(got["lower"], ref["mean"] - half) and np.allclose(got["upper"], ref["mean"] + half)


def test_binned_means_of_a_continuous_variable_hold_similar_counts():
    rng = np.random.default_rng(9)
    x = rng.lognormal(size=50_000)
    got = binned_means(x, rng.normal(size=50_000), bins=20)
    assert len(got) == 20 and got["count"].sum() == 50_000
    # edges come from a subsample of ~8,000 rows: each bin holds 2,500 +- a few binomial sd
    assert np.all(np.abs(got["count"] - 2500) < 5 * np.sqrt(2500 * 20))


def test_integer_weights_equal_duplicated_rows():
    """Frequency weights (common practice, no source): a weight k counts as k copies."""
    rng = np.random.default_rng(10)
    x, r = rng.normal(size=400), rng.logistic(size=400)
    w = rng.integers(0, 4, size=400)
    xe, re_ = np.repeat(x, w), np.repeat(r, w)
    ref = reference_distribution("logit")
    v, ve = ref.cdf(r) - 0.5, ref.cdf(re_) - 0.5
    assert np.allclose(distance_test(r, ref, weights=w), distance_test(re_, ref))
    assert np.allclose(trend_test(x, v, weights=w), trend_test(xe, ve))
    assert np.allclose(spread_test(x, v, weights=w), spread_test(xe, ve))
    assert np.allclose(qq_points(r, ref, quantiles=50, weights=w), qq_points(re_, ref, quantiles=50))


def test_trend_test_equals_an_ordinary_least_squares_f_test():
    """Reference: the textbook nested-model F-test, with the fit by numpy.linalg.lstsq."""
    rng = np.random.default_rng(11)
    x = rng.normal(size=500)
    v = 0.05 * x**2 + rng.uniform(-0.5, 0.5, size=500)
    full = np.column_stack([np.ones(500), x, x**2])
    rss1 = np.sum((v - full @ np.linalg.lstsq(full, v, rcond=None)[0]) ** 2)
    rss0 = np.sum((v - v.mean()) ** 2)
    f = ((rss0 - rss1) / 2) / (rss1 / (500 - 3))
    stat, p = trend_test(x, v)
    assert stat == pytest.approx(f, rel=1e-9) and p == pytest.approx(stats.f.sf(f, 2, 497), rel=1e-6)


# ---- published behaviour under misspecification (Liu & Zhang 2018) ------------------------------
def test_correct_model_flags_nothing(correct):
    d = correct.residual_diagnostics(x="x", seed=12)
    assert not d.tests["flagged"].any(), d.tests
    assert np.all(d.tests["p_value"] > 1e-3)


def test_omitted_quadratic_shows_as_a_u_shape():
    data = latent_frame(N, 13, curvature=0.5)
    d = ow.fit("y ~ x + z", data).residual_diagnostics(x="x", seed=13)
    assert row_of(d, "trend", "x")["p_value"] < 1e-6
    means = d.versus_x["mean"].to_numpy()
    middle = means[len(means) // 2 - 2: len(means) // 2 + 2].max()
    assert means[0] > middle and means[-1] > middle  # U-shape: both ends above the middle
    fixed = ow.fit("y ~ x + {x**2} + z", data).residual_diagnostics(x="x", seed=13)
    assert row_of(fixed, "trend", "x")["p_value"] > 1e-3


def test_wrong_link_shows_in_the_distance_test():
    data = latent_frame(N, 14, link="cloglog")
    wrong = ow.fit("y ~ x + z", data, link="logit").residual_diagnostics(seed=14)
    right = ow.fit("y ~ x + z", data, link="cloglog").residual_diagnostics(seed=14)
    assert row_of(wrong, "distance", "link distribution")["p_value"] < 1e-3
    assert row_of(right, "distance", "link distribution")["p_value"] > 1e-3
    assert "link may be wrong" in row_of(wrong, "distance", "link distribution")["message"]


def test_heteroscedastic_data_show_in_the_spread_test():
    d = ow.fit("y ~ x + z", latent_frame(N, 15, spread=0.4)).residual_diagnostics(seed=15)
    row = row_of(d, "spread", "z")
    assert row["p_value"] < 1e-6 and row["flagged"] and "scale effect" in row["message"]
    assert row_of(d, "trend", "z")["p_value"] > 1e-3


def test_an_omitted_variable_can_be_checked_by_passing_its_values():
    rng = np.random.default_rng(1600)  # not 16: that stream drew x in latent_frame
    data = latent_frame(N, 16).assign(w=rng.normal(size=N))
    data["y"] = np.searchsorted(CUTS, data.x + 0.5 * data.w + rng.logistic(size=N))
    d = ow.fit("y ~ x", data).residual_diagnostics(x=data["w"], seed=16)
    assert d.x_name == "w" and "w" not in d.versus_x.columns
    assert row_of(d, "trend", "w")["p_value"] < 1e-6
    assert row_of(d, "trend", "x")["p_value"] > 1e-3


# ---- bad input ---------------------------------------------------------------------------------
def test_unknown_variable_and_wrong_length_are_refused(correct):
    with pytest.raises(KeyError, match="not a design column"):
        correct.residual_diagnostics(x="nope")
    with pytest.raises(ValueError, match="one value per training row"):
        correct.residual_diagnostics(x=np.zeros(10))


@pytest.mark.parametrize("option", [{"bins": 0}, {"bins": 2.5}, {"quantiles": 0}, {"max_points": -1},
                                    {"level": 1.0}, {"alpha": 0}, {"level": "0.9"}])
def test_bad_options_are_refused(correct, option):
    with pytest.raises(ValueError, match=next(iter(option))):
        correct.residual_diagnostics(**option)


def test_a_variable_changed_in_place_is_prepared_again(correct):
    """The per-fit cache of prepared variables must notice new values (our own rule)."""
    w = np.random.default_rng(17).normal(size=N)
    first = correct.residual_diagnostics(x=w, seed=18).versus_x
    w *= 10.0
    second = correct.residual_diagnostics(x=w, seed=18).versus_x
    assert np.allclose(second["center"], 10.0 * first["center"])


def test_trend_and_spread_tests_hold_their_size_for_an_unrelated_variable():
    """Under a correct model surrogate residuals are independent of any variable unrelated to
    the response (Liu & Zhang 2018), so p-values below 0.05 should occur 5% of the time."""
    res = ow.fit("y ~ x + z", latent_frame(2000, 19))
    rng = np.random.default_rng(19)
    ref = reference_distribution("logit")
    below = np.zeros(2)
    for seed in range(500):
        v = ref.cdf(res.surrogate_residuals(seed=seed)) - 0.5
        w = rng.normal(size=2000)
        below += [trend_test(w, v)[1] < 0.05, spread_test(w, v)[1] < 0.05]
    # Binomial(500, 0.05): mean 25, sd 4.9; the bounds are more than three sd away
    assert np.all((below >= 9) & (below <= 42)), below

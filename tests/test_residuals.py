"""Surrogate and probability-scale residuals against published properties and scipy.stats.

Sources named beside each check: Liu & Zhang (2018, J. Amer. Statist. Assoc. 113:845-854)
for surrogate residuals, Li & Shepherd (2012, Biometrika 99:473-480) for the
probability-scale residual; scipy.stats distributions are the independent reference.
"""
import numpy as np
import pandas as pd
import pytest
from scipy import special, stats
from sklearn.linear_model import LogisticRegression

import ordwidgets as ow
from ordwidgets.core.residuals import reference_distribution, sample_truncated

from . import reference as R

N = 20_000
CUTS = [-1.0, 0.3, 1.6]
BETA = [0.8, -0.5]
# Closed-form variances of the standard latent errors (textbook values, recalled from
# memory): logistic pi^2/3, normal 1, Gumbel (either tail) pi^2/6.
VARIANCE = {"logit": np.pi**2 / 3, "probit": 1.0, "cloglog": np.pi**2 / 6, "loglog": np.pi**2 / 6}


def fit_simulated(link, n=N, seed=0, beta=BETA, cuts=CUTS):
    X, y = R.simulate(n, beta, cuts, link=link, seed=seed)
    frame = pd.DataFrame({"y": y, "a": X[:, 0], "b": X[:, 1]})
    return ow.fit("y ~ a + b", frame, link=link)


@pytest.fixture(scope="module", params=["logit", "probit", "cloglog", "loglog", "cauchit"])
def simulated(request):
    return request.param, fit_simulated(request.param)


# ---- Liu & Zhang (2018): under a correct model the residuals follow the link distribution ----
def test_residuals_follow_the_link_distribution(simulated):
    link, res = simulated
    r = res.surrogate_residuals(seed=1)
    dist = R.DISTS[link]()
    shift = 0.0 if link == "cauchit" else dist.mean()
    # Estimated parameters make the KS p-value conservative, so "not small" is a fair bar.
    assert stats.kstest(r + shift, dist.cdf).pvalue > 1e-3


def test_moments_match_closed_forms(simulated):
    link, res = simulated
    if link == "cauchit":
        pytest.skip("cauchit has no moments; see test_cauchit_median_and_iqr")
    r = res.surrogate_residuals(seed=2)
    var = VARIANCE[link]
    kurt = float(R.DISTS[link]().stats(moments="k"))  # excess kurtosis, from scipy
    assert abs(r.mean()) < 5 * np.sqrt(var / N)
    se_var = var * np.sqrt((kurt + 2) / N)  # sd of the sample variance
    assert abs(r.var() - var) < 5 * se_var


def test_cauchit_median_and_iqr():
    res = fit_simulated("cauchit", seed=3)
    r = res.surrogate_residuals(seed=3)
    q1, q2, q3 = np.quantile(r, [0.25, 0.5, 0.75])
    f = stats.cauchy.pdf  # sample-quantile sd: sqrt(p(1-p)/n) / f(q)
    assert abs(q2) < 5 * np.sqrt(0.25 / N) / f(0)
    assert abs((q3 - q1) - 2.0) < 10 * np.sqrt(0.1875 / N) / f(1)  # standard Cauchy IQR = 2
    ref = reference_distribution("cauchit")
    assert (ref.center_label, ref.spread_label) == ("median", "IQR")
    assert ref.spread == pytest.approx(stats.cauchy.ppf(0.75) - stats.cauchy.ppf(0.25))


def test_every_latent_draw_lies_in_its_category_interval(simulated):
    link, res = simulated
    lower, upper = res.error_bounds()
    shift = reference_distribution(link).shift
    e = res.surrogate_residuals(draws=4, seed=4) + shift
    assert np.all((e >= lower[:, None]) & (e <= upper[:, None]))


# ---- exact truncated sampling, checked against scipy.stats ------------------------------------
@pytest.mark.parametrize("link", ["logit", "probit", "cloglog", "loglog", "cauchit"])
@pytest.mark.parametrize("lower, upper", [(-np.inf, -2.0), (-0.5, 0.7), (1.5, np.inf), (3.0, 4.0)])
def test_truncated_draws_are_the_truncated_quantiles(link, lower, upper):
    """The draw at ``u`` is the ``u``-quantile of F truncated to the interval (scipy.stats)."""
    dist = R.DISTS[link]()
    u = np.random.default_rng(9).random(5000)
    draws = sample_truncated(link, lower, upper, u)
    sl, su = dist.sf(lower), dist.sf(upper)
    assert np.allclose(draws, dist.isf(sl - u * (sl - su)), rtol=1e-9)
    assert stats.kstest(draws, lambda t: (sl - dist.sf(t)) / (sl - su)).pvalue > 1e-3


@pytest.mark.parametrize("link", ["logit", "probit", "cloglog", "loglog", "cauchit"])
def test_far_tail_draws_are_exact(link):
    """Intervals with probability 1e-12 in either tail match scipy's quantile functions."""
    dist = R.DISTS[link]()
    u = np.random.default_rng(5).random(1000)
    low_end = dist.ppf(1e-12)
    got = sample_truncated(link, -np.inf, low_end, u)
    assert np.allclose(got, dist.ppf(u * dist.cdf(low_end)), rtol=1e-9)
    high_end = dist.isf(1e-12)
    got = sample_truncated(link, high_end, np.inf, u)
    assert np.allclose(got, dist.isf((1 - u) * dist.sf(high_end)), rtol=1e-9)


def test_underflowing_intervals_are_solved_in_log_space():
    u = np.random.default_rng(6).random(200)
    # logistic lower tail: log F(t) = t - log1p(e^t), so t = -800 + log(u) to double precision.
    assert np.allclose(sample_truncated("logit", -np.inf, -800.0, u), -800.0 + np.log(u), rtol=1e-12)
    # normal lower tail: log Phi(t) = log(u) + log Phi(-40), checked with scipy's log_ndtr.
    t = sample_truncated("probit", -np.inf, -40.0, u)
    assert np.allclose(special.log_ndtr(t), np.log(u) + special.log_ndtr(-40.0), rtol=1e-10)
    assert np.all(t <= -40.0)
    # Gumbel-min upper tail: S(t) = exp(-e^t) underflows beyond t ~ 6.6; S(t) = (1 - u) S(7)
    # solves to t = log(e^7 - log1p(-u)) (closed form of the truncated inverse).
    got = sample_truncated("cloglog", 7.0, np.inf, u)
    assert np.allclose(got, np.log(np.exp(7.0) - np.log1p(-u)), rtol=1e-12)


def test_far_tail_rows_of_a_fit_give_finite_residuals():
    res = fit_simulated("logit", n=2000)
    extreme = np.array([-28.0, 0.0, 28.0])  # rows in the end categories get P ~ 1e-12
    lower, upper = res.error_bounds(thresholds=extreme)
    prob = ow.interval_probability("logit", lower, upper)
    assert prob.min() < 1e-11
    r = res.surrogate_residuals(seed=7, thresholds=extreme)
    assert np.all(np.isfinite(r)) and np.all((r >= lower) & (r <= upper))


# ---- reproducibility, shapes and bad input (our own rules) --------------------------------------
def test_seeds_reproduce_and_differ():
    res = fit_simulated("logit", n=500)
    a, b = res.surrogate_residuals(seed=11), res.surrogate_residuals(seed=11)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, res.surrogate_residuals(seed=12))
    assert a.shape == (500,)
    assert res.surrogate_residuals(draws=3, seed=11).shape == (500, 3)


@pytest.mark.parametrize("draws, error", [(0, ValueError), (-2, ValueError), (1.5, TypeError),
                                          ("2", TypeError), (True, TypeError)])
def test_bad_draws_are_refused(draws, error):
    res = fit_simulated("logit", n=300)
    with pytest.raises(error, match="draws"):
        res.surrogate_residuals(draws=draws)


def test_result_without_training_data_is_refused():
    X, y = R.simulate(300, BETA, CUTS)
    res = ow.fit("y ~ a + b", pd.DataFrame({"y": y, "a": X[:, 0], "b": X[:, 1]}), keep_data=False)
    with pytest.raises(ValueError, match="keep_data"):
        res.surrogate_residuals()
    with pytest.raises(ValueError, match="keep_data"):
        res.probability_scale_residuals()
    with pytest.raises(ValueError, match="keep_data"):
        res.residual_diagnostics()


@pytest.mark.parametrize("edited, words", [([1.0, 0.0, 2.0], "increasing"), ([0.0, 0.0, 1.0], "increasing"),
                                           ([0.0, np.nan, 1.0], "finite"), ([0.0, 1.0], "3 numbers")])
def test_bad_edited_thresholds_are_refused(edited, words):
    res = fit_simulated("logit", n=300)
    with pytest.raises(ValueError, match=words):
        res.surrogate_residuals(thresholds=edited)
    with pytest.raises(ValueError, match=words):
        res.probability_scale_residuals(thresholds=edited)


# ---- Li & Shepherd (2012): the probability-scale residual ---------------------------------------
def test_probability_scale_residual_definition_range_and_mean(simulated):
    link, res = simulated
    psr = res.probability_scale_residuals()
    dist = R.DISTS[link]()
    cuts = np.concatenate([[-np.inf], res.thresholds.to_numpy(), [np.inf]])
    eta = res.linear_predictor()
    y = res.training.y
    expected = dist.cdf(cuts[y] - eta) - dist.sf(cuts[y + 1] - eta)  # P(Y < y) - P(Y > y)
    assert np.allclose(psr, expected, atol=1e-12)
    assert np.all((psr > -1) & (psr < 1))
    assert abs(psr.mean()) < 5 * psr.std() / np.sqrt(len(psr))  # mean zero under a correct model


def test_probability_scale_residual_of_a_binary_response_is_observed_minus_fitted():
    """Li & Shepherd (2012): for a binary outcome the residual is ``y - P(Y = 1)``."""
    rng = np.random.default_rng(8)
    x = rng.normal(size=(3000, 2))
    y = (x @ [1.0, -0.7] + rng.logistic(size=3000) > 0.2).astype(int)
    res = ow.fit("y ~ a + b", pd.DataFrame({"y": y, "a": x[:, 0], "b": x[:, 1]}))
    p1 = LogisticRegression(C=np.inf, tol=1e-10, max_iter=1000).fit(x, y).predict_proba(x)[:, 1]
    assert np.allclose(res.probability_scale_residuals(), y - p1, atol=1e-6)

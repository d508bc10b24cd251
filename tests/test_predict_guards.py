"""Prediction on new rows: missing probabilities and the latent predictor.

Every expected probability comes from the model's definition written here with scipy
(McCullagh 1980): ``P(Y <= j | x) = F(theta_j - x'beta)``, F the logistic CDF
(``scipy.stats.logistic``), category probabilities the differences of the cumulative ones,
evaluated at the fit's own parameters read by name.
"""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

import ordwidgets as ow
from ordwidgets.core.exceptions import CrossingWarning, OrdinalDataError


def _frame(n=400, seed=0):
    """Four ordered grades from a logistic latent variable; ``v`` a factor of levels 0..4."""
    rng = np.random.default_rng(seed)
    v = np.arange(n) % 5
    df = pd.DataFrame({"x1": rng.normal(size=n), "v": v, "xp": np.exp(rng.normal(size=n))})
    latent = 0.8 * df.x1 + np.array([0.0, 0.3, -0.4, 0.6, 0.2])[v] + rng.logistic(size=n)
    df["y"] = np.searchsorted([-1.0, 0.4, 1.8], latent) + 1
    return df


def _reference_probabilities(res, eta):
    """Category probabilities of ``P(Y <= j) = F(theta_j - eta)`` with the logistic F (scipy)."""
    eta = np.asarray(eta, float)
    cum = stats.logistic.cdf(res.thresholds.to_numpy()[None, :] - eta[:, None])
    ends = np.ones((len(eta), 1))
    return np.diff(np.hstack([0 * ends, cum, ends]), axis=1)


def test_most_likely_is_missing_where_a_predictor_is_missing():
    df = _frame()
    res = ow.fit("y ~ x1", df)
    x1 = np.array([np.nan, -3.0, 0.0, 3.0])
    got = res.predict(pd.DataFrame({"x1": x1}), kind="most_likely")
    assert pd.isna(got.iloc[0])
    want = _reference_probabilities(res, res.coefficients["x1"] * x1[1:]).argmax(axis=1)
    assert got.iloc[1:].tolist() == [res.levels[k] for k in want]


def _nonparallel_fit(n=500, seed=3):
    """One predictor whose effect differs between the two cuts (it moves them apart)."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1.5, 1.5, size=n)  # the true cuts meet at x = -3.6, outside the data
    lat = rng.logistic(size=n)
    y = np.where(lat < -1 - 0.4 * x, 1, np.where(lat < 1 + 0.15 * x, 2, 3))
    return ow.fit("y ~ x", pd.DataFrame({"y": y, "x": x}), nonparallel=["x"])


def test_most_likely_is_missing_where_the_cuts_cross():
    res = _nonparallel_fit()
    theta, b = res.thresholds.to_numpy(), res.coefficients.to_numpy()  # x @ 1->2, x @ 2->3
    x = np.array([-40.0, 0.0, 40.0])
    cuts = theta[None, :] - x[:, None] * b[None, :]  # per-threshold cuts theta_j - x beta_j
    crossed = np.diff(cuts, axis=1)[:, 0] < 0
    assert crossed.any() and not crossed.all()  # the data must hold both kinds of row
    with pytest.warns(CrossingWarning):
        got = res.predict(pd.DataFrame({"x": x}), kind="most_likely")
    assert got[crossed].isna().all()
    cum = stats.logistic.cdf(cuts[~crossed])
    probs = np.diff(np.hstack([np.zeros((len(cum), 1)), cum, np.ones((len(cum), 1))]), axis=1)
    assert got[~crossed].tolist() == [res.levels[k] for k in probs.argmax(axis=1)]


def test_latent_is_refused_when_no_effect_is_parallel():
    res = _nonparallel_fit()
    with pytest.raises(OrdinalDataError, match=r"no single latent scale.*\('x'\)"):
        res.predict(pd.DataFrame({"x": [0.0, 1.0]}), kind="latent")


def test_latent_of_a_mixed_fit_holds_the_parallel_effects_only():
    df = _frame()
    df["g"] = (df.v > 2).astype(float)
    res = ow.fit("y ~ x1 + g", df, nonparallel=["g"])
    new = pd.DataFrame({"x1": [-1.0, 0.0, 2.0], "g": [0.0, 1.0, 1.0]})
    want = res.coefficients["x1"] * new.x1.to_numpy()  # x'beta of the parallel part, by hand
    np.testing.assert_allclose(res.predict(new, kind="latent").to_numpy(), want, rtol=1e-12)


def test_most_likely_of_a_random_intercept_fit_is_missing_where_a_predictor_is_missing():
    df = _frame().assign(grp=lambda d: np.arange(len(d)) % 10)
    res = ow.fit("y ~ x1", df, random_intercepts=["grp"])
    got = res.predict(pd.DataFrame({"x1": [np.nan, 0.0]}), kind="most_likely")
    assert pd.isna(got.iloc[0]) and got.iloc[1] in res.levels

"""Prediction on new rows: numeric factor levels, missing probabilities, the latent predictor
and infinite values.

Every expected probability comes from the model's definition written here with scipy
(McCullagh 1980): ``P(Y <= j | x) = F(theta_j - x'beta)``, F the logistic CDF
(``scipy.stats.logistic``), category probabilities the differences of the cumulative ones,
evaluated at the fit's own parameters read by name.
"""
import re
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import ordwidgets as ow
from ordwidgets.core.exceptions import CrossingWarning, DataWarning, OrdinalDataError, UnseenLevelError


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


def _factor_eta(res, x1, levels):
    """``x'beta`` with treatment dummies ``v[T.k]`` (level 0 the reference)."""
    beta = res.coefficients
    return beta["x1"] * np.asarray(x1, float) + np.array([beta.get(f"v[T.{k}]", 0.0) for k in levels])


@pytest.fixture(scope="module")
def factor_fits():
    """The same factor held as a categorical of integers and as an object column of integers."""
    df = _frame()
    as_categorical = df.assign(v=pd.Categorical(df.v))
    as_object = df.assign(v=df.v.astype(object))
    return {"categorical": ow.fit("y ~ x1 + v", as_categorical), "object": ow.fit("y ~ x1 + v", as_object)}


@pytest.mark.parametrize("fitted", ["categorical", "object"])
@pytest.mark.parametrize("dtype", ["int64", "float64", "object", "int8"])
def test_plain_numbers_in_a_factor_column_are_read_as_the_fitted_levels(factor_fits, fitted, dtype):
    res = factor_fits[fitted]
    levels = [0, 1, 2, 3, 4, 3]
    x1 = [0.0, 0.5, -1.0, 0.0, 2.0, 1.0]
    new = pd.DataFrame({"x1": x1, "v": pd.Series(levels).astype(dtype)})
    got = res.predict(new).to_numpy()
    np.testing.assert_allclose(got, _reference_probabilities(res, _factor_eta(res, x1, levels)),
                               rtol=1e-10, atol=1e-14)
    assert new["v"].dtype == np.dtype(dtype)  # the caller's frame is left as it was


def test_a_number_that_is_no_fitted_level_is_refused_by_column_and_value(factor_fits):
    res = factor_fits["categorical"]
    for value in (7, 3.5):
        with pytest.raises(UnseenLevelError, match=rf"column 'v' holds levels never seen in fitting: {value!r}"):
            res.predict(pd.DataFrame({"x1": [0.0], "v": [value]}))


def test_probability_difference_reads_numeric_factor_values_as_levels(factor_fits):
    res = factor_fits["categorical"]
    scenario, baseline = pd.DataFrame({"x1": [0.0], "v": [3]}), pd.DataFrame({"x1": [0.0], "v": [0]})
    got = res.probability_difference(scenario, baseline)["difference"].to_numpy()[: len(res.levels)]
    want = (_reference_probabilities(res, _factor_eta(res, [0.0], [3]))
            - _reference_probabilities(res, _factor_eta(res, [0.0], [0])))[0]
    np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-13)


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


@pytest.mark.parametrize("column,value,name", [("x1", np.inf, "x1"), ("x1", -np.inf, "x1"),
                                               ("xp", 0.0, "np.log(xp)")])
def test_infinite_design_values_give_missing_predictions_with_a_named_warning(column, value, name):
    df = _frame()
    res = ow.fit("y ~ x1 + np.log(xp)", df)
    new = pd.DataFrame({"x1": [0.5, 0.5], "xp": [2.0, 2.0]})
    new.loc[0, column] = value
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # numpy's own note on log(0)
        with pytest.warns(DataWarning, match=rf"infinite design values .*'{re.escape(name)}': 1"):
            got = res.predict(new).to_numpy()
        with pytest.warns(DataWarning, match=rf"'{re.escape(name)}'"):
            labels = res.predict(new, kind="most_likely")
    assert np.isnan(got[0]).all() and pd.isna(labels.iloc[0])
    beta = res.coefficients
    eta = beta["x1"] * 0.5 + beta["np.log(xp)"] * np.log(2.0)
    np.testing.assert_allclose(got[1], _reference_probabilities(res, [eta])[0], rtol=1e-10)


def test_most_likely_of_a_random_intercept_fit_is_missing_where_a_predictor_is_missing():
    df = _frame().assign(grp=lambda d: np.arange(len(d)) % 10)
    res = ow.fit("y ~ x1", df, random_intercepts=["grp"])
    got = res.predict(pd.DataFrame({"x1": [np.nan, 0.0]}), kind="most_likely")
    assert pd.isna(got.iloc[0]) and got.iloc[1] in res.levels


def test_prediction_does_formula_arithmetic_of_integer_columns_in_doubles():
    # I(u * 100) on a uint8 column wraps around in integer arithmetic (200 * 100 = 20000
    # > 255); the reference evaluates the term in doubles with numpy.
    rng = np.random.default_rng(4)
    n = 400
    u = rng.integers(0, 250, n).astype(np.uint8)
    latent = 3e-4 * (u.astype(float) * 100) + rng.logistic(size=n)
    df = pd.DataFrame({"u": u, "y": np.searchsorted([2.0, 4.0, 6.0], latent) + 1})
    res = ow.fit("y ~ I(u * 100)", df)
    eta = res.params[res.names.index("I(u * 100)")] * (u.astype(float) * 100)
    np.testing.assert_allclose(res.predict(df).to_numpy(), _reference_probabilities(res, eta), atol=1e-12)

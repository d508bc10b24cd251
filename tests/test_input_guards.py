"""Fitting inputs that used to give silent wrong answers: per-row Series read by position,
the response used as its own predictor, a random intercept of one group, integer
arithmetic that wraps around inside formula terms.

Numeric checks compare with independent fits: ``tests.reference.fit`` (the likelihood of
McCullagh 1980 eq. 2.3, P(Y <= j) = F(theta_j - x'beta), maximised by scipy.optimize) on
arrays built here with numpy, or the same fit given correctly aligned inputs.
"""
import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow
from ordwidgets.core.exceptions import ArgumentError, DataWarning

from . import reference as R


def frame(seed=0, n=240):
    """Rows with an index that is not 0..n-1, integer columns and a latent-variable response."""
    rng = np.random.default_rng(seed)
    x0, x1 = rng.normal(size=(2, n))
    site = rng.integers(1, 5, n)
    lat = 0.8 * x0 - 0.5 * x1 + 0.3 * site + rng.logistic(size=n)
    grade = np.digitize(lat, [-0.5, 0.8, 2.0])
    return pd.DataFrame({"x0": x0, "x1": x1, "site": site, "w": rng.uniform(0.5, 3.0, n), "grade": grade},
                        index=np.arange(n) + 1000)


def shuffled(series, seed=1):
    return series.sample(frac=1, random_state=seed)


# --- 1. per-row Series are matched by their labels -------------------------------------------

def test_shuffled_weights_series_is_aligned_on_the_index():
    df = frame()
    res = ow.fit("grade ~ x0 + x1", df, weights=shuffled(df["w"]))
    # reference: the likelihood maximised by scipy with each row's own weight
    params, loglik = R.fit(df[["x0", "x1"]].to_numpy(), df["grade"].to_numpy(), "logit", weights=df["w"].to_numpy())
    np.testing.assert_allclose(res.params, params, rtol=1e-5, atol=1e-7)
    assert res.loglik == pytest.approx(loglik, rel=1e-9)
    # an array keeps its positional meaning: the shuffled values as an array are another fit
    by_position = ow.fit("grade ~ x0 + x1", df, weights=shuffled(df["w"]).to_numpy())
    assert abs(by_position.loglik - loglik) > 1e-3


def test_weights_series_without_the_data_labels_is_refused():
    df = frame()
    foreign = pd.Series(df["w"].to_numpy(), index=[f"r{i}" for i in range(len(df))])
    with pytest.raises(ArgumentError, match=r"weights is a pandas Series without the labels of 240 of the 240 rows"):
        ow.fit("grade ~ x0 + x1", df, weights=foreign)
    repeated = pd.Series(df["w"].to_numpy(), index=np.r_[df.index[:-1], df.index[0]])
    with pytest.raises(ArgumentError, match="weights .* repeats labels"):
        ow.fit("grade ~ x0 + x1", df, weights=repeated)


def test_shuffled_cluster_series_is_aligned_on_the_index():
    df = frame(seed=2)
    labels = pd.Series(np.arange(len(df)) // 12, index=df.index)
    res = ow.fit("grade ~ x0 + x1", df, cluster=shuffled(labels))
    # reference: the same robust fit with the labels in the data's own order
    aligned = ow.fit("grade ~ x0 + x1", df, cluster=labels.to_numpy())
    np.testing.assert_allclose(res.cov, aligned.cov, rtol=1e-12)
    positional = ow.fit("grade ~ x0 + x1", df, cluster=shuffled(labels).to_numpy())
    assert not np.allclose(positional.cov, aligned.cov, rtol=1e-3)  # the check can tell them apart
    with pytest.raises(ArgumentError, match="cluster is a pandas Series without the labels"):
        ow.fit("grade ~ x0 + x1", df, cluster=labels.reset_index(drop=True))


def _tests(diagnostics):
    return diagnostics.tests[["statistic", "p_value"]].to_numpy(float)


def test_residual_x_series_is_aligned_on_the_fitted_rows():
    df = frame(seed=3)
    df.loc[df.index[:7], "x1"] = np.nan  # rows dropped: the fitted rows are a subset of the frame
    with pytest.warns(DataWarning, match="dropped 7 rows"):
        res = ow.fit("grade ~ x0 + x1", df)
    kept = df["x1"].notna().to_numpy()
    reference = res.residual_diagnostics(x=df["site"].to_numpy()[kept].astype(float), seed=4)
    for x in (shuffled(df["site"]), df["site"]):  # reordered, and the whole frame's column
        got = res.residual_diagnostics(x=x, seed=4)
        np.testing.assert_allclose(_tests(got), _tests(reference), rtol=1e-12, equal_nan=True)
    with pytest.raises(ArgumentError, match="x is a pandas Series without the labels of 233 of the 233 rows"):
        res.residual_diagnostics(x=df["site"].reset_index(drop=True), seed=4)


# --- 2. the response is never its own predictor --------------------------------------------

@pytest.mark.parametrize("options, where", [
    ({"formula": "grade ~ x0 + grade"}, "in the formula"),
    ({"formula": "grade ~ x0 + I(grade ** 2)"}, "in the formula"),
    ({"formula": "grade ~ x0 + x1", "scale_by": ["grade"]}, "in scale_by="),
    ({"formula": "grade ~ x0 + x1", "nonparallel": ["grade"]}, "in nonparallel="),
    ({"formula": "grade ~ x0 + x1", "random_intercepts": ["grade"]}, "in random_intercepts="),
])
def test_response_as_a_predictor_is_refused(options, where):
    df = frame()
    formula = options.pop("formula")
    with pytest.raises(ow.OrdinalDataError, match=rf"the response 'grade' is also used as a predictor \({where}\)"):
        ow.fit(formula, df, **options)


# --- 3. a random intercept needs groups -------------------------------------------------------

def test_random_intercept_of_one_group_is_refused():
    df = frame().assign(block=7)
    with pytest.raises(ow.OrdinalDataError, match="grouping column 'block' has 1 group"):
        ow.fit("grade ~ x0 + x1", df, random_intercepts=["block"])
    # groups whose rows all weigh zero do not count: one group is left
    df["block"] = np.where(np.arange(len(df)) < 40, 1, 2)
    df["w"] = np.where(df["block"] == 1, 0.0, 1.0)
    with pytest.raises(ow.OrdinalDataError, match="grouping column 'block' has 1 group"):
        ow.fit("grade ~ x0 + x1", df, weights="w", random_intercepts=["block"])


def test_random_intercept_of_few_groups_warns():
    df = frame()
    with pytest.warns(DataWarning, match="grouping column 'site' has only 4 groups"):
        ow.fit("grade ~ x0 + x1", df, random_intercepts=["site"])


# --- 4. integer columns do not wrap around inside formula terms ------------------------------

def _reference_fit(columns, y):
    """``reference.fit`` on float columns computed here with numpy, each divided by its
    largest magnitude for the generic optimiser; dividing a column by c multiplies its
    coefficient by c (the likelihood depends on x'beta only), so the coefficients are divided
    back."""
    X = np.column_stack(columns)
    scale = np.abs(X).max(axis=0)
    params, loglik = R.fit(X / scale, y, "logit")
    m = len(params) - X.shape[1]
    return np.r_[params[:m], params[m:] / scale], loglik


@pytest.mark.parametrize("dtype, term, compute", [
    (np.uint8, "I(u * 100)", lambda u: u * 100.0),     # 600 > 255
    (np.int8, "I(u ** 3)", lambda u: u ** 3.0),        # 216 > 127
    (np.int16, "u:k", lambda u: u * 3000.0 * u),       # 6 * 18000 > 32767
])
def test_integer_arithmetic_in_terms_is_done_in_floats(dtype, term, compute):
    df = frame(seed=5)
    u = np.arange(len(df)) % 7
    df["u"] = u.astype(dtype)
    df["k"] = (u * 3000).astype(dtype)
    res = ow.fit(f"grade ~ x1 + {term}", df)
    params, loglik = _reference_fit([df["x1"].to_numpy(), compute(u.astype(float))], df["grade"].to_numpy())
    np.testing.assert_allclose(res.params, params, rtol=1e-5, atol=1e-12)
    assert res.loglik == pytest.approx(loglik, rel=1e-9)


def test_large_int64_squares_are_done_in_floats():
    df = frame(seed=6)
    v = (np.arange(len(df)) % 7 + 1) * 10 ** 9  # v ** 2 up to 4.9e19 > int64's 9.2e18
    df["v"] = v.astype(np.int64)
    res = ow.fit("grade ~ I(v ** 2) + x1", df)
    params, loglik = _reference_fit([v.astype(float) ** 2, df["x1"].to_numpy()], df["grade"].to_numpy())
    np.testing.assert_allclose(res.params, params, rtol=1e-5, atol=1e-26)
    assert res.loglik == pytest.approx(loglik, rel=1e-9)


def test_integer_factor_keeps_its_level_labels():
    df = frame(seed=7)
    res = ow.fit("grade ~ C(site) + I(x0 * 2)", df)
    assert [n for n in res.coef_names if n.startswith("C(site)")] == ["C(site)[T.2]", "C(site)[T.3]", "C(site)[T.4]"]
    with pytest.warns(DataWarning, match="integer column 'site' is both a factor"):
        ow.fit("grade ~ C(site) + I(site * x0)", df.assign(site=df["site"].astype(np.int8)))

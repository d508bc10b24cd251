"""Cluster-robust and sampling-weight covariances against independent computations."""
import numpy as np
import pandas as pd
import pytest
from scipy import differentiate, stats

import ordwidgets as ow
from ordwidgets.core.sandwich import sandwich_covariance

from . import reference as R

LINKS = list(ow.link_names())


def data(seed=0, n=400, n_sites=25):
    rng = np.random.default_rng(seed)
    site = rng.integers(0, n_sites, n)
    X = rng.normal(size=(n, 2))
    lat = X @ [0.7, -0.4] + rng.normal(0, 0.8, n_sites)[site] + rng.logistic(size=n)
    y = np.digitize(lat, [-1.0, 0.5, 2.0])
    w = rng.uniform(0.5, 3.0, n)
    df = pd.DataFrame({"x0": X[:, 0], "x1": X[:, 1], "site": site, "w": w,
                       "grade": pd.Categorical(y, categories=range(4), ordered=True)})
    return df, X, y, site, w


def cluster_score_sums(params, X, y, site, link, weights=None):
    """Per-cluster score sums: scipy.differentiate of each cluster's log-likelihood
    (reference.loglik written from McCullagh 1980), independent of our row scores."""
    out = []
    for s in np.unique(site):
        idx = site == s
        wi = None if weights is None else weights[idx]
        grad = []
        for j in range(len(params)):
            def f(t, j=j):
                vals = []
                for tt in np.atleast_1d(t).ravel():
                    x = params.copy()
                    x[j] = tt
                    vals.append(R.loglik(x, X[idx], y[idx], 3, link, wi))
                return np.reshape(vals, np.shape(t))
            grad.append(differentiate.derivative(f, params[j], initial_step=1e-2).df)
        out.append(grad)
    return np.array(out)


@pytest.mark.parametrize("link", ["logit", "cloglog"])
def test_cluster_covariance_from_independent_cluster_scores(link):
    """Liang & Zeger (1986) sandwich C M C, M = G/(G-1) sum_g s_g s_g', with C the inverse of
    reference.hessian (scipy.differentiate) and s_g from the cluster log-likelihoods."""
    df, X, y, site, _ = data()
    res = ow.fit("grade ~ x0 + x1", df, link=link, cluster="site")
    assert res.covariance_type == "cluster" and "cluster-robust" in res._repr_html_()
    C = np.linalg.inv(-R.hessian(res.params, X, y, 3, link))
    S = cluster_score_sums(res.params, X, y, site, link)
    G = len(S)
    V = C @ (G / (G - 1) * S.T @ S) @ C
    np.testing.assert_allclose(res.cov, V, rtol=1e-5, atol=1e-5 * np.abs(V).max())  # numerical reference
    plain = ow.fit("grade ~ x0 + x1", df, link=link)
    np.testing.assert_allclose(res.params, plain.params)
    assert plain.covariance_type == "model"


def test_sampling_weights_ignore_their_scale():
    """Binder (1983): estimates as with frequency weights, SEs unchanged by rescaling weights."""
    df, *_ = data(seed=1)
    a = ow.fit("grade ~ x0 + x1", df, weights="w", weight_kind="sampling")
    b = ow.fit("grade ~ x0 + x1", df.assign(w=df["w"] * 37.0), weights="w", weight_kind="sampling")
    f = ow.fit("grade ~ x0 + x1", df, weights="w")
    f37 = ow.fit("grade ~ x0 + x1", df.assign(w=df["w"] * 37.0), weights="w")
    assert a.covariance_type == "sampling"
    np.testing.assert_allclose(a.params, f.params, atol=1e-8)
    np.testing.assert_allclose(a.std_errors, b.std_errors, rtol=1e-6)
    np.testing.assert_allclose(f37.std_errors, f.std_errors / np.sqrt(37.0), rtol=1e-6)  # frequency: shrink


def test_sampling_weights_sandwich_from_row_scores():
    """Every row its own unit: M = n/(n-1) sum_i w_i^2 s_i s_i' (s_i by scipy.differentiate)."""
    df, X, y, _, w = data(seed=2, n=150)
    res = ow.fit("grade ~ x0 + x1", df, weights="w", weight_kind="sampling")
    C = np.linalg.inv(-R.hessian(res.params, X, y, 3, "logit", w))
    S = cluster_score_sums(res.params, X, y, np.arange(len(y)), "logit", w)
    V = C @ (len(S) / (len(S) - 1) * S.T @ S) @ C
    np.testing.assert_allclose(res.cov, V, rtol=1e-5, atol=1e-5 * np.abs(V).max())  # numerical reference


def test_extended_fit_cluster_covariance():
    """Scale effects: the differenced row scores sum to zero at the optimum and give a
    symmetric positive definite sandwich."""
    df, *_ = data(seed=3)
    res = ow.fit("grade ~ x0 + x1", df, scale_by=["x1"], cluster="site")
    ev = np.linalg.eigvalsh(res.cov)
    assert res.covariance_type == "cluster" and np.all(ev > 0)


def test_sandwich_pure_function_and_refusals():
    s = np.array([[1.0, 0.0], [0.0, 2.0], [-1.0, -2.0]])
    V, G = sandwich_covariance(s, np.eye(2), clusters=["a", "a", "b"])
    tot = np.array([[1.0, 2.0], [-1.0, -2.0]])
    np.testing.assert_allclose(V, 2.0 * tot.T @ tot)
    assert G == 2
    df, *_ = data()
    with pytest.raises(ow.OrdinalDataError, match="weight_kind"):
        ow.fit("grade ~ x0", df, weights="w", weight_kind="survey")
    with pytest.raises(ow.OrdinalDataError, match="'nosuch'"):
        ow.fit("grade ~ x0", df, cluster="nosuch")
    with pytest.raises(ow.OrdinalDataError, match="cluster"):
        ow.fit("grade ~ x0", df, random_intercepts=["site"], cluster="site")


def test_likelihood_ratio_tests_and_profiles_refuse_or_warn_with_clusters():
    """With a cluster-robust covariance or sampling weights, likelihood-ratio statistics
    assume independent rows (common practice, no source: the statistic is chi-squared only
    for independent rows), so the comparison and profile intervals are refused naming why,
    the term tests give Wald only (with the robust covariance) and the proportional-odds
    tests warn."""
    df, *_ = data()
    plain = ow.fit("grade ~ x0 + x1", df)
    for kwargs, why in (({"cluster": "site"}, "cluster='site'"), ({"weights": "w", "weight_kind": "sampling"},
                                                                  "sampling weights")):
        small, big = ow.fit("grade ~ x0", df, **kwargs), ow.fit("grade ~ x0 + x1", df, **kwargs)
        with pytest.raises(ow.ComparisonError, match="independent rows"):
            ow.compare(small, big)
        with pytest.raises(ow.OrdinalDataError, match=f"(?s){why}.*independent rows"):
            big.intervals(method="profile")
        wald = big.intervals()  # Wald intervals use the robust covariance
        se = np.sqrt(np.diag(big.cov))
        np.testing.assert_allclose(wald["upper"] - wald["lower"], 2 * stats.norm.isf(0.025) * se, rtol=1e-9)
        tests = big.term_tests()
        assert tests["lr_p_value"].isna().all() and tests["note"].str.contains("independent rows").all()
        assert tests["wald_p_value"].notna().all()
        with pytest.warns(ow.DataWarning, match="independent rows"):
            po = big.proportional_odds_test()
        assert po["note"].str.contains("independent rows").all()
    mixed = ow.fit("grade ~ x0 + x1", df, random_intercepts=["site"])
    with pytest.raises(ow.ComparisonError, match="independent rows"):
        ow.compare(ow.fit("grade ~ x0 + x1", df, cluster="site"), mixed)
    assert ow.compare(plain, mixed).loc["larger", "p_value"] < 0.05  # model-based fits still compare

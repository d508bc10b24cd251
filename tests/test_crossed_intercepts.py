"""Several grouping columns (nested or crossed) by the Laplace approximation."""
import numpy as np
import pandas as pd
import pytest
from scipy import differentiate, optimize, stats

import ordwidgets as ow
from ordwidgets.core.crossed_likelihood import CrossedRows, laplace_sums
from ordwidgets.core.grouped_likelihood import GroupedRows, marginal_sums

from . import reference_grouped as RG
from .reference import DISTS

M = 3


def crossed(n=120, sizes=(6, 3), sds=(1.0, 0.6), seed=2, link="logit"):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 2))
    codes = np.column_stack([rng.integers(0, k, n) for k in sizes])
    lat = X @ [0.7, -0.3] + sum(rng.normal(0, s, k)[codes[:, c]] for c, (k, s) in enumerate(zip(sizes, sds)))
    y = np.digitize(lat + DISTS[link].rvs(size=n, random_state=rng), [-1.0, 0.5, 2.0])
    return X, y, codes, rng.integers(1, 3, n).astype(float)


def reference_laplace(params, X, y, codes, link, w):
    """Tierney & Kadane (1986) Laplace approximation built with scipy: the mode of
    h(z) = sum w log P - z'z/2 by scipy.optimize.minimize, -h'' by scipy.differentiate.hessian."""
    F = RG.CDFS[link]  # closed forms, checked against scipy.stats in test_random_intercepts
    sizes = codes.max(axis=0) + 1
    off = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    theta = np.concatenate([[-np.inf], params[:M], [np.inf]])
    beta, sig = params[M:M + 2], params[M + 2:]

    def h(z):
        z = np.asarray(z)
        shift = X @ beta + sum(sig[c] * z[..., off[c] + codes[:, c]] for c in range(len(sig)))
        P = F(theta[y + 1] - shift) - F(theta[y] - shift)
        return (w * np.log(P)).sum(axis=-1) - 0.5 * (z ** 2).sum(axis=-1)

    zhat = optimize.minimize(lambda z: -h(z), np.zeros(sizes.sum()), method="BFGS", options={"gtol": 1e-10}).x
    Hm = differentiate.hessian(lambda z: h(np.moveaxis(z, 0, -1)), zhat).ddf
    return h(zhat) - 0.5 * np.linalg.slogdet(-Hm)[1]


@pytest.mark.parametrize("link", ["logit", "cloglog", "cauchit"])
def test_laplace_against_scipy_construction(link):
    X, y, codes, w = crossed(link=link)
    rows, _ = CrossedRows.from_rows(X, y, codes, M + 1, weights=w)
    par = np.array([-1.0, 0.4, 2.0, 0.6, -0.3, 0.9, 0.5])
    assert laplace_sums(rows, link, par, order=0).loglik == pytest.approx(
        reference_laplace(par, X, y, codes, link, w), abs=1e-6)


@pytest.mark.parametrize("link", ["logit", "probit", "loglog"])
def test_laplace_gradient_exact(link):
    """Analytic gradient (mode and log-determinant moving) against scipy.differentiate."""
    X, y, codes, w = crossed(link=link)
    rows, _ = CrossedRows.from_rows(X, y, codes, M + 1, weights=w)
    par = np.array([-1.0, 0.4, 2.0, 0.6, -0.3, 0.9, 0.5])
    grad = laplace_sums(rows, link, par).grad
    for j in range(len(par)):
        def f(t, j=j):
            vals = []
            for tt in np.atleast_1d(t).ravel():
                x = par.copy()
                x[j] = tt
                vals.append(laplace_sums(rows, link, x, order=0).loglik)
            return np.reshape(vals, np.shape(t))
        num = differentiate.derivative(f, par[j], initial_step=1e-2).df
        assert grad[j] == pytest.approx(num, abs=1e-6 * max(1, abs(num)))


def test_one_column_laplace_is_the_one_point_quadrature():
    X, y, codes, w = crossed()
    a, _ = CrossedRows.from_rows(X, y, codes[:, :1], M + 1, weights=w)
    b, _ = GroupedRows.from_rows(X, y, codes[:, 0], M + 1, weights=w)
    par = np.array([-1.0, 0.4, 2.0, 0.6, -0.3, 0.9])
    la, qb = laplace_sums(a, "probit", par), marginal_sums(b, "probit", par, points=1, order=1)
    assert la.loglik == pytest.approx(qb.loglik, abs=1e-9)
    np.testing.assert_allclose(la.grad, qb.grad, atol=1e-8)


def test_crossed_fit_is_a_stationary_point_of_the_reference():
    """At ow.fit's estimates the scipy-built Laplace likelihood has the same value and a
    zero gradient (central differences of the reference, step 1e-3: the reference's own inner
    optimisation and numerical Hessian carry noise of about 1e-7 in its value, which a step of 1e-4
    turns into gradient noise of 1e-3; the truncation error at 1e-3 is of order 1e-6)."""
    X, y, codes, w = crossed(n=150, sizes=(5, 3))
    df = pd.DataFrame({"x0": X[:, 0], "x1": X[:, 1], "rater": codes[:, 0], "year": codes[:, 1], "w": w,
                       "grade": pd.Categorical(y, categories=range(M + 1), ordered=True)})
    res = ow.fit("grade ~ x0 + x1", df, weights="w", random_intercepts=["rater", "year"])
    assert res.converged and res.options["quadrature"] == 1
    est = np.concatenate([res.params, res.sds])
    ref = lambda v: reference_laplace(v, X, y, codes, "logit", w)  # noqa: E731
    assert res.loglik == pytest.approx(ref(est), abs=1e-6)
    h = 1e-3
    grad = [(ref(est + h * e) - ref(est - h * e)) / (2 * h) for e in np.eye(len(est))]
    assert np.max(np.abs(grad)) < 1e-3


def test_nested_fit_outputs():
    rng = np.random.default_rng(8)
    n, districts, per = 1600, 8, 5
    district = rng.integers(0, districts, n)
    inspector = district * per + rng.integers(0, per, n)  # inspectors nested in districts
    x = rng.normal(size=n)
    lat = 0.6 * x + rng.normal(0, 0.5, districts)[district] + rng.normal(0, 0.9, districts * per)[inspector]
    y = np.digitize(lat + rng.logistic(size=n), [-1, 0.5, 2])
    df = pd.DataFrame({"x": x, "district": district, "inspector": inspector,
                       "grade": pd.Categorical(y, ordered=True)})
    res = ow.fit("grade ~ x", df, random_intercepts=["district", "inspector"])
    plain = ow.fit("grade ~ x", df)
    vc = res.variance_components
    assert list(vc.index) == ["district", "inspector"] and list(vc["n_groups"]) == [8, 40]
    assert np.all(vc["lower"] <= vc["sd"]) and np.all(vc["sd"] <= vc["upper"])
    assert len(res.group_effects("inspector")) == 40 and res.group_effects("district")["n_rows"].sum() == n
    out = ow.compare(plain, res)
    stat = 2 * (res.loglik - plain.loglik)
    # binomial mixture of chi2_0, chi2_1, chi2_2 (Self & Liang 1987, uncorrelated SDs)
    assert out.loc["larger", "p_value"] == pytest.approx(0.5 * stats.chi2.sf(stat, 1) + 0.25 * stats.chi2.sf(stat, 2))

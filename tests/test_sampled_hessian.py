"""Sampled Hessians far from the maximum, checked against outside references.

Large parallel fits take their first Newton steps with the effect blocks of the Hessian
from every fourth row (the log-likelihood and gradient stay exact).  What must hold:

* the sampled blocks equal the Hessian of the independent likelihood of
  ``tests/reference.py`` (McCullagh 1980, eq. 2.3; scipy.differentiate) on the sampled rows
  with weight 4, and everything else equals it on all rows;
* the Newton iteration never stops on, nor returns, a rough Hessian: the outcome's Hessian
  is the exact one at the returned point (the closed form of a logistic regression's
  Hessian), whatever the rough one was, and the maximum is scipy.optimize's;
* a fit large enough to use the sample gives the maximum of the reference likelihood
  (scipy.optimize) and its standard errors.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, special

import ordwidgets as ow
from ordwidgets.core import optimize as newton
from ordwidgets.core import sorted_design
from ordwidgets.core.engine import closed_form_thresholds
from ordwidgets.core.objective import sort_by_category, sorted_standardised
from ordwidgets.core.sorted_design import SortedDesign

from . import reference as R


def _design(n=600, seed=3, weighted=False):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 3))
    y = np.digitize(X @ [0.8, -0.4, 0.3] + rng.logistic(size=n), [-1.0, 0.2, 1.1])
    w = rng.integers(0, 4, n).astype(float) if weighted else None
    order, bounds = sort_by_category(y, 4)
    ws = None if w is None else w[order]
    cols = sorted_standardised(X, order, bounds, ws)
    return SortedDesign(cols.X, bounds, ws), cols.X, y[order], ws


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("link", ["logit", "probit", "cloglog"])
def test_sampled_blocks_equal_the_reference_hessian_of_the_sampled_rows(monkeypatch, link, weighted):
    monkeypatch.setattr(sorted_design, "SAMPLED_HESSIAN_ROWS", 100)
    design, X, y, w = _design(weighted=weighted)
    K = design.hessian_sample
    assert K == sorted_design.HESSIAN_SAMPLE > 1
    params = np.r_[closed_form_thresholds(link, design.counts()) * 1.1, [0.5, -0.3, 0.2]]
    ll, g, H = design.sums(link, params, hessian_sample=K)
    m = 3
    assert ll == pytest.approx(R.loglik(params, X, y, m, link, w), rel=1e-12)
    np.testing.assert_allclose(g, R.gradient(params, X, y, m, link, w), atol=1e-6 * len(y))
    full = R.hessian(params, X, y, m, link, w)
    # every K-th row of each category block (one segment per category here), weight K
    rows = np.concatenate([np.arange(design.bounds[k], design.bounds[k + 1], K) for k in range(4)])
    wk = K * (np.ones(len(rows)) if w is None else w[rows])
    sampled = R.hessian(params, X[rows], y[rows], m, link, wk)
    tol = dict(rtol=1e-5, atol=1e-5 * len(y))
    np.testing.assert_allclose(H[:m, :m], full[:m, :m], **tol)  # thresholds: all rows
    np.testing.assert_allclose(H[m:, :], sampled[m:, :], **tol)  # effects: the sample
    np.testing.assert_allclose(H[:m, m:], sampled[:m, m:], **tol)
    assert not np.allclose(sampled[m:, m:], full[m:, m:], rtol=1e-3)  # the sample is a real one


def test_small_designs_refuse_a_sampled_hessian():
    design, *_ = _design(n=200)
    assert design.hessian_sample == 1
    with pytest.raises(ValueError, match="exact Hessians only"):
        design.sums("logit", np.r_[-1.0, 0.0, 1.0, 0.0, 0.0, 0.0], hessian_sample=4)


def _logistic_problem(seed=0):
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(400), rng.normal(size=(400, 2))])
    y = (rng.random(400) < special.expit(X @ [0.3, 1.0, -0.7])).astype(float)

    def loglik(b):
        eta = X @ b
        return y @ eta - np.logaddexp(0.0, eta).sum()

    def evaluate(b, order, rough=False):
        p = special.expit(X @ b)
        g = X.T @ (y - p)
        H = -(X * (p * (1 - p))[:, None]).T @ X
        if rough:  # a deliberately poor Hessian: the iteration must not trust it
            H = 1.7 * H + np.diag(np.diag(H)) * 0.5
        return loglik(b), g, H

    return X, y, loglik, evaluate


@pytest.mark.parametrize("max_iter", [100, 2])
def test_newton_returns_the_exact_hessian_whatever_the_rough_one(max_iter):
    X, y, loglik, evaluate = _logistic_problem()
    out = newton.newton_maximize(evaluate, np.zeros(3), feasible=lambda b: True, max_iter=max_iter,
                                 rough_above=0.0)  # every step taken with a rough Hessian
    p = special.expit(X @ out.params)  # closed form of the logistic Hessian: -X' diag(p(1-p)) X
    np.testing.assert_allclose(out.hess, -(X * (p * (1 - p))[:, None]).T @ X, rtol=1e-12)
    if max_iter == 2:
        assert out.status == "max_iter"
        return
    assert out.status == "converged" and out.decrement < 1e-12
    best = optimize.minimize(lambda b: -loglik(b), np.zeros(3), method="BFGS", options={"gtol": 1e-10}).x
    np.testing.assert_allclose(out.params, best, atol=1e-6)


def test_a_fit_taking_sampled_steps_reaches_the_reference_maximum(monkeypatch):
    monkeypatch.setattr(sorted_design, "SAMPLED_HESSIAN_ROWS", 500)  # the large-fit path, on fewer rows
    X, y = R.simulate(2_500, [0.6, -0.4], [-1.0, 0.3, 1.2], seed=5)
    df = pd.DataFrame({"a": X[:, 0], "b": X[:, 1], "grade": y})
    calls = []
    real = SortedDesign.sums

    def spy(self, link, params, *, order=2, hessian_sample=1):
        calls.append(hessian_sample)
        return real(self, link, params, order=order, hessian_sample=hessian_sample)

    monkeypatch.setattr(SortedDesign, "sums", spy)
    res = ow.fit("grade ~ a + b", df)
    assert max(calls) == sorted_design.HESSIAN_SAMPLE and calls[-1] == 1  # sampled first, exact last
    params, ll = R.fit(X, y, "logit")
    assert res.loglik == pytest.approx(ll, abs=1e-6)
    np.testing.assert_allclose(res.params, params, atol=1e-6)
    se = np.sqrt(np.diag(np.linalg.inv(-R.hessian(params, X, y, 3, "logit"))))
    np.testing.assert_allclose(np.sqrt(np.diag(res.cov)), se, rtol=1e-5)

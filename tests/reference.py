"""Independent reference fits used by the tests.

Written from the published likelihood of the cumulative link model (McCullagh 1980, J. R.
Statist. Soc. B 42:109-142, eq. 2.3): ``l = sum_i log{F(theta_{y_i} - x_i'beta) -
F(theta_{y_i - 1} - x_i'beta)}``.  It uses only scipy.stats distributions, scipy.optimize
and scipy.differentiate, none of ordwidgets' code, so agreement is a real check.
"""
from __future__ import annotations

import numpy as np
from scipy import differentiate, optimize, stats

DISTS = {
    "logit": stats.logistic,
    "probit": stats.norm,
    "cloglog": stats.gumbel_l,  # F(t) = 1 - exp(-exp(t))
    "loglog": stats.gumbel_r,   # F(t) = exp(-exp(-t))
    "cauchit": stats.cauchy,
}


def loglik(params, X, y, m, link, weights=None):
    """Log-likelihood at ``params = [theta_1..theta_m, beta]`` by plain CDF differences."""
    F = DISTS[link].cdf
    theta = np.concatenate([[-np.inf], params[:m], [np.inf]])
    eta = X @ params[m:] if X.shape[1] else np.zeros(len(y))
    p = F(theta[y + 1] - eta) - F(theta[y] - eta)
    with np.errstate(divide="ignore"):
        lp = np.log(p)
    return float(lp.sum() if weights is None else weights @ lp)


def _unpack(z, m):
    theta = np.cumsum(np.concatenate([[z[0]], np.exp(z[1:m])]))
    return np.concatenate([theta, z[m:]])


def fit(X, y, link, weights=None):
    """Maximum-likelihood fit with a generic optimiser (BFGS, then a Newton polish).

    Thresholds are parameterised as a first value plus log increments so the optimiser is
    unconstrained; the answer is polished with Newton steps whose derivatives come from
    scipy.differentiate (not from ordwidgets).
    """
    X = np.asarray(X, float)
    y = np.asarray(y)
    m = int(y.max())
    counts = np.bincount(y, weights=weights, minlength=m + 1)
    cum = np.cumsum(counts)[:-1] / counts.sum()
    theta0 = DISTS[link].ppf(cum)
    z0 = np.concatenate([[theta0[0]], np.log(np.diff(theta0)), np.zeros(X.shape[1])])
    obj = lambda z: -loglik(_unpack(z, m), X, y, m, link, weights)  # noqa: E731
    z = optimize.minimize(obj, z0, method="BFGS", options={"gtol": 1e-8, "maxiter": 5000}).x
    params = _unpack(z, m)
    H = hessian(params, X, y, m, link, weights)
    for _ in range(6):  # Newton polish in the natural parameters (Hessian held fixed)
        params = params - np.linalg.solve(H, gradient(params, X, y, m, link, weights))
    return params, loglik(params, X, y, m, link, weights)


def _batched(params, X, y, m, link, weights):
    """The same log-likelihood for a batch of parameter vectors (columns of ``params``)."""
    flat = params.reshape(params.shape[0], -1)
    F = DISTS[link].cdf
    inf = np.full((1, flat.shape[1]), np.inf)
    theta = np.concatenate([-inf, flat[:m], inf])
    eta = X @ flat[m:] if X.shape[1] else 0.0
    with np.errstate(divide="ignore"):
        lp = np.log(F(theta[y + 1] - eta) - F(theta[y] - eta))
    out = lp.sum(axis=0) if weights is None else weights @ lp
    return out.reshape(params.shape[1:])


def gradient(params, X, y, m, link, weights=None):
    """Gradient of the reference log-likelihood by scipy.differentiate.jacobian."""
    f = lambda p: _batched(p, X, y, m, link, weights)  # noqa: E731
    return differentiate.jacobian(f, np.asarray(params, float), initial_step=0.1).df


def hessian(params, X, y, m, link, weights=None):
    """Hessian of the reference log-likelihood by scipy.differentiate.hessian."""
    f = lambda p: _batched(p, X, y, m, link, weights)  # noqa: E731
    return differentiate.hessian(f, np.asarray(params, float), initial_step=0.1).ddf


def simulate(n, beta, cuts, link="logit", seed=0, X=None):
    """Latent-variable simulation ``y* = x'beta + e``, ``y = #{cuts < y*}``."""
    rng = np.random.default_rng(seed)
    if X is None:
        X = rng.normal(size=(n, len(beta)))
    e = DISTS[link].rvs(size=n, random_state=rng)
    latent = X @ np.asarray(beta, float) + e
    return X, np.searchsorted(np.asarray(cuts, float), latent)

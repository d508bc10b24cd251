"""Independent reference for random-intercept cumulative link models.

Written from the model of Hedeker & Gibbons (1994, Biometrics 50:933-944): the likelihood of
group ``g`` is ``int prod_{i in g} P_i(u)^{w_i} phi(u; 0, sigma^2) du`` with
``P_i(u) = F(theta_{y_i} - x_i'beta - u) - F(theta_{y_i - 1} - x_i'beta - u)``.  The integral
is done by ``scipy.integrate.quad`` (adaptive Gauss-Kronrod) after scaling by the integrand's
peak, and the maximum by ``scipy.optimize.minimize``.  The CDFs are the closed forms written
with scipy.special (the scalar integrand is called thousands of times; scipy.stats' per-call
overhead made the reference slow), checked against scipy.stats in tests; none of ordwidgets'
code is used.
"""
from __future__ import annotations

import numpy as np
from scipy import integrate, optimize, special

from .reference import DISTS

CDFS = {
    "logit": special.expit,
    "probit": special.ndtr,
    "cloglog": lambda t: -np.expm1(-np.exp(t)),
    "loglog": lambda t: np.exp(-np.exp(-t)),
    "cauchit": lambda t: 0.5 + np.arctan(t) / np.pi,
}
_LOG_SQRT_2PI = 0.5 * np.log(2 * np.pi)


def group_logliks(params, X, y, groups, m, link, weights=None):
    """Per-group marginal log-likelihoods at ``[theta, beta, sigma]`` by quadrature."""
    F = CDFS[link]
    theta = np.concatenate([[-np.inf], params[:m], [np.inf]])
    beta, sigma = params[m:-1], abs(params[-1])
    w = np.ones(len(y)) if weights is None else np.asarray(weights, float)
    out = []
    for g in np.unique(groups):
        idx = groups == g
        eta, yy, ww = X[idx] @ beta, y[idx], w[idx]

        def logf(z):
            p = F(theta[yy + 1] - eta - sigma * z) - F(theta[yy] - eta - sigma * z)
            with np.errstate(divide="ignore"):
                return float(ww @ np.log(p)) - 0.5 * z * z - _LOG_SQRT_2PI

        peak = optimize.minimize_scalar(lambda z: -logf(z), bounds=(-12, 12), method="bounded",
                                        options={"xatol": 1e-10})
        top = -peak.fun
        val, _ = integrate.quad(lambda z: np.exp(logf(z) - top), -14, 14, points=[peak.x], limit=400,
                                epsabs=0, epsrel=1e-11)
        out.append(top + np.log(val))
    return np.array(out)


def loglik(params, X, y, groups, m, link, weights=None):
    return float(group_logliks(params, X, y, groups, m, link, weights).sum())


def fit(X, y, groups, m, link, start, weights=None, fixed_sigma=None):
    """Maximise the quadrature log-likelihood (BFGS, numerical gradient) from ``start``.

    Thresholds are parametrised by the first one and log-gaps, so they stay ordered.
    With ``fixed_sigma`` the SD is held there (profile likelihood).
    """
    def unpack(v):
        theta = np.cumsum(np.concatenate([[v[0]], np.exp(v[1:m])]))
        rest = v[m:]
        if fixed_sigma is not None:
            rest = np.append(rest, fixed_sigma)
        return np.concatenate([theta, rest])

    s = np.asarray(start, float)
    v0 = np.concatenate([[s[0]], np.log(np.diff(s[:m])), s[m:] if fixed_sigma is None else s[m:-1]])
    res = optimize.minimize(lambda v: -loglik(unpack(v), X, y, groups, m, link, weights), v0, method="BFGS",
                            options={"gtol": 1e-7})
    est = unpack(res.x)
    est[-1] = abs(est[-1])
    return est, -res.fun


def simulate(n, n_groups, beta, cuts, sigma, link="logit", seed=0):
    """Rows ``(X, y, groups)`` from the model, with the true group effects."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, len(beta)))
    groups = rng.integers(0, n_groups, n)
    u = rng.normal(0.0, sigma, n_groups)
    latent = X @ np.asarray(beta) + u[groups] + DISTS[link].rvs(size=n, random_state=rng)
    return X, np.digitize(latent, cuts), groups, u

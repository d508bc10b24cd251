"""Independent references for the extended model (per-threshold and scale effects).

Written from the published model, not from ordwidgets' code:
``P(Y <= j) = F((theta_j - x'beta - w'gamma_j) / exp(z'zeta))`` (partial proportional odds,
Peterson & Harrell 1990, Appl. Statist. 39:205-217; location-scale, McCullagh 1980,
J. R. Statist. Soc. B 42:109-142, sec. 6).  Only numpy, scipy.stats and scipy.optimize.
"""
from __future__ import annotations

import numpy as np
from scipy import optimize

from .reference import DISTS


def loglik(params, X, W, Z, y, m, link, weights=None):
    """Log-likelihood by plain CDF differences; ``-inf`` when some probability is not positive.

    ``params`` may carry extra trailing dimensions (a batch, as scipy.differentiate passes).
    """
    params = np.asarray(params, float)
    flat = params.reshape(params.shape[0], -1)
    p, q, r = X.shape[1], W.shape[1], Z.shape[1]
    theta, beta = flat[:m], flat[m:m + p]
    gamma = flat[m + p:m + p + q * m].reshape(q, m, flat.shape[1])
    zeta = flat[m + p + q * m:]
    F = DISTS[link].cdf
    loc = theta[None] - (X @ beta)[:, None, :] - np.einsum("nq,qmk->nmk", W, gamma)
    cuts = loc / np.exp(Z @ zeta)[:, None, :]
    n, k = len(y), flat.shape[1]
    C = np.concatenate([np.zeros((n, 1, k)), F(cuts), np.ones((n, 1, k))], axis=1)
    prob = C[np.arange(n), y + 1] - C[np.arange(n), y]
    with np.errstate(divide="ignore", invalid="ignore"):
        lp = np.where(prob > 0, np.log(prob), -np.inf)
    out = lp.sum(axis=0) if weights is None else weights @ lp
    return out.reshape(params.shape[1:]) if params.ndim > 1 else float(out[0])


def fit(X, W, Z, y, link, start, weights=None):
    """Maximise :func:`loglik` with Nelder-Mead then BFGS (a generic optimiser)."""
    m = int(y.max())

    def obj(v):
        ll = loglik(v, X, W, Z, y, m, link, weights)
        return 1e10 if not np.isfinite(ll) else -ll

    v = optimize.minimize(obj, start, method="Nelder-Mead",
                          options={"maxiter": 20000, "xatol": 1e-8, "fatol": 1e-10}).x
    v = optimize.minimize(obj, v, method="BFGS", options={"gtol": 1e-7}).x
    return v, -obj(v)

"""Category probabilities ``F(upper) - F(lower)`` without cancellation.

For a row in category ``j`` the cumulative link model gives
``P(Y = j) = F(theta_j - eta) - F(theta_{j-1} - eta)`` (McCullagh 1980).  Computed naively,
the difference of two numbers close to one loses every digit in the upper tail.  Here the
difference is taken on the side of the median where it is exact: ``F(u) - F(l)`` below it and
``S(l) - S(u)`` above it, and in log space ``log P`` is assembled from ``log F`` / ``log S``
so that it stays finite when ``P`` itself underflows.
"""
from __future__ import annotations

import numpy as np

from .links import log1mexp, get_link

__all__ = ["interval_probability", "interval_logprob", "category_probabilities"]


def interval_probability(link, lower, upper):
    """Probability that the latent error lies in ``(lower, upper]``.

    Parameters
    ----------
    link : str or Link
        Link name or object.
    lower, upper : array_like
        Interval ends on the latent scale (may be ``-inf`` / ``inf``); broadcast together.

    Returns
    -------
    ndarray
        Non-negative probabilities, exact in both tails.
    """
    link = get_link(link)
    lower, upper = np.broadcast_arrays(np.asarray(lower, float), np.asarray(upper, float))
    exact = link.exact_interval(lower, upper)
    if exact is not None:
        return exact
    upper_side = lower >= link.median
    low = np.where(upper_side, 0.0, lower)
    up = np.where(upper_side, 0.0, upper)
    below = link.cdf(up) - link.cdf(low)
    low = np.where(upper_side, lower, 0.0)
    up = np.where(upper_side, upper, 0.0)
    above = link.sf(low) - link.sf(up)
    return np.maximum(np.where(upper_side, above, below), 0.0)


def interval_logprob(link, lower, upper):
    """``log P(lower < epsilon <= upper)``, finite wherever the interval has mass in floats.

    Uses ``log F(u) + log(1 - exp(log F(l) - log F(u)))`` below the median and the mirror
    form with survival functions above it; links with a closed form for the difference
    (:meth:`~ordwidgets.core.links.Link.exact_log_interval`) use it instead.
    """
    link = get_link(link)
    lower, upper = np.broadcast_arrays(np.asarray(lower, float), np.asarray(upper, float))
    exact = link.exact_log_interval(lower, upper)
    if exact is not None:
        return exact
    upper_side = lower >= link.median
    with np.errstate(invalid="ignore", divide="ignore"):
        a = np.where(upper_side, link.logsf(lower), link.logcdf(upper))
        b = np.where(upper_side, link.logsf(upper), link.logcdf(lower))
        diff = np.minimum(b - a, 0.0)
        out = a + log1mexp(np.where(np.isfinite(diff), diff, -np.inf))
    return np.where(np.isneginf(b), a, out)


def category_probabilities(link, thresholds, eta):
    """Probabilities of every category for linear predictors ``eta``.

    Parameters
    ----------
    link : str or Link
    thresholds : array_like, shape (J-1,)
        Strictly increasing thresholds.
    eta : array_like, shape (n,)
        Linear predictors ``x'beta``.

    Returns
    -------
    ndarray, shape (n, J)
        Rows are non-negative and sum to one.
    """
    theta = np.concatenate([[-np.inf], np.asarray(thresholds, float), [np.inf]])
    eta = np.atleast_1d(np.asarray(eta, float))[:, None]
    return interval_probability(link, theta[None, :-1] - eta, theta[None, 1:] - eta)

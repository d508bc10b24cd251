"""Predicted probabilities with delta-method intervals, and average marginal effects.

Both work for every fit (parallel, per-threshold and scale effects) through the layout of
:mod:`ordwidgets.core.layout`.  Derivatives of the category probabilities with respect to
the parameters are analytic: ``P_k = F(u_k) - F(u_{k-1})`` so
``dP_k = f(u_k) du_k - f(u_{k-1}) du_{k-1}``.

Sign convention: a positive location effect moves probability towards higher categories,
so its marginal effect is negative on the lowest level and positive on the highest.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy import special, stats

from .exceptions import CrossingWarning
from .layout import cumulative_predictors, end_jacobian, layout_of
from .probabilities import interval_probability

__all__ = ["probabilities_at", "probability_jacobian", "probability_variances", "prediction_intervals",
           "averaged_probabilities", "logit_interval", "logit_interval_of_variance", "wald_bounds", "check_level",
           "most_likely_levels"]


def wald_bounds(estimate, std_error, level):
    """Wald interval ``estimate -+ z_{(1+level)/2} * std_error`` (the one place it is built).

    Returns
    -------
    low, high : same shape as ``estimate``
    """
    check_level(level)
    q = stats.norm.isf((1 - level) / 2)
    return estimate - q * std_error, estimate + q * std_error


def check_level(level):
    """Refuse a coverage that is not a number strictly between 0 and 1."""
    if isinstance(level, bool) or not (isinstance(level, (int, float, np.floating)) and 0 < level < 1):
        raise ValueError(f"level must be strictly between 0 and 1, got {level!r}")


def probabilities_at(res, D, params=None, *, layout=None, warn=True):
    """Category probabilities ``(n, J)`` for a full design ``D`` (columns of the layout).

    ``params`` and ``layout`` default to the fit's own.  Rows whose cumulative
    probabilities cross (possible with per-threshold effects outside the data) get ``nan``
    and a :class:`~ordwidgets.core.exceptions.CrossingWarning`.
    """
    layout = layout_of(res) if layout is None else layout
    params = res.params if params is None else np.asarray(params, float)
    U, _ = cumulative_predictors(layout, params, D)
    n = len(U)
    P = interval_probability(res.link, np.column_stack([np.full(n, -np.inf), U]),
                             np.column_stack([U, np.full(n, np.inf)]))
    crossed = np.any(np.diff(U, axis=1) < 0, axis=1)
    if crossed.any():
        if warn:
            warnings.warn(f"cumulative probabilities cross for {int(crossed.sum())} of {n} rows "
                          "(per-threshold effects used outside the data); their probabilities are nan",
                          CrossingWarning, stacklevel=3)
        P[crossed] = np.nan
    return P


def most_likely_levels(probs, levels):
    """The level of largest probability in each row of ``probs`` (``n, J``), as objects.

    A row with a missing probability (a missing predictor, cuts that cross) has no most
    likely level: it gets ``nan``, not the first level.
    """
    out = np.asarray(levels, dtype=object)[probs.argmax(axis=1)]
    out[np.isnan(probs).any(axis=1)] = np.nan
    return out


def probability_jacobian(res, D, params=None):
    """Probabilities ``(n, J)`` and their parameter derivatives ``(n, J, P)``."""
    layout = layout_of(res)
    params = res.params if params is None else np.asarray(params, float)
    arrays = layout.arrays(D)
    U, sigma = cumulative_predictors(layout, params, D)
    n, m = U.shape
    dC = np.zeros((n, m + 2, layout.n_params))
    for j in range(m):
        u, du = end_jacobian(layout, arrays, U, sigma, np.full(n, j))
        dC[:, j + 1] = res.link.pdf(u)[:, None] * du
    return probabilities_at(res, D, params), np.diff(dC, axis=1)


def averaged_probabilities(res, D, weights):
    """Weighted mean probabilities ``(J,)`` over the rows of ``D`` and their gradient ``(J, P)``.

    The gradient of the mean cumulative probability ``sum_i w_i F(u_ij)`` is
    ``sum_i w_i f(u_ij) du_ij``; ``du_ij`` is ``1 / sigma_i`` times ``e_j``, ``-x_i`` and
    ``-w_i`` (at threshold ``j``) for thresholds, parallel and per-threshold effects, and
    ``-u_ij z_i`` for scale effects, so each threshold costs one product with the design
    (no ``(n, J, P)`` array).  ``weights`` should sum to one.
    """
    layout = layout_of(res)
    X, W, Z = layout.arrays(D)
    U, sigma = cumulative_predictors(layout, res.params, D)
    f = res.link.pdf(U)
    m = layout.m
    tb, bb, gb, zb = layout.blocks()
    C = np.zeros((m + 2, layout.n_params))
    for j in range(m):
        a = weights * f[:, j] / sigma
        C[j + 1, j] = a.sum()
        C[j + 1, bb] = -(a @ X)
        C[j + 1, gb.start + j:gb.stop:m] = -(a @ W)
        C[j + 1, zb] = -((weights * f[:, j] * U[:, j]) @ Z)
    return weights @ probabilities_at(res, D), np.diff(C, axis=0)


def logit_interval(est, G, cov, level):
    """Interval for probabilities ``est`` with gradients ``G``, built on the logit scale."""
    var = np.sum((G @ cov) * G, axis=-1)
    return logit_interval_of_variance(est, var, level)


def logit_interval_of_variance(est, var, level):
    """``expit(logit(p) -+ z sqrt(var) / (p (1 - p)))``; zero width where ``p`` is 0 or 1."""
    with np.errstate(divide="ignore", invalid="ignore"):
        low, high = wald_bounds(special.logit(est), np.sqrt(np.maximum(var, 0.0)) / (est * (1 - est)), level)
        lower, upper = special.expit(low), special.expit(high)
    edge = (est <= 0) | (est >= 1)
    return np.where(edge, est, lower), np.where(edge, est, upper)


def probability_variances(res, D, *, cumulative=False, chunk=4096):
    """Probabilities ``(n, J)`` and their delta-method variances ``g' V g`` (no ``(n, J, P)`` array).

    For a parallel fit the cumulative gradient is ``c_j = f(u_j) [e_j; -x]``, so
    ``c_j' V c_l = f_j f_l (V_jl - r_j - r_l + x'V_bb x)`` with ``r = X V_bt``: one
    ``n x p x p`` product in all.  Other layouts use the full gradients, a chunk of rows at
    a time.
    """
    layout = layout_of(res)
    if layout.is_parallel:
        return _parallel_variances(res, np.asarray(D, float), cumulative)
    est, var = [], []
    for s in range(0, len(D), chunk):
        p, G = probability_jacobian(res, D[s:s + chunk])
        if cumulative:
            p, G = np.cumsum(p, axis=1), np.cumsum(G, axis=1)
        est.append(p)
        var.append(np.sum((G @ res.cov) * G, axis=-1))
    J = len(res.levels)
    return (np.vstack(est) if est else np.empty((0, J))), (np.vstack(var) if var else np.empty((0, J)))


def _parallel_variances(res, X, cumulative):
    m, V = res.n_thresholds, res.cov
    Vtt, Vbt, Vbb = V[:m, :m], V[m:, :m], V[m:, m:]
    U, _ = cumulative_predictors(layout_of(res), res.params, X)
    f = res.link.pdf(U)
    s = np.sum((X @ Vbb) * X, axis=1) if X.shape[1] else np.zeros(len(X))
    R = X @ Vbt if X.shape[1] else np.zeros((len(X), m))
    Q = np.diag(Vtt)[None, :] - 2 * R + s[:, None]
    P = probabilities_at(res, X)
    if cumulative:
        n = len(X)
        return np.column_stack([np.cumsum(P, axis=1)[:, :m], np.ones(n)]), np.column_stack(
            [f ** 2 * Q, np.zeros(n)])
    cross = np.diag(Vtt, 1)[None, :] - R[:, :-1] - R[:, 1:] + s[:, None]
    fQ = f ** 2 * Q
    var = np.zeros((len(X), m + 1))
    var[:, :m] += fQ
    var[:, 1:] += fQ
    var[:, 1:m] -= 2 * f[:, 1:] * f[:, :-1] * cross
    return P, var


def prediction_intervals(res, data=None, *, kind="probabilities", level=0.95):
    """Predicted probabilities with pointwise delta-method intervals.

    The interval is ``expit(logit(p) -+ z * SE(logit p))`` with
    ``SE(logit p) = sqrt(g' V g) / (p (1 - p))`` and ``g = dp/dparams``, so both ends stay
    inside ``[0, 1]`` (delta method on the logit scale; common practice, no source).

    Parameters
    ----------
    kind : {"probabilities", "cumulative"}
        Category probabilities ``P(Y = j)`` or cumulative ``P(Y <= j)`` (the last is 1 with
        a zero-width interval).
    level : float
        Coverage, strictly between 0 and 1.

    Returns
    -------
    pandas.DataFrame
        One row per row of ``data``; columns a two-level MultiIndex
        ``(part, level)`` with ``part`` in ``"estimate"``, ``"lower"``, ``"upper"``, e.g.
        ``frame["lower"]`` is a frame with one column per response level.
    """
    check_level(level)
    if kind not in ("probabilities", "cumulative"):
        raise ValueError(f"intervals are available for kind='probabilities' or 'cumulative', got {kind!r}")
    est, var = probability_variances(res, res.design(data), cumulative=kind == "cumulative")
    if kind == "cumulative":
        est = est.clip(0, 1)
        est[:, -1], var[:, -1] = 1.0, 0.0
    lower, upper = logit_interval_of_variance(est, var, level)
    cols = pd.MultiIndex.from_product([["estimate", "lower", "upper"], [str(v) for v in res.levels]],
                                      names=["part", "level"])
    index = res._index(data, len(est))
    return pd.DataFrame(np.hstack([est, lower, upper]), index=index, columns=cols)

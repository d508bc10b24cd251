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

__all__ = ["probabilities_at", "probability_jacobian", "prediction_intervals", "average_marginal_effects",
           "logit_interval", "wald_bounds", "check_level"]


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


def logit_interval(est, G, cov, level):
    """Interval for probabilities ``est`` with gradients ``G``, built on the logit scale."""
    var = np.einsum("njp,pq,njq->nj", G, cov, G)
    q = stats.norm.isf((1 - level) / 2)
    with np.errstate(divide="ignore", invalid="ignore"):
        half = q * np.sqrt(np.maximum(var, 0.0)) / (est * (1 - est))
        centre = special.logit(est)
        lower, upper = special.expit(centre - half), special.expit(centre + half)
    edge = (est <= 0) | (est >= 1)
    return np.where(edge, est, lower), np.where(edge, est, upper)


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
    D = res.design(data)
    est, G = probability_jacobian(res, D)
    if kind == "cumulative":
        est, G = np.cumsum(est, axis=1).clip(0, 1), np.cumsum(G, axis=1)
        est[:, -1] = 1.0
    lower, upper = logit_interval(est, G, res.cov, level)
    cols = pd.MultiIndex.from_product([["estimate", "lower", "upper"], [str(v) for v in res.levels]],
                                      names=["part", "level"])
    index = res._index(data, len(est))
    return pd.DataFrame(np.hstack([est, lower, upper]), index=index, columns=cols)


def _siblings(res, column):
    """Other columns of the same formula term (dummies of one factor)."""
    spec = res.model_spec
    if spec is None:
        return []
    names = list(spec.column_names)
    for idx in spec.term_indices.values():
        cols = [names[i] for i in idx]
        if column in cols:
            return [c for c in cols if c != column]
    return []


def _counterfactuals(res, D, c):
    """Two designs whose averaged difference is the effect of column ``c`` (and the divisor)."""
    layout = layout_of(res)
    col = D[:, c]
    if np.all(np.isin(col, (0.0, 1.0))):
        lo, hi = D.copy(), D.copy()
        for s in _siblings(res, layout.columns[c]):
            if s in layout.columns and np.all(np.isin(D[:, layout.columns.index(s)], (0.0, 1.0))):
                lo[:, layout.columns.index(s)] = hi[:, layout.columns.index(s)] = 0.0
        lo[:, c], hi[:, c] = 0.0, 1.0
        return lo, hi, 1.0, "change 0 -> 1"
    h = 1e-4 * max(float(np.std(col)), 1e-8)
    lo, hi = D.copy(), D.copy()
    lo[:, c] -= h
    hi[:, c] += h
    return lo, hi, 2 * h, "derivative"


def average_marginal_effects(res):
    """Average marginal effect of each design column on each category probability.

    For a numeric column, the weighted mean over the training rows of ``dP(Y = j)/dx`` (a
    central difference of step ``1e-4`` standard deviations, other columns held fixed).  For
    a 0/1 column, the mean discrete change ``P(Y = j | x = 1) - P(Y = j | x = 0)``; for the
    dummies of a factor, the change from the reference level to that level (the other
    dummies of the factor set to 0).  Effects sum to zero over the levels.  Standard errors
    by the delta method with analytic derivatives of the probabilities.

    Returns
    -------
    pandas.DataFrame
        One row per design column; columns a two-level MultiIndex ``(part, level)`` with
        ``part`` in ``"effect"``, ``"std_error"``; ``frame.attrs["kind"]`` says which rows are
        derivatives and which discrete changes.
    """
    tr = res.training_rows()
    layout = layout_of(res)
    w = np.ones(len(tr.y)) if tr.weights is None else tr.weights
    w = w / w.sum()
    effects, ses, kinds = [], [], {}
    for c, name in enumerate(layout.columns):
        lo, hi, div, kinds[name] = _counterfactuals(res, tr.X, c)
        (p0, g0), (p1, g1) = probability_jacobian(res, lo), probability_jacobian(res, hi)
        eff = w @ (p1 - p0) / div
        grad = np.einsum("n,njp->jp", w, g1 - g0) / div
        effects.append(eff)
        ses.append(np.sqrt(np.maximum(np.einsum("jp,pq,jq->j", grad, res.cov, grad), 0.0)))
    cols = pd.MultiIndex.from_product([["effect", "std_error"], [str(v) for v in res.levels]],
                                      names=["part", "level"])
    data = np.hstack([np.array(effects), np.array(ses)]) if effects else np.empty((0, len(cols)))
    out = pd.DataFrame(data, index=pd.Index(layout.columns, name="predictor"), columns=cols)
    out.attrs["kind"] = kinds
    return out

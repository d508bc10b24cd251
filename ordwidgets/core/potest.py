"""Tests of the proportional-odds (parallel effects) assumption.

Two tests per formula term, plus an overall row:

* **Likelihood ratio**: refit with that term's effects free at every threshold (partial
  proportional odds; Peterson & Harrell 1990, Appl. Statist. 39:205-217) and refer
  ``2 (loglik_free - loglik)`` to chi-squared with ``J - 2`` degrees of freedom.
* **Brant (1990)** Wald test (Biometrics 46:1171-1178): fit the ``J - 1`` binary models
  ``P(Y > j) = 1 - F(theta_j - x'beta_j)`` separately, estimate the joint covariance of the
  ``beta_j`` from the separate score contributions, and test ``beta_1 = ... = beta_{J-1}``.
  Brant derived it for the logit link; here the same sandwich is built with each link's
  own score weights ``f / (pi (1 - pi))`` (equal to 1 for the logit).

**One at a time.**  Each likelihood-ratio row frees one predictor while the others stay
parallel, so with correlated predictors the non-parallel effect of one can appear in the
row of another (freeing the real culprit first makes it vanish; compare the fits with
:func:`~ordwidgets.core.inference.compare`).  Brant's per-predictor statistic comes from
binary fits in which every effect is free, so it does not borrow in this way; when the two
disagree, trust neither row alone.

**Large-n caution.**  Both are significance tests: with thousands of rows, departures from
parallel effects too small to matter become "significant".  Judge them by the change in
fitted probabilities that freeing the effect brings, reported as ``max_prob_change`` (the
largest absolute change of any category probability over the training rows) and
``mean_prob_change`` (the weighted mean over rows of the largest change per row).

**Rows per term.**  A term of the formula with several design columns (the dummies of a
factor) is tested jointly: one refit frees all its columns, with ``(J - 2) * k`` degrees of
freedom for ``k`` columns, so a 97-level factor costs one refit.  ``detail=True`` adds a row
per design column of such terms.

**Warm starts.**  Every refit starts at the parallel fit itself (each freed effect set to its
parallel value at every threshold), which is feasible and close to the answer, so Newton's
method needs a few steps; the refits share the rows sorted by category once.  The overall
refit starts at the largest per-term refit instead (:func:`overall_start`).

**Clusters and sampling weights.**  Both tests assume independent rows.  For a fit with a
cluster-robust covariance (``cluster=``) or sampling weights they are still computed, with a
``DataWarning`` and the reason in each row's ``note``: their p-values ignore the fit's
covariance and are too small when rows within a cluster are correlated.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy import stats

from .exceptions import CrossingError, DataWarning
from .extended_fit import fit_layout
from .layout import ModelLayout, all_training_rows, cumulative_predictors, layout_of
from .objective import sort_by_category, sorted_standardised
from .sandwich import likelihood_caveat
from .sorted_design import weighted_gram
from .terms import term_columns

__all__ = ["proportional_odds_test", "brant_test", "tested_terms"]

OVERALL = "(overall)"
#: Newton decrement at which a refit stops: one step beyond the plain fit's 1e-10 costs one
#: evaluation (quadratic convergence) and puts the statistic at machine precision.
REFIT_TOL = 1e-14
CROSSING_NOTE = "cumulative probabilities cross for observed rows: not testable by refit"


def tested_terms(res, *, detail=False):
    """``{row label: [design column index, ...]}`` of the parallel effects to test.

    One row per formula term that has parallel columns (all of them tested jointly); with
    ``detail`` also one row per column of terms with several columns, after the term's row.
    """
    layout = layout_of(res)
    rows = {}
    for term, cols in term_columns(res).items():
        idx = [layout.columns.index(c) for c in cols if layout.columns.index(c) in layout.location]
        if not idx:
            continue
        rows[term] = idx
        if detail and len(idx) > 1:
            rows.update({layout.columns[i]: [i] for i in idx if layout.columns[i] not in rows})
    return rows


def warm_start(res, layout):
    """Parameters of ``layout`` equal to the fit ``res`` (freed effects repeated per threshold).

    ``layout`` must be ``layout_of(res)`` with some parallel columns moved to per-threshold.
    """
    old = layout_of(res)
    theta, beta, gamma, zeta = old.split(res.params)
    m = old.m
    b = {i: beta[k] for k, i in enumerate(old.location)}
    g = {i: gamma[r] for r, i in enumerate(old.nonparallel)}
    new_beta = [b[i] for i in layout.location]
    new_gamma = [g[i] if i in g else np.full(m, b[i]) for i in layout.nonparallel]
    parts = [theta, new_beta, np.ravel(new_gamma) if new_gamma else [], zeta]
    return np.concatenate([np.asarray(v, float) for v in parts])


def shared_columns(res):
    """The training rows sorted by category and standardised once, for all refits of a table."""
    tr = res.training_rows()
    order, bounds = sort_by_category(tr.y, res.n_thresholds + 1)
    return sorted_standardised(tr.X, order, bounds, None if tr.weights is None else tr.weights[order])


def refit(res, layout, *, columns=None, start=None):
    """Maximum-likelihood fit of ``layout`` on the training rows, started at the fit ``res``.

    ``columns`` (:func:`shared_columns`) may be shared between refits; ``start`` replaces the
    warm start at ``res`` (e.g. :func:`overall_start`).  Returns the
    ``EngineFit`` of :func:`~ordwidgets.core.extended_fit.fit_layout` and raises its
    ``CrossingError``.
    """
    tr = res.training_rows()
    return fit_layout(layout, tr.X, tr.y, tr.weights, res.link, warn=False, tol=REFIT_TOL,
                      start=warm_start(res, layout) if start is None else start, columns=columns)


def overall_start(res, layout, refits):
    """Start of the overall refit ``layout``: the largest converged per-term refit, extended.

    ``refits`` maps a row label to ``(term layout, EngineFit or None)``.  The per-term optimum
    with its still-parallel effects repeated per threshold gives the same probabilities, so it
    is feasible, and it is closer to the answer than the parallel fit (with a 97-level factor,
    3 Newton steps instead of 7).  Falls back to :func:`warm_start` at ``res``.
    """
    done = [(lay, out) for lay, out in refits.values() if out is not None and out.converged]
    if not done:
        return warm_start(res, layout)
    lay, out = max(done, key=lambda pair: pair[0].n_params)
    return warm_start(_Fitted(out.params, lay), layout)


class _Fitted:
    """Parameters and layout of a refit, in the shape :func:`warm_start` reads."""

    def __init__(self, params, layout):
        self.params, self.layout = params, layout


def training_probabilities(res, layout=None, params=None):
    """Category probabilities of the training rows, ``diff([0, F(u_1), ..., F(u_m), 1])``.

    Plain differences (no tail-exact branches): the tables only use absolute changes.
    """
    layout = layout_of(res) if layout is None else layout
    U, _ = cumulative_predictors(layout, res.params if params is None else params, res.training_rows().X)
    F = res.link.cdf(U)
    n = len(F)
    return np.diff(np.column_stack([np.zeros(n), F, np.ones(n)]), axis=1)


def _lr_row(res, layout, base_probs, columns, start=None):
    """One table row and the refit (``None`` where the cuts would cross)."""
    tr = res.training_rows()
    try:
        out = refit(res, layout, columns=columns, start=start)
    except CrossingError:
        return {"note": CROSSING_NOTE}, None
    df = layout.n_params - res.n_params
    stat = max(2.0 * (out.loglik - res.loglik), 0.0)
    change = np.abs(training_probabilities(res, layout, out.params) - base_probs)
    w = np.ones(len(tr.y)) if tr.weights is None else tr.weights
    return {"statistic": stat, "df": df, "p_value": float(stats.chi2.sf(stat, df)),
            "max_prob_change": float(np.max(change)), "mean_prob_change": float(w @ change.max(axis=1) / w.sum()),
            "note": "" if out.converged else f"refit: {out.message}"}, out


def _binary_fits(res, cols):
    """Separate fits of ``1(Y > j)``; returns parameters ``(m, 1 + p)`` and notes.

    Each starts at the threshold ``theta_j`` and the effects of the fit itself.
    """
    tr = res.training_rows()
    full = layout_of(res)
    layout = ModelLayout(tuple(full.columns), tuple(cols), (), (), ("cut",))
    theta, beta, gamma, _ = full.split(res.params)
    effect = {i: beta[k] for k, i in enumerate(full.location)}
    params, notes = [], []
    for j in range(res.n_thresholds):
        effect.update({i: gamma[r, j] for r, i in enumerate(full.nonparallel)})
        start = np.concatenate([[theta[j]], [effect[i] for i in cols]])
        out = fit_layout(layout, tr.X, (tr.y > j).astype(np.intp), tr.weights, res.link, warn=False,
                         tol=REFIT_TOL, start=start)
        params.append(out.params)
        if not out.converged:
            notes.append(f"binary fit {res.threshold_names[j]}: {out.message}")
    return np.array(params), notes


def _brant_covariance(res, X, params):
    """Joint covariance of the stacked separate-fit parameters (Brant 1990, sec. 3)."""
    tr = res.training_rows()
    w = np.ones(len(X)) if tr.weights is None else tr.weights
    D = np.column_stack([-np.ones(len(X)), X])
    t = params[:, :1].T - X @ params[:, 1:].T
    pi, f = res.link.sf(t), res.link.pdf(t)
    r = f / (pi * (1 - pi))
    m, k = params.shape
    inv = [np.linalg.inv(weighted_gram(D, w * r[:, j] * f[:, j])) for j in range(m)]
    V = np.zeros((m * k, m * k))
    for j in range(m):
        for l in range(j, m):
            cov_y = pi[:, l] * (1 - pi[:, j])
            C = weighted_gram(D, w * r[:, j] * r[:, l] * cov_y)  # in cached row blocks
            block = inv[j] @ C @ inv[l]
            V[j * k:(j + 1) * k, l * k:(l + 1) * k] = block
            V[l * k:(l + 1) * k, j * k:(j + 1) * k] = block.T
    return V


def _wald(params, V, tested):
    """Wald statistic of ``beta_1[t] = beta_j[t]`` for all ``j`` and tested columns ``t``."""
    m, k = params.shape
    rows = []
    for t in tested:
        for j in range(1, m):
            c = np.zeros(m * k)
            c[1 + t], c[j * k + 1 + t] = 1.0, -1.0
            rows.append(c)
    C = np.array(rows)
    d = C @ params.ravel()
    stat = float(d @ np.linalg.solve(C @ V @ C.T, d))
    return stat, len(rows)


def brant_test(res, *, detail=False):
    """Brant's Wald test per tested term (see :func:`tested_terms`) and overall.

    Returns
    -------
    pandas.DataFrame
        Columns ``brant_statistic``, ``brant_df``, ``brant_p_value``, ``brant_note``.
    """
    layout = layout_of(res)
    terms = tested_terms(res, detail=detail)
    names = list(terms) + [OVERALL]
    cols = ["brant_statistic", "brant_df", "brant_p_value"]
    if layout.scale or res.n_thresholds < 2 or not layout.location:
        note = "needs a model without scale effects and with at least three levels"
        return pd.DataFrame({**{c: np.nan for c in cols}, "brant_note": note}, index=names)
    loc = sorted(layout.location + layout.nonparallel)
    params, notes = _binary_fits(res, loc)
    V = _brant_covariance(res, res.training_rows().X[:, loc], params)
    groups = [[loc.index(i) for i in idx] for idx in terms.values()]
    groups.append([loc.index(i) for i in layout.location])
    out = {}
    for name, which in zip(names, groups):
        stat, df = _wald(params, V, which)
        out[name] = [stat, df, float(stats.chi2.sf(stat, df))]
    frame = pd.DataFrame.from_dict(out, orient="index", columns=cols)
    frame["brant_note"] = "; ".join(notes)
    return frame


def proportional_odds_test(res, *, detail=False):
    """Test whether each term's parallel effects could be non-parallel (LR and Brant), plus overall.

    Read the module docstring for the large-n caution: judge a significant result by
    ``max_prob_change`` / ``mean_prob_change``.

    Parameters
    ----------
    detail : bool
        Also test each design column of a term with several columns (a factor's levels) on
        its own, in rows labelled by the column, after the term's row.

    Returns
    -------
    pandas.DataFrame
        Indexed by formula term (see :func:`ordwidgets.core.terms.term_columns`), plus a
        row ``"(overall)"`` freeing every parallel effect at once.  Columns ``statistic``,
        ``df``, ``p_value`` (likelihood ratio), ``brant_statistic``, ``brant_df``,
        ``brant_p_value``, ``max_prob_change``, ``mean_prob_change``, ``note``,
        ``brant_note``.
    """
    tr = all_training_rows(res, "the proportional-odds test")
    caveat = likelihood_caveat(res)
    if caveat:
        warnings.warn(f"proportional-odds tests: {caveat}, and so does the Brant test's covariance: these "
                      "p-values do not use the fit's covariance", DataWarning, stacklevel=3)
    layout = layout_of(res)
    if not layout.location:
        raise ValueError("the fit has no parallel effect to test")
    if res.n_thresholds < 2:
        raise ValueError("with two response levels every effect is trivially parallel: nothing to test")
    base = training_probabilities(res)
    shared = shared_columns(res)
    refits = {name: layout.with_nonparallel(idx) for name, idx in tested_terms(res, detail=detail).items()}
    rows = {}
    for name, lay in refits.items():
        rows[name], out = _lr_row(res, lay, base, shared)
        refits[name] = (lay, out)
    single = len(rows) == 1 and len(next(iter(tested_terms(res).values()))) == len(layout.location)
    overall = layout.with_nonparallel(list(layout.location))
    rows[OVERALL] = dict(next(iter(rows.values()))) if single else _lr_row(
        res, overall, base, shared, start=overall_start(res, overall, refits))[0]
    lr = pd.DataFrame.from_dict(rows, orient="index")
    order = ["statistic", "df", "p_value", "max_prob_change", "mean_prob_change", "note"]
    lr = lr.reindex(columns=order)
    frame = lr.join(brant_test(res, detail=detail))
    if caveat:
        frame["note"] = [f"{n}; {caveat}" if n else caveat for n in frame["note"].fillna("")]
    return frame[order[:3] + ["brant_statistic", "brant_df", "brant_p_value"] + order[3:] + ["brant_note"]]

"""Tests of the proportional-odds (parallel effects) assumption.

Two tests per predictor, plus an overall row:

* **Likelihood ratio**: refit with that predictor's effect free at every threshold (partial
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
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from .effects import probabilities_at
from .exceptions import CrossingError
from .extended_fit import fit_layout
from .layout import ModelLayout, all_training_rows, layout_of

__all__ = ["proportional_odds_test", "brant_test"]

OVERALL = "(overall)"


def _lr_row(res, layout):
    tr = res.training_rows()
    try:
        out = fit_layout(layout, tr.X, tr.y, tr.weights, res.link, warn=False)
    except CrossingError:
        return {"note": "cumulative probabilities cross for observed rows: not testable by refit"}
    df = layout.n_params - res.n_params
    stat = max(2.0 * (out.loglik - res.loglik), 0.0)
    change = np.abs(probabilities_at(res, tr.X, out.params, layout=layout) - probabilities_at(res, tr.X))
    w = np.ones(len(tr.y)) if tr.weights is None else tr.weights
    return {"statistic": stat, "df": df, "p_value": float(stats.chi2.sf(stat, df)),
            "max_prob_change": float(np.max(change)), "mean_prob_change": float(w @ change.max(axis=1) / w.sum()),
            "note": "" if out.converged else f"refit: {out.message}"}


def _binary_fits(res, cols):
    """Separate fits of ``1(Y > j)``; returns parameters ``(m, 1 + p)`` and notes."""
    tr = res.training_rows()
    X = tr.X[:, cols]
    layout = ModelLayout(tuple(f"c{i}" for i in range(len(cols))), tuple(range(len(cols))), (), (), ("cut",))
    params, notes = [], []
    for j in range(res.n_thresholds):
        out = fit_layout(layout, X, (tr.y > j).astype(np.intp), tr.weights, res.link, warn=False)
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
    inv = [np.linalg.inv(D.T @ ((w * r[:, j] * f[:, j])[:, None] * D)) for j in range(m)]
    V = np.zeros((m * k, m * k))
    for j in range(m):
        for l in range(j, m):
            cov_y = pi[:, l] * (1 - pi[:, j])
            C = D.T @ ((w * r[:, j] * r[:, l] * cov_y)[:, None] * D)
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


def brant_test(res):
    """Brant's Wald test per parallel predictor and overall (see the module docstring).

    Returns
    -------
    pandas.DataFrame
        Columns ``brant_statistic``, ``brant_df``, ``brant_p_value``, ``brant_note``.
    """
    layout = layout_of(res)
    names = [layout.columns[i] for i in layout.location] + [OVERALL]
    cols = ["brant_statistic", "brant_df", "brant_p_value"]
    if layout.scale or res.n_thresholds < 2 or not layout.location:
        note = "needs a model without scale effects and with at least three levels"
        return pd.DataFrame({**{c: np.nan for c in cols}, "brant_note": note}, index=names)
    loc = sorted(layout.location + layout.nonparallel)
    params, notes = _binary_fits(res, loc)
    V = _brant_covariance(res, res.training_rows().X[:, loc], params)
    tested = [loc.index(i) for i in layout.location]
    out = {}
    for name, which in zip(names, [[t] for t in tested] + [tested]):
        stat, df = _wald(params, V, which)
        out[name] = [stat, df, float(stats.chi2.sf(stat, df))]
    frame = pd.DataFrame.from_dict(out, orient="index", columns=cols)
    frame["brant_note"] = "; ".join(notes)
    return frame


def proportional_odds_test(res):
    """Test whether each parallel effect could be non-parallel (LR and Brant), plus overall.

    Read the module docstring for the large-n caution: judge a significant result by
    ``max_prob_change`` / ``mean_prob_change``.

    Returns
    -------
    pandas.DataFrame
        Indexed by design column, plus a row ``"(overall)"`` freeing all of them at once.
        Columns ``statistic``, ``df``, ``p_value`` (likelihood ratio), ``brant_statistic``,
        ``brant_df``, ``brant_p_value``, ``max_prob_change``, ``mean_prob_change``,
        ``note``, ``brant_note``.
    """
    all_training_rows(res, "the proportional-odds test")
    layout = layout_of(res)
    if not layout.location:
        raise ValueError("the fit has no parallel effect to test")
    if res.n_thresholds < 2:
        raise ValueError("with two response levels every effect is trivially parallel: nothing to test")
    rows = {layout.columns[i]: _lr_row(res, layout.with_nonparallel([i])) for i in layout.location}
    single = len(layout.location) == 1
    rows[OVERALL] = dict(next(iter(rows.values()))) if single else _lr_row(
        res, layout.with_nonparallel(list(layout.location)))
    lr = pd.DataFrame.from_dict(rows, orient="index")
    order = ["statistic", "df", "p_value", "max_prob_change", "mean_prob_change", "note"]
    lr = lr.reindex(columns=order)
    frame = lr.join(brant_test(res))
    return frame[order[:3] + ["brant_statistic", "brant_df", "brant_p_value"] + order[3:] + ["brant_note"]]

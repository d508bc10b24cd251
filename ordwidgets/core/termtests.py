"""Tests by formula term: every parameter of a term (all dummies of a factor) at once.

Two tests of "the term adds nothing" for each term:

* **Likelihood ratio** (Wilks 1938): refit without the term's design columns and refer
  ``2 (loglik - loglik_without)`` to chi-squared with as many degrees of freedom as the term
  has parameters.
* **Wald** (Wald 1943): ``b' V^-1 b`` with ``b`` the term's estimates and ``V`` their block of
  the covariance matrix, on the same degrees of freedom.  No refit.

The parameters of a term are its parallel effects, its per-threshold effects and its scale
effects.  Both tests are asymptotic; they agree closely when the fit is well determined and
drift apart near separation (large estimates, large standard errors), where the
likelihood-ratio test is the one to trust (Hauck & Donner 1977).  For fits with a
cluster-robust covariance (``cluster=``) or sampling weights only the Wald test is given (it
uses that covariance); the likelihood-ratio columns are empty with a note, since the
statistic assumes independent rows.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from .exceptions import CrossingError
from .layout import ModelLayout, all_training_rows, layout_of, per_threshold_name, scale_name
from .extended_fit import fit_layout
from .sandwich import likelihood_caveat
from .terms import term_columns

__all__ = ["term_parameters", "term_tests"]


def term_parameters(res) -> dict[str, list[str]]:
    """Formula term -> names of all its parameters (location, per-threshold and scale)."""
    layout = layout_of(res)
    out = {}
    for term, cols in term_columns(res).items():
        idx = [layout.columns.index(c) for c in cols]
        names = [layout.columns[i] for i in idx if i in layout.location]
        names += [per_threshold_name(layout.columns[i], t) for i in idx if i in layout.nonparallel
                  for t in layout.thresholds]
        out[term] = names + [scale_name(layout.columns[i]) for i in idx if i in layout.scale]
    return out


def _without(layout, drop):
    """The layout and the kept column positions once design columns ``drop`` are removed."""
    keep = [i for i in range(len(layout.columns)) if i not in drop]
    new = {old: k for k, old in enumerate(keep)}

    def remap(group):
        return tuple(new[i] for i in group if i in new)

    reduced = ModelLayout(tuple(layout.columns[i] for i in keep), remap(layout.location),
                          remap(layout.nonparallel), remap(layout.scale), layout.thresholds)
    return reduced, keep


def _lr(res, cols, df):
    """Likelihood-ratio statistic, p-value and note for dropping design columns ``cols``.

    Not computed (``nan`` and a note saying why) for a fit with a cluster-robust covariance
    or sampling weights: the statistic assumes independent rows (see
    :func:`~ordwidgets.core.sandwich.likelihood_caveat`); the Wald test uses the fit's
    covariance.
    """
    why = likelihood_caveat(res)
    if why:
        return np.nan, np.nan, f"no likelihood-ratio test: {why}; see the Wald test"
    tr = all_training_rows(res, "the likelihood-ratio test by term")
    layout = layout_of(res)
    reduced, keep = _without(layout, [layout.columns.index(c) for c in cols])
    try:
        out = fit_layout(reduced, tr.X[:, keep], tr.y, tr.weights, res.link, warn=False)
    except CrossingError:
        return np.nan, np.nan, "refit without the term: cumulative probabilities cross"
    stat = max(2.0 * (res.loglik - out.loglik), 0.0)
    note = "" if out.converged else f"refit without the term: {out.message}"
    return stat, float(stats.chi2.sf(stat, df)), note


def _wald(res, names):
    """Wald statistic and p-value of ``beta[names] = 0`` from the fit's covariance."""
    idx = [res.names.index(n) for n in names]
    b = res.params[idx]
    V = res.cov[np.ix_(idx, idx)]
    if not np.all(np.isfinite(V)):
        return np.nan, np.nan
    stat = float(b @ np.linalg.solve(V, b))
    return stat, float(stats.chi2.sf(stat, len(idx)))


def term_tests(res, *, likelihood_ratio=True) -> pd.DataFrame:
    """Likelihood-ratio and Wald tests of each formula term (see the module docstring).

    Parameters
    ----------
    res : FitResult
    likelihood_ratio : bool
        Refit once per term for the likelihood-ratio test (``False``: Wald only, no refit;
        also the only choice for a Dask fit, which keeps a sample of its rows).

    Returns
    -------
    pandas.DataFrame
        Indexed by term (index name ``"term"``); columns ``columns`` (the term's design
        columns, comma-separated), ``df``, ``lr_statistic``, ``lr_p_value``,
        ``wald_statistic``, ``wald_p_value``, ``note``.
    """
    cols, params = term_columns(res), term_parameters(res)
    # the refit without a term is a plain fit: against a marginal (random-intercept) loglik it
    # would credit the random part to the term
    mixed = ("no likelihood-ratio refit for random-intercept fits yet: Wald only"
             if likelihood_ratio and getattr(res, "groups", ()) else "")
    rows = {}
    for term, names in params.items():
        df = len(names)
        lr = _lr(res, cols[term], df) if likelihood_ratio and not mixed else (np.nan, np.nan, mixed)
        wald = _wald(res, names)
        rows[term] = {"columns": ", ".join(cols[term]), "df": df, "lr_statistic": lr[0], "lr_p_value": lr[1],
                      "wald_statistic": wald[0], "wald_p_value": wald[1], "note": lr[2]}
    order = ["columns", "df", "lr_statistic", "lr_p_value", "wald_statistic", "wald_p_value", "note"]
    frame = pd.DataFrame.from_dict(rows, orient="index").reindex(columns=order)
    frame.index.name = "term"
    return frame

"""Ranking links: the same model fitted with every link, best first by AIC.

Every link has the same number of parameters for a given model, so ordering by AIC is also
ordering by the maximised log-likelihood (Akaike 1974); the table says whether the fits are
weighted and by which column, since weighted and unweighted log-likelihoods differ.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from .exceptions import ConvergenceWarning, CrossingError
from .links import get_link, link_names
from .summary import weighting_of

__all__ = ["compare_links"]


def _fit_quietly(formula, data, name, kwargs):
    """One fit with its warnings caught; returns a row of the link table and the warnings."""
    from .fitting import fit

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            res = fit(formula, data, link=name, **kwargs)
        except CrossingError as exc:
            return _failed_row(str(exc)), caught
    return _row(res), caught


def _row(res):
    return {"loglik": res.loglik, "aic": res.aic, "bic": res.bic, "converged": res.converged,
            "n_params": res.n_params, "message": res.message}


def _failed_row(message):
    return {"loglik": np.nan, "aic": np.nan, "bic": np.nan, "converged": False, "n_params": np.nan,
            "message": message}


def _from_result(res):
    """Formula, data (the rows it was fitted on) and fitting options of a result."""
    tr = res.training
    if tr is None or tr.frame is None:
        raise ValueError("this result does not hold its data frame (fit with keep_data=True)")
    if tr.is_sample:
        raise ValueError(f"the result keeps {tr.describe()}; pass the formula and data to compare links")
    opts = res.options
    weights = opts.get("weights")
    if weights is not None and not isinstance(weights, str):
        weights = tr.weights  # an array given to the fit: its entries for the rows kept
    groups = list(getattr(res, "groups", ()) or ()) or None
    cluster = opts.get("cluster") if opts.get("covariance_type") == "cluster" else None
    if opts.get("covariance_type") == "cluster" and not isinstance(cluster, str):
        raise ValueError("this fit's clusters were given as an array; pass the formula, data and cluster= "
                         "to compare links")
    return res.formula, tr.frame, {"weights": weights, "levels": opts.get("levels"),
                                   "nonparallel": opts.get("nonparallel") or None,
                                   "scale_by": opts.get("scale_by") or None, "random_intercepts": groups,
                                   "quadrature": opts.get("quadrature") if groups else None, "cluster": cluster,
                                   "weight_kind": opts.get("weight_kind") or "frequency"}


def compare_links(model, data=None, *, link=None, weights=None, levels=None, nonparallel=None,
                  scale_by=None, random_intercepts=None, quadrature=None, cluster=None, weight_kind="frequency",
                  max_iter=100):
    """Fit the same model with several links and rank them.

    Parameters
    ----------
    model : str or FitResult
        A formula (then ``data`` is needed), or a fit whose formula, rows, weights, levels,
        per-threshold and scale effects, random intercepts (grouping columns and quadrature
        points) and covariance (cluster column, weight kind) are used (the other options are
        then not allowed).
        The fit's own link is not refitted.
    data : pandas.DataFrame, optional
        With a formula.
    link : str or sequence of str, optional
        Links to compare (default: all of :func:`~ordwidgets.core.links.link_names`).
    weights, levels, nonparallel, scale_by, random_intercepts, quadrature, cluster, weight_kind, max_iter
        Passed to :func:`~ordwidgets.core.fitting.fit` for every link: a random-intercept
        model is fitted with the same random part under each link (the log-likelihoods
        compared are then the marginal ones).

    Returns
    -------
    pandas.DataFrame
        Indexed by link name (index name ``"link"``); columns ``loglik``, ``aic``, ``bic``,
        ``converged``, ``n_params``, ``message``.  The column index is named after the
        weighting (``"unweighted"``, ``"weighted by column 'count'"`` or ``"weighted by a
        weights array"``; also in ``attrs["weighting"]``), so the printed table says how
        the fits were weighted.  Sorted best first: converged fits before the others, then
        by AIC.  Convergence problems are reported in the table instead of as warnings;
        data warnings are raised once.
    """
    names = link_names() if link is None else [link] if isinstance(link, str) else list(link)
    own = None
    if isinstance(model, str):
        if data is None:
            raise ValueError("compare_links(formula, data): data is needed with a formula")
        formula = model
        kwargs = {"weights": weights, "levels": levels, "nonparallel": nonparallel, "scale_by": scale_by,
                  "random_intercepts": random_intercepts, "quadrature": quadrature, "cluster": cluster,
                  "weight_kind": weight_kind}
    else:
        if data is not None or weight_kind != "frequency" or any(
                v is not None for v in (weights, levels, nonparallel, scale_by, random_intercepts, quadrature, cluster)):
            raise ValueError("with a fit, compare_links takes its data and options from the fit")
        own = model
        formula, data, kwargs = _from_result(model)
    kwargs["max_iter"] = max_iter
    rows = _rows(names, formula, data, kwargs, own)
    table = pd.DataFrame.from_dict(rows, orient="index")
    table.index.name = "link"
    key = table.assign(_bad=~table["converged"].astype(bool), _aic=table["aic"].fillna(np.inf))
    table = table.loc[key.sort_values(["_bad", "_aic"], kind="stable").index]
    table.columns.name = table.attrs["weighting"] = weighting_of(kwargs["weights"])
    return table


def _rows(names, formula, data, kwargs, own):
    rows, seen = {}, set()
    for name in names:
        lk = get_link(name)
        if own is not None and lk.name == own.link.name:
            rows[lk.name] = _row(own)
            continue
        rows[lk.name], caught = _fit_quietly(formula, data, lk.name, kwargs)
        for w in caught:
            if not issubclass(w.category, ConvergenceWarning) and str(w.message) not in seen:
                seen.add(str(w.message))
                warnings.warn(w.message, w.category, stacklevel=3)
    return rows

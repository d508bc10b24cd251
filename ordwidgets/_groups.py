"""Helpers of :class:`~ordwidgets.state.FitState` about random intercepts and robust covariances.

Pure functions of a fit and the state's options; nothing here touches widgets.  A
random-intercept fit (:class:`~ordwidgets.core.mixed_results.RandomInterceptFit`) has
``groups`` (its grouping columns), ``group_labels`` and ``group_codes`` (each fitted row's
position in its column's labels, in fit order).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .core import OrdinalDataError

__all__ = ["FIT_OPTIONS", "grouping_of", "options_of", "fit_kwargs", "group_label", "group_rows", "kind_text"]

#: Keys of ``FitState.options`` passed to ``ow.fit`` as they are.
FIT_OPTIONS = ("weights", "levels", "quadrature", "cluster", "weight_kind")


def grouping_of(res) -> tuple:
    """Grouping columns of a fit with random intercepts (``()`` for any other fit)."""
    return tuple(getattr(res, "groups", ()) or ())


def options_of(res) -> dict:
    """The state options that refit ``res`` the same way (weights, levels, quadrature, covariance).

    Raises
    ------
    OrdinalDataError
        For clusters given as an array of labels: a refit (another link, a dropped
        predictor) could not carry them, so the state would show model-based numbers.
    """
    opts = dict(res.options)
    out = {k: opts.get(k) for k in ("weights", "levels") if opts.get(k) is not None}
    if grouping_of(res) and opts.get("quadrature") is not None:
        out["quadrature"] = int(opts["quadrature"])
    if opts.get("covariance_type") == "cluster":
        if not isinstance(opts.get("cluster"), str):
            raise OrdinalDataError("this fit's clusters were given as an array of labels; the panels refit with "
                                   "other links and predictors and need the cluster column's name: fit with "
                                   "cluster='<column>'")
        out["cluster"] = opts["cluster"]
    if opts.get("weight_kind", "frequency") != "frequency":
        out["weight_kind"] = opts["weight_kind"]
    return out


def fit_kwargs(options, model_kwargs, random_intercepts) -> dict:
    """Keyword arguments of ``ow.fit`` for a state's options, predictor roles and grouping columns.

    ``quadrature`` applies only with random intercepts, so it is left out while every
    random intercept is switched off (the core refuses it alone); the option is kept for
    when one is switched on again.
    """
    kwargs = {k: v for k, v in options.items() if k in FIT_OPTIONS and v is not None}
    kwargs.update(model_kwargs)
    if random_intercepts:
        kwargs["random_intercepts"] = list(random_intercepts)
    else:
        kwargs.pop("quadrature", None)
    return kwargs


def group_label(res, column, value):
    """The fit's own label of group ``value`` of ``column`` (``ValueError`` if it has none)."""
    if column not in grouping_of(res):
        raise ValueError(f"{column!r} is not a grouping column of this fit "
                         f"(grouping: {', '.join(map(repr, grouping_of(res))) or 'none'})")
    labels = pd.Index(res.group_labels[res.groups.index(column)])
    try:
        pos = labels.get_indexer([value])[0]
    except (TypeError, ValueError):
        pos = -1
    if pos < 0:
        raise ValueError(f"{value!r} is not a group of {column!r} in this fit ({len(labels):,} groups, "
                         f"e.g. {', '.join(map(repr, list(labels[:3])))})")
    label = labels[pos]
    return label.item() if isinstance(label, np.generic) else label


def group_rows(res, column, label) -> np.ndarray:
    """Positions (0..n_rows-1, fit order) of the fitted rows of one group."""
    k = res.groups.index(column)
    pos = pd.Index(res.group_labels[k]).get_loc(label)
    return np.flatnonzero(np.asarray(res.group_codes[k]) == pos)


def kind_text(kind, column, group, several=False) -> str:
    """Plain words for the kind of probability shown (captions of every panel that shows one)."""
    if kind == "population":
        return (f"population-averaged probabilities: averaged over the {column} effects (the share among all "
                f"{column}s' rows with these values)")
    if kind == "typical":
        return f"probabilities for a typical {column} (group effect 0), more extreme than the population average"
    others = "; other grouping columns at effect 0" if several else ""
    return (f"probabilities for {column} {group} at its estimated effect (conditional on the group; "
            f"a positive group effect moves probability towards higher categories){others}")

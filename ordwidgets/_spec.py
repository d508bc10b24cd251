"""Helpers of :class:`~ordwidgets.state.FitState` about the model spec and scenarios.

Pure functions of a formula and a data frame; nothing here touches widgets.
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd

from .core import compare_links
from .core.design import split_formula
from .core.naming import parsed_terms, quote_name

__all__ = ["variables", "without", "is_categorical", "complete_scenario", "match_dtypes",
           "model_kwargs", "link_rows", "default_value", "weighted_median", "value_range", "grid_values"]


def variables(formula) -> list:
    """Predictor variables named on the right of ``formula``, in order of first use.

    Column names that need quoting in a formula (spaces, ``-``, quotes, integers) come back as
    the plain column names, e.g. ``"street width"`` for the term ```street width```.
    """
    if not formula:
        return []
    _, rhs = split_formula(formula)
    out = []
    for term in parsed_terms(rhs):
        out += [v for v in _term_variables(term) if v not in out]
    return out


def _term_variables(term):
    """Columns read by one parsed term, in the order they appear in its text."""
    found = []
    for factor in term:
        names = sorted(factor.variables, key=lambda v: (_position(factor.expr, v), v))
        found += [v for v in names if v not in found]
    return found


def _position(text, name):
    at = text.find(quote_name(name))
    return at if at >= 0 else text.find(name)


def _term_text(term) -> str:
    """Formula text of one parsed term; lookup factors re-quoted where their names need it."""
    return ":".join(quote_name(f.expr) if f.method == "lookup" else f.expr for f in term)


def without(formula, dropped) -> str:
    """``formula`` with every term that uses a predictor in ``dropped`` removed."""
    if not dropped:
        return formula
    lhs, rhs = split_formula(formula)
    keep = [_term_text(t) for t in parsed_terms(rhs) if not set(_term_variables(t)) & set(dropped)]
    return f"{lhs} ~ {' + '.join(keep) if keep else '1'}"


def is_categorical(column, name, formula) -> bool:
    """Non-numeric, boolean, or wrapped in ``C(...)`` in the formula."""
    wrapped = "|".join(re.escape(t) for t in {str(name), quote_name(name)})
    if re.search(r"\bC\(\s*(?:" + wrapped + r")(?![\w`])", formula or ""):
        return True
    dtype = column.dtype
    return pd.api.types.is_bool_dtype(dtype) or not pd.api.types.is_numeric_dtype(dtype)


def default_value(column, categorical, weights=None):
    """Median of a number, most common value of a level (ties: first in sorted order).

    With frequency ``weights`` (one per row of ``column``) these are the weighted median and
    mode: the values of the data expanded to one row per counted unit.
    """
    w = np.ones(len(column)) if weights is None else np.asarray(weights, float)
    keep = column.notna().to_numpy() & (w > 0)
    col, w = column[keep], w[keep]
    if categorical:
        totals = pd.Series(w).groupby(col.to_numpy(), sort=True, observed=True).sum()
        return _native(totals.index[int(np.argmax(totals.to_numpy()))])
    return weighted_median(col.to_numpy(float), w)


def weighted_median(values, weights) -> float:
    """Median of ``values`` repeated ``weights`` times (the mean of the two middle values
    when the weight below one of them is exactly half, as for an even count)."""
    order = np.argsort(values, kind="stable")
    x, cum = values[order], np.cumsum(np.asarray(weights, float)[order])
    half = cum[-1] / 2.0
    i = int(np.searchsorted(cum, half, side="left"))
    if np.isclose(cum[i], half, rtol=1e-12, atol=0.0) and i + 1 < len(x):
        return float((x[i] + x[i + 1]) / 2.0)
    return float(x[i])


def value_range(column):
    """``(min, max)`` of a numeric column's observed values."""
    values = column.dropna().to_numpy(float)
    return float(values.min()), float(values.max())


def grid_values(column, categorical, n=101):
    """x values of the explorer: the observed levels, or ``n`` points over the observed range."""
    col = column.dropna()
    if categorical:
        if isinstance(col.dtype, pd.CategoricalDtype):
            return [_native(v) for v in col.cat.categories if (col == v).any()]
        return [_native(v) for v in sorted(col.unique(), key=lambda v: (str(type(v)), v))]
    values = col.to_numpy(float)
    return list(np.linspace(values.min(), values.max(), n))


def _native(value):
    return value.item() if isinstance(value, np.generic) else value


def complete_scenario(values, data, formula, *, lenient=False, weights=None, current=None) -> dict:
    """Validated scenario: every predictor present, numbers finite, levels observed.

    A predictor missing from ``values`` keeps its value in ``current`` (a partial edit
    changes only the predictors it names), else gets :func:`default_value` of ``data``
    (weighted by ``weights``).  Unknown names or bad values raise ``TraitError`` unless
    ``lenient`` (then they are dropped or replaced by the default).
    """
    from traitlets import TraitError

    names = variables(formula)
    unknown = [k for k in values if k not in names]
    if unknown and not lenient:
        raise TraitError(f"scenario names unknown predictors: {unknown}")
    merged = {**{k: v for k, v in (current or {}).items() if k in names}, **values}
    out = {}
    for name in names:
        categorical = is_categorical(data[name], name, formula)
        try:
            out[name] = _check_value(merged[name], data[name], categorical) if name in merged else None
        except (TraitError, TypeError, ValueError):
            if not lenient:
                raise
            out[name] = None
        if out[name] is None:
            out[name] = default_value(data[name], categorical, weights)
    return out


def _check_value(value, column, categorical):
    from traitlets import TraitError

    value = _native(value)
    if categorical:
        if not (column == value).any():
            raise TraitError(f"{value!r} is not an observed level of {column.name!r}")
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
        raise TraitError(f"{column.name!r} needs a finite number, got {value!r}")
    return float(value)


def match_dtypes(frame, data) -> pd.DataFrame:
    """Give the columns of a scenario frame the dtypes of ``data`` (levels of categoricals)."""
    for c in frame.columns:
        if c in data.columns and isinstance(data[c].dtype, pd.CategoricalDtype):
            frame[c] = pd.Categorical(frame[c], dtype=data[c].dtype)
    return frame


def model_kwargs(nonparallel, scale_by, included) -> dict:
    """Keyword arguments of ``ow.fit`` for non-parallel and scale effects of included predictors."""
    wanted = {"nonparallel": [v for v in nonparallel if v in included],
              "scale_by": [v for v in scale_by if v in included]}
    return {key: names for key, names in wanted.items() if names}


def link_rows(formula, data, options, extra) -> list:
    """loglik / AIC / BIC of every link for one spec, best first (``ow.compare_links``)."""
    table = compare_links(formula, data, **options, **extra)
    return [{"link": str(name), "loglik": row["loglik"], "aic": row["aic"], "bic": row["bic"],
             "converged": bool(row["converged"]), "error": "" if row["converged"] else str(row["message"])}
            for name, row in table.iterrows()]

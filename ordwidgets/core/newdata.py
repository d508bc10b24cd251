"""New rows for prediction: refuse what the fit has no answer for.

A factor level never seen in fitting (or a missing value in a factor) has no fitted effect;
encoding it as all-zero dummies would quietly give the reference level's answer.  So
:func:`new_design` refuses such rows with an
:class:`~ordwidgets.core.exceptions.UnseenLevelError` naming the column and the values, and
refuses missing columns and numbers given as text.  Missing values in a numeric column give
``nan`` rows (the honest answer).  To predict for the other rows, drop or recode the
offending ones first (the message says which values they hold).
"""
from __future__ import annotations

import warnings
import weakref

import numpy as np
import pandas as pd

from .exceptions import ArgumentError, OrdinalDataError, UnseenLevelError
from .naming import check_unique, factors_of, string_columns

__all__ = ["new_design", "prediction_frame"]

_PLANS = weakref.WeakKeyDictionary()


def new_design(res, data, columns):
    """Design matrix of ``data`` for the fitted columns ``columns`` of ``res``.

    Raises
    ------
    OrdinalDataError
        A column the model uses is missing or repeated, or a numeric column holds text.
    UnseenLevelError
        A factor holds levels (or missing values) not seen in fitting.
    """
    data = prediction_frame(res, data)
    if res.model_spec is None or not columns:
        return np.empty((len(data), 0))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            mm = res.model_spec.get_model_matrix(data, na_action="ignore")
        except Exception as exc:  # formulaic raises several evaluation error types
            raise OrdinalDataError(f"cannot build the design of the new data: {exc}") from exc
    for w in caught:
        if "outside of the nominated levels" in str(w.message):  # a factor not checked by name
            raise UnseenLevelError(f"the new data hold factor levels not seen in fitting: {w.message}")
        if not issubclass(w.category, (FutureWarning, DeprecationWarning)) and "Categorical" not in str(w.message):
            warnings.warn(w.message, w.category, stacklevel=3)
    return mm[list(columns)].to_numpy(float)


def prediction_frame(res, data):
    """``data`` (string column names) once every column the fit uses passes its check."""
    if not isinstance(data, pd.DataFrame):
        raise ArgumentError(f"predict: data must be a pandas DataFrame, got {type(data).__name__}")
    data = string_columns(data)
    plan = _plan(res)
    if plan is None:
        return data
    needed, factors, numeric = plan
    missing = [v for v in needed if v not in data.columns]
    if missing:
        raise OrdinalDataError(f"the new data lack columns the model uses: {', '.join(map(repr, missing))} "
                               f"(available: {', '.join(map(repr, map(str, data.columns[:20])))})")
    check_unique(data, needed)
    for var, categories in factors:
        _check_levels(var, data[var], categories)
    for var in numeric:
        _check_numeric(var, data[var])
    return data


def _plan(res):
    """Columns the fit reads, its single-column factors with their levels, its numeric columns."""
    spec = res.model_spec
    if spec is None:
        return None
    if res not in _PLANS:
        state = dict(spec.encoder_state)
        terms = factors_of(spec.formula)
        needed = sorted({v for t in terms for f in t for v in f.variables})
        factors, numeric = [], []
        for f in {f for t in terms for f in t}:
            kind, info = state.get(f.expr, (None, {}))
            kind = getattr(kind, "value", kind)
            if kind == "categorical" and len(f.variables) == 1:
                factors.append((next(iter(f.variables)), list(info.get("categories", []))))
            elif kind == "numerical" and f.method == "lookup":
                numeric.append(f.expr)
        _PLANS[res] = (needed, sorted(factors, key=lambda x: x[0]), sorted(numeric))
    return _PLANS[res]


def _check_levels(var, values, categories):
    missing = values.isna().to_numpy()
    if missing.any():
        raise UnseenLevelError(
            f"column {var!r} has {int(missing.sum())} missing value(s) (rows at positions "
            f"{_positions(missing)}); the fit has no effect for a missing level: fill or drop those rows"
        )
    unseen = ~values.isin(categories).to_numpy()
    if unseen.any():
        found = pd.Series(values.to_numpy()[unseen]).value_counts()
        shown = ", ".join(f"{v!r} ({n} rows)" for v, n in found.head(8).items())
        raise UnseenLevelError(
            f"column {var!r} holds levels never seen in fitting: {shown}; fitted levels: "
            f"{', '.join(map(repr, categories[:20]))}. Drop or recode those rows before predicting"
        )


def _check_numeric(var, values):
    dtype = values.dtype
    if pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_bool_dtype(dtype):
        return
    sample = ", ".join(repr(v) for v in values.dropna().head(3))
    raise OrdinalDataError(f"column {var!r} was numeric in fitting but the new data hold {dtype} values "
                           f"({sample}); convert it, e.g. with pandas.to_numeric")


def _positions(mask):
    pos = np.flatnonzero(mask)
    return ", ".join(map(str, pos[:8])) + (" ..." if len(pos) > 8 else "")

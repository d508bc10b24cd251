"""New rows for prediction: refuse what the fit has no answer for.

A factor level never seen in fitting (or a missing value in a factor) has no fitted effect;
encoding it as all-zero dummies would quietly give the reference level's answer.  So
:func:`new_design` refuses such rows with an
:class:`~ordwidgets.core.exceptions.UnseenLevelError` naming the column and the values, and
refuses missing columns and numbers given as text.  A factor column is read onto the fitted
levels by value (a plain integer column ``3`` is the fitted level ``3``), never as a number.
Missing values in a numeric column give ``nan`` rows (the honest answer); infinite design
values (``inf`` in a column, ``np.log(0)``) give ``nan`` rows too, with a
:class:`~ordwidgets.core.exceptions.DataWarning` naming the columns.  To predict for the
other rows, drop or recode the offending ones first (the message says which values they hold).
"""
from __future__ import annotations

import warnings
import weakref

import numpy as np
import pandas as pd

from .exceptions import ArgumentError, DataWarning, OrdinalDataError, UnseenLevelError
from .design import float_arithmetic
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
            mm = res.model_spec.get_model_matrix(float_arithmetic(factors_of(res.model_spec.formula), data),
                                                 na_action="ignore")
        except Exception as exc:  # formulaic raises several evaluation error types
            raise OrdinalDataError(f"cannot build the design of the new data: {exc}") from exc
    for w in caught:
        if "outside of the nominated levels" in str(w.message):  # a factor not checked by name
            raise UnseenLevelError(f"the new data hold factor levels not seen in fitting: {w.message}")
        if not issubclass(w.category, (FutureWarning, DeprecationWarning)) and "Categorical" not in str(w.message):
            warnings.warn(w.message, w.category, stacklevel=3)
    return _infinite_rows_missing(mm[list(columns)].to_numpy(float), columns)


def _infinite_rows_missing(X, columns):
    """``X`` with every row holding an infinite value set to ``nan``, warned by column.

    Fitting drops such rows with a DataWarning; a prediction keeps the row and gives it no
    answer, like a row with a missing value, instead of certain 0/1 probabilities.
    """
    inf = np.isinf(X)
    if not inf.any():
        return X
    rows = inf.any(axis=1)
    detail = ", ".join(f"{c!r}: {int(k)}" for c, k in zip(columns, inf.sum(axis=0)) if k)
    warnings.warn(f"{int(rows.sum())} of {len(X)} rows of the new data have infinite design values "
                  f"(rows per column: {detail}; rows at positions {_positions(rows)}); their "
                  "predictions are nan", DataWarning, stacklevel=4)
    X[rows] = np.nan
    return X


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
    mapped = {}
    for var, categories, lookup in factors:
        codes = _check_levels(var, data[var], categories)
        if lookup:
            mapped[var] = pd.Categorical.from_codes(codes, categories=categories)
    for var in numeric:
        _check_numeric(var, data[var])
    if mapped:  # a shallow copy: the caller's frame is left as it was
        data = data.copy(deep=False)
        for var, values in mapped.items():
            data[var] = values
    return data


def _plan(res):
    """Columns the fit reads, its single-column factors, its numeric columns.

    A factor is ``(column, fitted levels, lookup)``; ``lookup`` is true when the column is
    a formula term by itself and no other term reads it, so that the new column may be
    replaced by a categorical of the fitted levels.
    """
    spec = res.model_spec
    if spec is None:
        return None
    if res not in _PLANS:
        state = dict(spec.encoder_state)
        terms = factors_of(spec.formula)
        needed = sorted({v for t in terms for f in t for v in f.variables})
        factors, numeric = [], []
        distinct = {f for t in terms for f in t}
        computed = {v for f in distinct if f.method != "lookup" for v in f.variables}
        for f in distinct:
            kind, info = state.get(f.expr, (None, {}))
            kind = getattr(kind, "value", kind)
            if kind == "categorical" and len(f.variables) == 1:
                var = next(iter(f.variables))
                lookup = f.method == "lookup" and var not in computed
                factors.append((var, list(info.get("categories", [])), lookup))
            elif kind == "numerical" and f.method == "lookup":
                numeric.append(f.expr)
        _PLANS[res] = (needed, sorted(factors, key=lambda x: x[0]), sorted(numeric))
    return _PLANS[res]


def _check_levels(var, values, categories):
    """Codes of ``values`` among the fitted ``categories`` (matched by value: ``3`` and
    ``3.0`` are the level ``3``); refuses missing values and values that are no fitted level.
    """
    missing = values.isna().to_numpy()
    if missing.any():
        raise UnseenLevelError(
            f"column {var!r} has {int(missing.sum())} missing value(s) (rows at positions "
            f"{_positions(missing)}); the fit has no effect for a missing level: fill or drop those rows"
        )
    codes = pd.Index(categories).get_indexer(values)
    unseen = codes < 0
    if unseen.any():
        found = pd.Series(values.to_numpy()[unseen]).value_counts()
        shown = ", ".join(f"{v!r} ({n} rows)" for v, n in found.head(8).items())
        raise UnseenLevelError(
            f"column {var!r} holds levels never seen in fitting: {shown}; fitted levels: "
            f"{', '.join(map(repr, categories[:20]))}. Drop or recode those rows before predicting"
        )
    return codes


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

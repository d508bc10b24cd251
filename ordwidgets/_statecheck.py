"""Checks of a state file against the data: a safe formula and a fingerprint of the data.

The formula of a file is parsed (formulaic's parser, then Python's :mod:`ast` for the
expressions inside terms) and accepted only when it is built from data columns, numbers,
strings, lists, arithmetic, comparisons and a few known transforms (``C(x, levels=[...])``,
``np.log`` ...).  Nothing is evaluated.  The fingerprint records what a saved state depends
on: the number of rows and, for every column the model uses, its dtype, its levels and a
hash of its values in row order.
"""
from __future__ import annotations

import ast
import hashlib
import re

import numpy as np
import pandas as pd

from .core import OrdinalDataError
from .core.design import check_design_size, split_formula
from .core.naming import parsed_terms, required_columns, string_columns

__all__ = ["UnsafeFormula", "safe_formula", "used_columns", "data_fingerprint", "fingerprint_differences"]

MAX_FORMULA = 2000
MAX_LEVELS = 200
_CALLS = {"C", "log", "exp", "sqrt", "center", "scale", "I"}
_NP_CALLS = {"log", "exp", "sqrt", "log1p", "abs"}
_KEYWORDS = {"levels"}
_BINOPS = (ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow)
_COMPARE = (ast.Gt, ast.Lt, ast.GtE, ast.LtE, ast.Eq, ast.NotEq)
_QUOTED = re.compile(r"`([^`]*)`")


class UnsafeFormula(ValueError):
    """A formula from a file that is not made only of data columns and known transforms."""


def safe_formula(formula, data):
    """Refuse a formula that names anything but data columns, constants and known transforms.

    Also refuses, before any design is built, a formula whose design would be too large
    (:func:`ordwidgets.core.design.check_design_size`).

    Raises
    ------
    UnsafeFormula
    """
    if len(formula) > MAX_FORMULA or "__" in formula:
        raise UnsafeFormula(f"formula {formula[:80]!r} is longer than {MAX_FORMULA} characters or holds '__'")
    data = string_columns(data)
    columns = set(data.columns)
    try:
        response, rhs = split_formula(formula)
        terms = parsed_terms(rhs)
    except (OrdinalDataError, RecursionError) as exc:
        raise UnsafeFormula(f"formula {formula[:80]!r} does not parse: {exc}") from None
    if response not in columns:
        raise UnsafeFormula(f"the response {response!r} is not a data column")
    for term in terms:
        for factor in term:
            if factor.method == "lookup" and factor.expr not in columns:
                raise UnsafeFormula(f"formula names {factor.expr!r}, which is not a data column")
            if factor.method == "python":
                _check_expression(factor.expr, columns)
    try:
        check_design_size(rhs, data)
    except OrdinalDataError as exc:
        raise UnsafeFormula(str(exc)) from None


def _check_expression(expr, columns):
    quoted = {}

    def placeholder(match):
        quoted[f"q{len(quoted)}_"] = match.group(1)
        return f"q{len(quoted) - 1}_"

    try:
        tree = ast.parse(_QUOTED.sub(placeholder, expr), mode="eval")
    except (SyntaxError, ValueError, RecursionError):
        raise UnsafeFormula(f"the term {expr!r} is not a plain expression") from None
    unknown = [q for q in quoted.values() if q not in columns]
    if unknown:
        raise UnsafeFormula(f"the term {expr!r} names {unknown[0]!r}, which is not a data column")
    names = set(columns) | set(quoted)
    try:
        _walk(tree.body, names, expr)
    except RecursionError:
        raise UnsafeFormula(f"the term {expr[:80]!r} is nested too deeply") from None


def _walk(node, names, expr):
    if isinstance(node, ast.Call):
        _check_call(node, expr)
        for child in list(node.args) + [k.value for k in node.keywords]:
            _walk(child, names, expr)
    elif isinstance(node, ast.Name):
        if node.id not in names:
            raise UnsafeFormula(f"the term {expr!r} names {node.id!r}, which is neither a data column "
                                "nor a known transform")
    elif isinstance(node, ast.Constant):
        if not isinstance(node.value, (int, float, str)) or (isinstance(node.value, str) and len(node.value) > 200):
            raise UnsafeFormula(f"the term {expr!r} holds a constant of an unexpected kind")
    elif isinstance(node, (ast.List, ast.Tuple)):
        for child in node.elts:
            _walk(child, names, expr)
    elif isinstance(node, ast.BinOp) and isinstance(node.op, _BINOPS):
        _walk(node.left, names, expr)
        _walk(node.right, names, expr)
    elif isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        _walk(node.operand, names, expr)
    elif isinstance(node, ast.Compare) and all(isinstance(op, _COMPARE) for op in node.ops):
        for child in [node.left, *node.comparators]:
            _walk(child, names, expr)
    else:
        raise UnsafeFormula(f"the term {expr!r} uses {type(node).__name__}, which a model formula does not need")


def _check_call(node, expr):
    func = node.func
    plain = isinstance(func, ast.Name) and func.id in _CALLS
    numpy = (isinstance(func, ast.Attribute) and isinstance(func.value, ast.Name) and func.value.id == "np"
             and func.attr in _NP_CALLS)
    if not (plain or numpy):
        raise UnsafeFormula(f"the term {expr!r} calls something other than the known transforms "
                            f"({', '.join(sorted(_CALLS))}, np.{'/'.join(sorted(_NP_CALLS))})")
    bad = [k.arg for k in node.keywords if k.arg not in _KEYWORDS]
    if bad:
        raise UnsafeFormula(f"the term {expr!r} passes the argument(s) {bad}; only levels= is accepted")


def used_columns(formula, data, *, weights=None, scale_by=()):
    """Columns a saved model reads: the response, the predictors, the weights, scale-only columns."""
    data = string_columns(data)
    response, rhs = split_formula(formula)
    cols = [response, *required_columns(rhs, data)]
    cols += [weights] if weights else []
    cols += [c for c in scale_by if c in data.columns]
    return list(dict.fromkeys(cols))


def data_fingerprint(data, columns) -> dict:
    """Rows, dtypes, levels and a hash (row order included) of ``columns`` of ``data``."""
    data = string_columns(data)
    part = data[list(columns)]
    hashes = pd.util.hash_pandas_object(part, index=False).to_numpy()
    return {
        "rows": int(len(data)),
        "dtypes": {c: str(part[c].dtype) for c in columns},
        "levels": {c: _levels(part[c]) for c in columns if _is_factor(part[c])},
        "hash": "sha256:" + hashlib.sha256(np.ascontiguousarray(hashes).tobytes()).hexdigest(),
    }


def fingerprint_differences(saved, data, columns) -> list:
    """What differs between a saved fingerprint and ``data`` (empty when they match)."""
    now = data_fingerprint(data, columns)
    out = []
    if saved.get("rows") != now["rows"]:
        out.append(f"{saved.get('rows')} rows saved, {now['rows']} now")
    for c, dtype in now["dtypes"].items():
        if saved.get("dtypes", {}).get(c) != dtype:
            out.append(f"column {c!r} was {saved.get('dtypes', {}).get(c)}, is {dtype}")
    for c, levels in now["levels"].items():
        if saved.get("levels", {}).get(c) != levels:
            out.append(f"levels of {c!r} differ")
    if not out and saved.get("hash") != now["hash"]:
        out.append("the values differ (same rows, columns and levels)")
    return out


def _is_factor(col):
    return not pd.api.types.is_numeric_dtype(col.dtype) or pd.api.types.is_bool_dtype(col.dtype)


def _levels(col):
    values = col.cat.categories if isinstance(col.dtype, pd.CategoricalDtype) else col.dropna().unique()
    shown = sorted(str(v) for v in values)
    return shown if len(shown) <= MAX_LEVELS else shown[:MAX_LEVELS] + [f"... {len(shown)} levels"]

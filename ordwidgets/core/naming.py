"""Column names and formula terms: quoting, the columns a formula needs, non-string names.

Formulas follow Wilkinson notation as parsed by formulaic.  A column whose name is not a
plain identifier (spaces, ``-``, quotes, ``<``, dots, digits first) is written between
backticks: ``"rating ~ `street width` + `age-years`"``.  :func:`quote_name` and
:func:`unquote_name` are the two directions; every part of the product that writes a
formula uses them.  Column names that are not strings (an integer ``3``) are used as their
string form (``"`3`"`` in a formula); nothing is dropped silently.
"""
from __future__ import annotations

import functools
import keyword
import re
from typing import NamedTuple

import pandas as pd

from .exceptions import OrdinalDataError

__all__ = ["quote_name", "unquote_name", "string_columns", "required_columns", "check_unique",
           "parsed_terms", "factors_of", "Factor"]

_PLAIN = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
_QUOTED = re.compile(r"`[^`]*`")


def quote_name(name) -> str:
    """The formula term for column ``name``: the name itself or the name in backticks.

    Raises
    ------
    OrdinalDataError
        If the name holds a backtick, a backslash or "~" (a formula cannot quote them), is
        empty, or is "1" or ".".
    """
    text = str(name)
    if any(c in text for c in "`\\~") or not text.strip() or text in ("1", "."):
        raise OrdinalDataError(f"column name {text!r} cannot be written in a formula (it is empty, holds a "
                               "backtick, a backslash or '~', or is '1' or '.', which a formula reads as "
                               "the intercept or as 'all other columns'); rename the column")
    if _PLAIN.fullmatch(text) and not keyword.iskeyword(text):
        return text
    return f"`{text}`"


def unquote_name(term) -> str:
    """Inverse of :func:`quote_name`: ``"`street width`"`` -> ``"street width"``."""
    text = str(term).strip()
    if len(text) >= 2 and text[0] == text[-1] == "`":
        return text[1:-1]
    return text


def string_columns(data):
    """``data`` with string column names (the frame itself when they already are strings).

    Non-string names (``3``, ``2.5``, tuples) are replaced by ``str(name)``, which is how a
    formula refers to them.
    """
    if all(isinstance(c, str) for c in data.columns):
        return data
    return data.set_axis([str(c) for c in data.columns], axis=1)


def check_unique(data, names):
    """Refuse columns the model uses that appear more than once in ``data``."""
    if data.columns.is_unique and all(isinstance(c, str) for c in data.columns):
        return  # pandas caches the answer on the index: refits of the same frame pay nothing
    counts = pd.Index(map(str, data.columns)).value_counts()
    dup = [n for n in dict.fromkeys(names) if counts.get(n, 0) > 1]
    if dup:
        raise OrdinalDataError(
            "column names used by the model appear more than once in the data: "
            + ", ".join(f"{n!r} ({counts[n]} times)" for n in dup) + "; rename or drop the duplicates"
        )


def required_columns(rhs, data):
    """Data columns the right-hand side ``rhs`` needs, refusing names that are not there.

    A quoted or plain name is looked up whole (``a.b`` names the column ``"a.b"``); names
    inside a function call come from formulaic's parser.

    Raises
    ------
    OrdinalDataError
        If the formula does not parse, names columns that are not in ``data`` (the message
        lists what is available and how to quote a dotted name), or uses as a literal number
        a column whose name is that number.
    """
    columns = [str(c) for c in data.columns]
    _check_literal_names(rhs, data.columns)
    names = sorted(_needed(rhs))
    missing = [n for n in names if n not in set(columns)]
    if missing:
        available = [n for n in columns if n not in missing]
        dotted = [c for c in columns for n in missing if c.startswith(n + ".")]
        hint = f"; write a dotted name in backticks: {', '.join(quote_name(c) for c in dotted)}" if dotted else ""
        raise OrdinalDataError(
            f"columns not in the data: {', '.join(map(repr, missing))}; available: "
            f"{', '.join(map(repr, available[:20]))}{' ...' if len(available) > 20 else ''}{hint}"
        )
    return names


class Factor(NamedTuple):
    """One factor of a term: how formulaic evaluates it, its text and the columns it reads."""

    method: str  # "lookup" (a column), "python" (an expression) or "literal"
    expr: str
    variables: frozenset


@functools.lru_cache(maxsize=256)
def parsed_terms(rhs) -> tuple:
    """The terms of ``rhs`` as tuples of :class:`Factor` (the intercept term left out).

    Raises
    ------
    OrdinalDataError
        If formulaic cannot parse ``rhs``.
    """
    from formulaic import Formula

    try:
        return factors_of(Formula(rhs))
    except Exception as exc:  # formulaic raises several parser error types
        raise OrdinalDataError(f"cannot parse the predictors {rhs!r}: {exc}") from exc


def factors_of(formula) -> tuple:
    """:func:`parsed_terms` of a parsed formulaic formula (for example a model spec's)."""
    return tuple(t for t in (tuple(_factor(f) for f in term.factors if _method(f) != "literal")
                             for term in formula) if t)


def _method(factor):
    return getattr(factor.eval_method, "value", str(factor.eval_method))


def _factor(factor):
    from formulaic import Formula

    method, expr = _method(factor), str(factor.expr)
    names = {expr} if method == "lookup" else {str(v) for v in Formula(expr).required_variables}
    return Factor(method, expr, frozenset(names - {"np", "numpy"}))


def _needed(rhs):
    return {v for term in parsed_terms(rhs) for f in term for v in f.variables}


def _check_literal_names(rhs, columns):
    """A column named ``1`` (an int) and the formula ``y ~ x + 1``: refuse, do not guess."""
    if "`1`" in rhs:
        raise OrdinalDataError("the formula quotes `1`, which formulaic reads as the intercept, not as a "
                               "column named 1; rename that column")
    numeric = {str(c) for c in columns if not isinstance(c, str)}
    if not numeric:
        return
    pieces = {p.strip() for p in re.split(r"[+\-]", _QUOTED.sub(" ", rhs))}
    clash = sorted(numeric & pieces)
    if clash:
        raise OrdinalDataError(
            f"the formula uses {', '.join(clash)} as a number, and the data have columns with that "
            f"(non-string) name; write the column as {', '.join(f'`{c}`' for c in clash)} or rename it"
        )

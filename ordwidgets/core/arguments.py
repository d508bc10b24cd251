"""Rules for the public arguments, each stated once, checked in one place.

Every public entry point (``fit``, ``FitResult.predict`` and its siblings, ``FitState``'s
options, threshold edits) names its arguments' rules in a table here and calls
:func:`check_arguments` once.  A broken rule raises :class:`ArgumentError` (a
:class:`~ordwidgets.core.exceptions.OrdinalDataError` and a :class:`TypeError`) with one
message shape::

    fit: max_iter must be an integer >= 1, got -5

The idea of declaring constraints per parameter follows scikit-learn's
``_parameter_constraints``; the code is our own.
"""
from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from .exceptions import ArgumentError, ThresholdError, UnknownLinkError
from .links import LINKS, Link

__all__ = ["Rule", "aligned_values", "check_arguments", "check_keys", "check_position", "check_thresholds", "integer", "real", "one_of",
           "optional", "either", "FIT_RULES", "PREDICT_RULES", "STATE_OPTION_RULES", "KINDS"]


@dataclass(frozen=True)
class Rule:
    """What an argument must be (``describe``, for the message) and the test of it."""

    describe: str
    test: Callable[[object], bool]
    error: type = ArgumentError

    def holds(self, value) -> bool:
        try:
            return bool(self.test(value))
        except (TypeError, ValueError, OverflowError):
            return False


def _is_int(value):
    return isinstance(value, numbers.Integral) and not isinstance(value, (bool, np.bool_))


def _is_real(value):
    return isinstance(value, numbers.Real) and not isinstance(value, (bool, np.bool_))


def integer(low=None, high=None) -> Rule:
    """An integer (not a bool, not a float) in ``[low, high]``."""
    span = _span(low, high, "<=", "<=")
    return Rule(f"an integer{span}", lambda v: _is_int(v) and _inside(v, low, high, False, False))


def real(low=None, high=None, *, open_low=False, open_high=False) -> Rule:
    """A finite real number in the interval from ``low`` to ``high``."""
    span = _span(low, high, "<" if open_low else "<=", "<" if open_high else "<=")
    return Rule(f"a finite number{span}",
                lambda v: _is_real(v) and math.isfinite(v) and _inside(v, low, high, open_low, open_high))


def _span(low, high, lo_op, hi_op):
    if low is not None and high is not None:
        return f" with {low} {lo_op} value {hi_op} {high}"
    if low is not None:
        return f" {'>' if lo_op == '<' else '>='} {low}"
    return "" if high is None else f" {'<' if hi_op == '<' else '<='} {high}"


def _inside(v, low, high, open_low, open_high):
    above = low is None or (v > low if open_low else v >= low)
    below = high is None or (v < high if open_high else v <= high)
    return above and below


def one_of(*values, error=ArgumentError) -> Rule:
    """One of a fixed set of values (compared with ``==``, no coercion)."""
    listed = ", ".join(repr(v) for v in values)
    return Rule(f"one of {listed}", lambda v: isinstance(v, str) and v in values, error)


def optional(rule) -> Rule:
    """``None`` or what ``rule`` accepts."""
    return Rule(f"None or {rule.describe}", lambda v: v is None or rule.holds(v), rule.error)


def either(*rules) -> Rule:
    """What any of ``rules`` accepts."""
    return Rule(" or ".join(r.describe for r in rules), lambda v: any(r.holds(v) for r in rules))


BOOLEAN = Rule("True or False", lambda v: isinstance(v, (bool, np.bool_)))
TEXT = Rule("a string", lambda v: isinstance(v, str))
CALLABLE = Rule("a callable", callable)
NAMES = Rule("a list of predictor names (strings)",
             lambda v: isinstance(v, (list, tuple)) and all(isinstance(n, str) for n in v))
SEQUENCE = Rule("a list or tuple of levels without repeats",
                lambda v: isinstance(v, (list, tuple, np.ndarray)) and len(set(map(repr, v))) == len(v))
VECTOR = Rule("a column name or a one-dimensional array of numbers",
              lambda v: isinstance(v, str) or np.ndim(v) == 1)
LINK = Rule("one of " + ", ".join(LINKS) + " (or a Link)",
            lambda v: isinstance(v, Link) or (isinstance(v, str) and v.strip().lower() in LINKS),
            UnknownLinkError)
FRAME = Rule("a pandas DataFrame", lambda v: hasattr(v, "columns") and hasattr(v, "index"))

#: Prediction kinds of :meth:`~ordwidgets.core.results.FitResult.predict`.
KINDS = ("probabilities", "cumulative", "latent", "most_likely")

FIT_RULES = {
    "formula": TEXT,
    "link": LINK,
    "weights": optional(VECTOR),
    "levels": optional(SEQUENCE),
    "max_iter": integer(1, 100_000),
    "tol": real(0, 1, open_low=True),
    "keep_data": BOOLEAN,
    "callback": optional(CALLABLE),
    "nonparallel": optional(NAMES),
    "scale_by": optional(NAMES),
}

PREDICT_RULES = {
    "data": optional(FRAME),
    "kind": one_of(*KINDS),
    "level": Rule("strictly between 0 and 1 (or None)",
                  lambda v: v is None or real(0, 1, open_low=True, open_high=True).holds(v)),
}

#: Keys of ``FitState(options=...)``: the fit options a state passes on to ``fit``.
STATE_OPTION_RULES = {
    "weights": optional(VECTOR),
    "levels": optional(SEQUENCE),
    "quadrature": optional(integer(1, 1000)),
    "cluster": optional(Rule("a column name", lambda v: isinstance(v, str))),
    "weight_kind": one_of("frequency", "sampling"),
}


def check_arguments(where, rules, values):
    """Check every argument in ``values`` that has a rule; raise on the first broken one.

    Parameters
    ----------
    where : str
        Name of the entry point, the first word of the message.
    rules : dict
        ``{argument: Rule}``.
    values : dict
        ``{argument: value}`` (for example ``locals()`` at the top of a function); entries
        without a rule are ignored.

    Raises
    ------
    ArgumentError, UnknownLinkError
        ``"<where>: <argument> must be <rule>, got <value>"``.
    """
    for name, rule in rules.items():
        if name in values and not rule.holds(values[name]):
            raise rule.error(f"{where}: {name} must be {rule.describe}, got {_show(values[name])}")


def check_keys(where, rules, mapping):
    """Refuse keys of ``mapping`` that have no rule, then check the values.

    Raises
    ------
    ArgumentError
        For a non-dict, an unknown key (the message lists the accepted ones) or a bad value.
    """
    if not isinstance(mapping, dict):
        raise ArgumentError(f"{where} must be a dict, got {_show(mapping)}")
    unknown = [k for k in mapping if k not in rules]
    if unknown:
        raise ArgumentError(f"{where}: unknown key(s) {', '.join(map(repr, unknown))}; "
                            f"accepted: {', '.join(map(repr, rules))}")
    check_arguments(where, rules, mapping)


def check_position(where, name, value, size):
    """Refuse a position that is not an integer in ``0..size-1`` (negative ones too)."""
    check_arguments(where, {name: integer(0, size - 1)}, {name: value})


def aligned_values(where, name, values, index):
    """The values of a per-row argument in the order of ``index``: the one alignment rule.

    Arrays and lists are taken by position.  A pandas Series is taken by its labels: as it
    is when its index equals ``index`` (same labels, same order), else re-ordered onto
    ``index`` when every label of ``index`` is in its index (a shuffled or larger Series).
    Labels cannot be matched when some are missing, or when either index repeats a label;
    then the argument is refused rather than read by position.

    Parameters
    ----------
    where : str
        Name of the entry point, the first word of the message.
    name : str
        Name of the argument (``"weights"``, ``"cluster"``, ``"x"``).
    values : array_like or pandas.Series
    index : pandas.Index
        Labels of the rows the values belong to (the data's or the fitted rows' index).

    Returns
    -------
    ndarray or pandas.Series
        An array as given (its length is the caller's rule), or the Series on ``index``
        (its dtype kept, a categorical stays one).

    Raises
    ------
    ArgumentError
        A Series whose labels do not cover ``index`` or cannot be matched one to one.
    """
    if not isinstance(values, pd.Series):
        return np.asarray(values)
    if values.index.equals(index):
        return values
    if not (values.index.is_unique and index.is_unique):
        raise ArgumentError(f"{where}: {name} is a pandas Series whose index differs from the data's and one of "
                            "them repeats labels, so its rows cannot be matched; pass an array (taken by position) "
                            "or a Series with the data's index")
    missing = index.difference(values.index, sort=False)
    if len(missing):
        shown = ", ".join(map(repr, missing[:3])) + (" ..." if len(missing) > 3 else "")
        raise ArgumentError(f"{where}: {name} is a pandas Series without the labels of {len(missing)} of the "
                            f"{len(index)} rows ({shown}); give it the data's index, or pass an array "
                            "(taken by position)")
    return values.reindex(index)


def _show(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def check_thresholds(values, names=None):
    """The one rule of threshold values: one finite number per threshold, strictly increasing.

    Every entry point that takes thresholds calls this (``FitState.thresholds`` and
    ``set_threshold``, state files, ``FitResult.error_bounds`` / ``loglik_at`` and the
    residuals and residual diagnostics with ``thresholds=``), so the same bad values get the
    same message, which names the threshold by its label (``"fair->good"``).

    Parameters
    ----------
    values : array_like
    names : sequence of str, optional
        The fit's threshold labels (fixes the count); without them thresholds are named by
        position.

    Returns
    -------
    ndarray
        The values as a new float array.

    Raises
    ------
    ThresholdError
        Not numbers, not one per threshold, not finite, or not strictly increasing.
    """
    try:
        theta = np.array(values)
    except (TypeError, ValueError, OverflowError):
        theta = None
    numeric = theta is not None and theta.dtype.kind in "iuf" and not (
        theta.ndim == 1 and any(isinstance(v, (bool, np.bool_)) for v in values))  # no text, no bool
    theta = theta.astype(float) if numeric else None
    labels = None if names is None else [str(n) for n in names]
    count = len(theta) if labels is None and theta is not None and theta.ndim == 1 else None
    if theta is None or theta.ndim != 1 or (labels is not None and len(theta) != len(labels)):
        want = "numbers" if labels is None else f"{len(labels)} numbers, one per threshold ({', '.join(labels)})"
        shown = repr(values) if len(repr(values)) <= 80 else f"{np.shape(values)}-shaped input"
        raise ThresholdError(f"thresholds must be {want}; got {shown}")
    labels = labels if labels is not None else [f"#{j + 1}" for j in range(count)]
    for label, v in zip(labels, theta):
        if not math.isfinite(v):
            raise ThresholdError(f"threshold {label!r} must be a finite number, got {float(v)!r}")
    for j in np.flatnonzero(np.diff(theta) <= 0)[:1]:
        raise ThresholdError(f"threshold {labels[j + 1]!r} at {theta[j + 1]:.6g} must lie above {labels[j]!r} "
                             f"at {theta[j]:.6g}: thresholds keep their order (strictly increasing)")
    return theta

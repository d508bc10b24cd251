"""JSON files of a :class:`~ordwidgets.state.FitState`: spec, link, edits, scenarios, seeds.

Reading is defensive: the file is size-limited, parsed with :func:`json.loads` (no
``NaN``/``Infinity`` constants), checked key by key against a fixed schema, and the formula
is parsed (never evaluated) and accepted only when it is made of data columns, constants
and a few known transforms (:mod:`ordwidgets._statecheck`).  Data never come from the
file, but a fingerprint of the data the state was saved on (rows, dtypes, levels and a
hash of the columns the model uses) does: loading onto other data is refused unless
``spec_only=True`` asks to apply only the model spec, dropping edits and row selections
with a warning.  Every failure is a :class:`StateFileError`.
"""
from __future__ import annotations

import json
import math
import os
import warnings

import pandas as pd

from .core import DataWarning, link_names
from .core.arguments import integer
from ._statecheck import UnsafeFormula, data_fingerprint, fingerprint_differences, safe_formula, used_columns

__all__ = ["StateFileError", "state_to_dict", "write_state", "read_state", "FORMAT"]

FORMAT = "ordwidgets-state"
VERSION = 2
MAX_BYTES = 1_000_000
_NAME_LIST_KEYS = ("dropped", "nonparallel", "scale_by")


class StateFileError(ValueError):
    """A state file that is malformed, hostile, or does not match the data."""


def state_to_dict(state) -> dict:
    """Plain description of a state (JSON types only)."""
    weights = state.options.get("weights")
    if weights is not None and not isinstance(weights, str):
        raise StateFileError("weights given as an array cannot be saved; pass the column name")
    levels = state.options.get("levels")
    unsaved = [f"{k}={v!r}" for k, v in (("random_intercepts", list(state.random_intercepts)),
                                         *((k, state.options.get(k)) for k in ("quadrature", "cluster", "weight_kind")))
               if v and v != "frequency"]
    if unsaved:  # a file without them would load back as another model
        raise StateFileError(f"state files do not hold {', '.join(unsaved)} yet; save the fit's arguments "
                             "in code (ow.fit(..., random_intercepts=..., cluster=...)) instead")
    return {
        "format": FORMAT, "version": VERSION, "formula": state.formula, "link": state.link,
        "weights": weights, "levels": None if levels is None else [_plain(v) for v in levels],
        "dropped": list(state.dropped), "nonparallel": list(state.nonparallel),
        "scale_by": list(state.scale_by), "thresholds": list(state.thresholds),
        "scenario": {k: _plain(v) for k, v in state.scenario.items()},
        "baseline": {k: _plain(v) for k, v in state.baseline.items()}, "focus": state.focus,
        "residual_draws": state.residual_draws, "residual_seed": state.residual_seed,
        "selection": list(state.selection),
        "data": data_fingerprint(state.data, _used(state.formula, state.data, weights, state.scale_by)),
    }


def _used(formula, data, weights, scale_by):
    try:
        return used_columns(formula, data, weights=weights, scale_by=scale_by)
    except ValueError as exc:
        raise StateFileError(f"the saved model does not match these data: {exc}") from None


def _plain(value):
    return value.item() if hasattr(value, "item") else value


def write_state(state, path):
    """Write :func:`state_to_dict` as indented JSON."""
    text = json.dumps(state_to_dict(state), indent=1, allow_nan=False)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(text + "\n")


def read_state(cls, path, data, *, spec_only=False, **kwargs):
    """Check a state file against the schema and ``data``, then rebuild the state.

    Parameters
    ----------
    spec_only : bool
        Apply only the model spec (formula, link, options, predictor roles) to ``data``
        even when they are not the data the file was saved on; the saved threshold edits,
        scenarios and row selection are then dropped with a :class:`DataWarning`.

    Raises
    ------
    StateFileError
        For every problem: the file, its formula, other data (without ``spec_only``), a
        model that cannot be fitted, edits that do not fit the model.
    """
    if not isinstance(data, pd.DataFrame):
        raise StateFileError(f"data must be a pandas DataFrame, got {type(data).__name__}")
    spec = check_document(parse_file(path), data)
    used = _used(spec["formula"], data, spec["weights"], spec["scale_by"])
    differences = fingerprint_differences(spec["data"], data, used)
    if differences and not spec_only:
        raise StateFileError("the file was saved on other data (" + "; ".join(differences) + "); pass "
                             "spec_only=True to apply only the model spec (edits and selections are dropped)")
    options = {k: spec[k] for k in ("weights", "levels") if spec[k] is not None}
    try:
        state = cls(data=data, formula=spec["formula"], link=spec["link"], options=options,
                    dropped=tuple(spec["dropped"]), nonparallel=tuple(spec["nonparallel"]),
                    scale_by=tuple(spec["scale_by"]), **kwargs)
    except Exception as exc:  # noqa: BLE001 - every failure of a load is a StateFileError
        raise StateFileError(f"the saved model cannot be fitted to these data: {exc}") from exc
    if state.error:
        raise StateFileError(f"the saved model cannot be fitted to these data: {state.error}")
    if spec_only:
        _drop_edits(spec)
    _apply_edits(state, spec)
    return state


def _drop_edits(spec):
    dropped = [k for k in ("thresholds", "scenario", "baseline", "selection") if spec[k]]
    if dropped:
        warnings.warn(f"spec_only: the saved {', '.join(dropped)} belong to the data the file was saved on "
                      "and were dropped", DataWarning, stacklevel=4)
    spec["scenario"], spec["baseline"], spec["selection"], spec["thresholds"] = {}, {}, [], None


def _apply_edits(state, spec):
    try:
        with state.batch():
            if spec["thresholds"] is not None:
                state.thresholds = tuple(spec["thresholds"])
            state.scenario, state.baseline = spec["scenario"], spec["baseline"]
            state.focus = spec["focus"] or state.focus
            state.residual_draws, state.residual_seed = spec["residual_draws"], spec["residual_seed"]
            state.selection = tuple(spec["selection"])
    except Exception as exc:  # noqa: BLE001 - TraitError, refused edits: all StateFileError here
        raise StateFileError(f"the saved edits do not fit the model: {exc}") from exc


def parse_file(path) -> dict:
    """Read at most :data:`MAX_BYTES` and parse strict JSON into a dict."""
    try:
        size = os.path.getsize(path)
        if size > MAX_BYTES:
            raise StateFileError(f"state file is {size:,} bytes; at most {MAX_BYTES:,} accepted")
        with open(path, "r", encoding="utf-8") as fh:  # read at most the limit (devices, pipes)
            text = fh.read(MAX_BYTES + 1)
        if len(text) > MAX_BYTES:
            raise StateFileError(f"state file holds more than {MAX_BYTES:,} bytes")
        doc = json.loads(text, parse_constant=_refuse_constant)
    except StateFileError:
        raise
    except (OSError, UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise StateFileError(f"not a readable state file ({type(exc).__name__}: {exc})") from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise StateFileError(f"not an ordwidgets state file (expected a JSON object with format={FORMAT!r})")
    return doc


def _refuse_constant(name):
    raise StateFileError(f"state file holds the non-JSON constant {name}")


_SCHEMA = {
    "format": str, "version": int, "formula": str, "link": str, "weights": (str, type(None)),
    "levels": (list, type(None)), "dropped": list, "nonparallel": list, "scale_by": list,
    "thresholds": list, "scenario": dict, "baseline": dict, "focus": str,
    "residual_draws": int, "residual_seed": int, "selection": list, "data": dict,
}
_DATA_SCHEMA = {"rows": int, "dtypes": dict, "levels": dict, "hash": str}
_INTEGERS = {"residual_draws": integer(1, 50), "residual_seed": integer(0, 2 ** 32 - 1)}


def check_document(doc, data) -> dict:
    """Validate every key of a parsed file; return it unchanged when it passes."""
    extra = sorted(set(doc) - set(_SCHEMA))
    missing = sorted(set(_SCHEMA) - set(doc))
    if extra or missing:
        raise StateFileError(f"state file keys do not match the format (unknown: {extra}, missing: {missing})")
    for key, kind in _SCHEMA.items():
        if not isinstance(doc[key], kind) or isinstance(doc[key], bool) and kind is int:
            raise StateFileError(f"state file entry {key!r} has the wrong type ({type(doc[key]).__name__})")
    if doc["version"] != VERSION:
        raise StateFileError(f"state file version {doc['version']} is not supported (expected {VERSION})")
    if doc["link"] not in link_names():
        raise StateFileError(f"unknown link {doc['link']!r}; expected one of {list(link_names())}")
    check_formula(doc["formula"], data)
    _check_contents(doc, data)
    return doc


def check_formula(formula, data):
    """Accept only formulas made of data columns, constants, operators and known transforms."""
    try:
        safe_formula(formula, data)
    except UnsafeFormula as exc:
        raise StateFileError(f"formula refused: {exc}") from None


def _check_contents(doc, data):
    columns = {str(c) for c in data.columns}
    if doc["weights"] is not None and doc["weights"] not in columns:
        raise StateFileError(f"weights column {doc['weights']!r} is not in the data")
    for key in _NAME_LIST_KEYS:
        if not all(isinstance(v, str) and v in columns for v in doc[key]):
            raise StateFileError(f"state file entry {key!r} must list data columns")
    if not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in doc["thresholds"]):
        raise StateFileError("state file entry 'thresholds' must list numbers")  # the rest: the one
        # threshold rule (check_thresholds) when the edits are applied, naming the threshold
    for key, rule in _INTEGERS.items():
        if not rule.holds(doc[key]):
            raise StateFileError(f"state file entry {key!r} must be {rule.describe}, got {doc[key]!r}")
    fp = doc["data"]
    if set(fp) != set(_DATA_SCHEMA) or not all(isinstance(fp[k], t) for k, t in _DATA_SCHEMA.items()):
        raise StateFileError("state file entry 'data' (the fingerprint of the data) is malformed")
    for key in ("scenario", "baseline"):
        if not all(isinstance(k, str) and _scalar(v) for k, v in doc[key].items()):
            raise StateFileError(f"state file entry {key!r} must map column names to plain values")
    if doc["levels"] is not None and not all(_scalar(v) for v in doc["levels"]):
        raise StateFileError("levels must be plain values")
    if not all(isinstance(v, int) and not isinstance(v, bool) and 0 <= v < 2 ** 63 for v in doc["selection"]):
        raise StateFileError("selection must list row positions")


def _number(value):
    """A finite JSON number that converts to a float (huge integers overflow)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return False
    return abs(value) < 1e300 if isinstance(value, int) else math.isfinite(value)


def _scalar(value):
    return (isinstance(value, str) and len(value) <= 10_000) or isinstance(value, bool) or _number(value)

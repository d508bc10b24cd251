"""JSON files of a :class:`~ordwidgets.state.FitState`: spec, link, edits, scenarios, seeds.

Reading is defensive: the file is size-limited, parsed with :func:`json.loads` (no
``NaN``/``Infinity`` constants), checked key by key against a fixed schema, and the formula
is accepted only when every name in it is a column of the data or one of a few known
transforms.  Nothing from the file is evaluated before those checks pass; data never
comes from the file.
"""
from __future__ import annotations

import json
import math
import os
import re

from .core import link_names

__all__ = ["StateFileError", "state_to_dict", "write_state", "read_state", "FORMAT"]

FORMAT = "ordwidgets-state"
VERSION = 1
MAX_BYTES = 1_000_000
_TRANSFORMS = {"C", "np", "log", "exp", "sqrt", "center", "scale", "I"}
_NP_FUNCS = {"log", "exp", "sqrt", "log1p", "abs"}
_FORMULA_CHARS = re.compile(r"^[A-Za-z0-9_ .~+\-*:/(),^]*$")
_NAME_LIST_KEYS = ("dropped", "nonparallel", "scale_by")


class StateFileError(ValueError):
    """A state file that is malformed, hostile, or does not match the data."""


def state_to_dict(state) -> dict:
    """Plain description of a state (JSON types only)."""
    weights = state.options.get("weights")
    if weights is not None and not isinstance(weights, str):
        raise StateFileError("weights given as an array cannot be saved; pass the column name")
    levels = state.options.get("levels")
    return {
        "format": FORMAT, "version": VERSION, "formula": state.formula, "link": state.link,
        "weights": weights, "levels": None if levels is None else [_plain(v) for v in levels],
        "dropped": list(state.dropped), "nonparallel": list(state.nonparallel),
        "scale_by": list(state.scale_by), "thresholds": list(state.thresholds),
        "scenario": {k: _plain(v) for k, v in state.scenario.items()},
        "baseline": {k: _plain(v) for k, v in state.baseline.items()}, "focus": state.focus,
        "residual_draws": state.residual_draws, "residual_seed": state.residual_seed,
        "selection": list(state.selection),
    }


def _plain(value):
    return value.item() if hasattr(value, "item") else value


def write_state(state, path):
    """Write :func:`state_to_dict` as indented JSON."""
    text = json.dumps(state_to_dict(state), indent=1, allow_nan=False)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(text + "\n")


def read_state(cls, path, data, **kwargs):
    """Check a state file against the schema and ``data``, then rebuild the state."""
    spec = check_document(parse_file(path), data)
    options = {k: spec[k] for k in ("weights", "levels") if spec[k] is not None}
    state = cls(data=data, formula=spec["formula"], link=spec["link"], options=options,
                dropped=tuple(spec["dropped"]), nonparallel=tuple(spec["nonparallel"]),
                scale_by=tuple(spec["scale_by"]), **kwargs)
    if state.error:
        raise StateFileError(f"the saved model cannot be fitted to these data: {state.error}")
    _apply_edits(state, spec)
    return state


def _apply_edits(state, spec):
    import traitlets

    try:
        with state.batch():
            state.thresholds = tuple(spec["thresholds"])
            state.scenario, state.baseline = spec["scenario"], spec["baseline"]
            state.focus = spec["focus"] or state.focus
            state.residual_draws, state.residual_seed = spec["residual_draws"], spec["residual_seed"]
            state.selection = tuple(spec["selection"])
    except traitlets.TraitError as exc:
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
    "residual_draws": int, "residual_seed": int, "selection": list,
}


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
    """Accept only formulas made of data columns, numbers, operators and known transforms."""
    columns = {str(c) for c in data.columns}
    if len(formula) > 2000 or not _FORMULA_CHARS.match(formula) or "__" in formula:
        raise StateFileError(f"formula {formula[:80]!r} holds characters a model formula does not need")
    for match in re.finditer(r"[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)*", formula):
        name = match.group(0)
        head, _, attr = name.partition(".")
        if name in columns or (not attr and head in _TRANSFORMS) or (head == "np" and attr in _NP_FUNCS):
            continue
        raise StateFileError(f"formula names {name!r}, which is neither a data column nor a known transform")


def _check_contents(doc, data):
    columns = {str(c) for c in data.columns}
    if doc["weights"] is not None and doc["weights"] not in columns:
        raise StateFileError(f"weights column {doc['weights']!r} is not in the data")
    for key in _NAME_LIST_KEYS:
        if not all(isinstance(v, str) and v in columns for v in doc[key]):
            raise StateFileError(f"state file entry {key!r} must list data columns")
    if not all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in doc["thresholds"]):
        raise StateFileError("thresholds must be finite numbers")
    for key in ("scenario", "baseline"):
        if not all(isinstance(k, str) and _scalar(v) for k, v in doc[key].items()):
            raise StateFileError(f"state file entry {key!r} must map column names to plain values")
    if doc["levels"] is not None and not all(_scalar(v) for v in doc["levels"]):
        raise StateFileError("levels must be plain values")
    if not all(isinstance(v, int) and not isinstance(v, bool) for v in doc["selection"]):
        raise StateFileError("selection must list row positions")


def _scalar(value):
    return isinstance(value, (str, int, float, bool)) and not (isinstance(value, float) and not math.isfinite(value))

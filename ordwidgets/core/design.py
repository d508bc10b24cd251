"""From a formula and a data frame to the arrays the fitter needs.

Every refusal raises an :class:`~ordwidgets.core.exceptions.OrdinalDataError` naming the
column or level; every repair (rows dropped for missing or infinite values, declared levels
without observations) is reported with a
:class:`~ordwidgets.core.exceptions.DataWarning`.  Nothing is changed silently.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .arguments import aligned_values
from .exceptions import CollinearityError, DataWarning, OrdinalDataError
from .naming import check_unique, parsed_terms, required_columns, string_columns

__all__ = ["PreparedData", "prepare", "split_formula", "encode_response", "threshold_labels"]


@dataclass(eq=False)
class PreparedData:
    """Arrays for one fit, in the rows kept after cleaning (original row order)."""

    X: np.ndarray
    y: np.ndarray
    weights: np.ndarray | None
    levels: tuple
    columns: tuple[str, ...]
    response: str
    rhs: str
    model_spec: object | None
    index: pd.Index
    notes: list[str] = field(default_factory=list)
    frame: pd.DataFrame | None = None  # the rows kept (the caller's frame itself when none dropped)


def split_formula(formula):
    """Split ``"response ~ terms"`` into its two sides.

    Raises
    ------
    OrdinalDataError
        If the formula has no single ``~`` or no response.
    """
    if not isinstance(formula, str) or formula.count("~") != 1:
        raise OrdinalDataError(
            f"formula must look like 'response ~ predictors', got {formula!r}"
        )
    lhs, rhs = (part.strip() for part in formula.split("~"))
    if not lhs:
        raise OrdinalDataError(f"formula {formula!r} names no response")
    return lhs.strip("`"), rhs or "1"


def threshold_labels(levels):
    """Our labels for thresholds: ``"poor->fair"`` is the cut between two adjacent levels."""
    labels = [str(v) for v in levels]
    return [f"{a}->{b}" for a, b in zip(labels[:-1], labels[1:])]


def encode_response(values, levels=None, *, name="response"):
    """Turn a response column into integer codes ``0..J-1`` and the ordered levels.

    Accepted: an ordered pandas Categorical (its order), integers (sorted), or any values
    with an explicit ``levels=`` order.  Unordered strings without ``levels=`` are refused:
    alphabetical order is almost never the order of a rating scale.  An ordered Categorical
    together with a ``levels=`` that is not exactly its categories in its order is refused
    too: neither order silently wins.
    """
    s = pd.Series(values)
    if levels is not None:
        _check_levels_agree(s, levels, name)
        levels = list(levels)
        if len(set(levels)) != len(levels):
            raise OrdinalDataError(f"levels= for {name!r} repeats a level: {levels!r}")
        lookup = {lvl: i for i, lvl in enumerate(levels)}
        raw = s.astype(object)
        bad = sorted({repr(v) for v in raw if v not in lookup})
        if bad:
            raise OrdinalDataError(
                f"response {name!r} has values not in levels=: {', '.join(bad[:8])}"
            )
        return np.array([lookup[v] for v in raw], dtype=np.intp), tuple(levels)
    if isinstance(s.dtype, pd.CategoricalDtype):
        if not s.dtype.ordered:
            raise OrdinalDataError(
                f"response {name!r} is an unordered categorical; make it ordered or pass levels="
            )
        return s.cat.codes.to_numpy(np.intp), tuple(s.cat.categories)
    if pd.api.types.is_bool_dtype(s.dtype) or pd.api.types.is_integer_dtype(s.dtype):
        codes = _small_integer_codes(s)
        if codes is not None:
            return codes
        uniq = np.sort(s.unique())
        return np.searchsorted(uniq, s.to_numpy()).astype(np.intp), tuple(uniq.tolist())
    if pd.api.types.is_float_dtype(s.dtype) and np.all(np.mod(s.to_numpy(), 1) == 0):
        uniq = np.sort(s.unique())
        return np.searchsorted(uniq, s.to_numpy()).astype(np.intp), tuple(uniq.tolist())
    raise OrdinalDataError(
        f"response {name!r} has unordered values ({s.dtype}); pass levels= in order, "
        "or use an ordered pandas Categorical"
    )


#: Widest span of integer codes encoded by a lookup table instead of a sort.
LOOKUP_SPAN = 65_536


def _small_integer_codes(s):
    """Codes and sorted levels of a numpy integer column whose values span less than
    :data:`LOOKUP_SPAN`, by a lookup table (one counting pass and one gather; no sort);
    ``None`` for other columns."""
    if not (isinstance(s.dtype, np.dtype) and s.dtype.kind in "iu") or not len(s):
        return None
    v = s.to_numpy()
    lo, hi = int(v.min()), int(v.max())
    if hi - lo >= LOOKUP_SPAN:
        return None
    shifted = v.astype(np.intp, copy=False)  # no wrap-around of narrow types below
    if lo:
        shifted = shifted - lo
    present = np.bincount(shifted, minlength=hi - lo + 1) > 0
    lookup = np.cumsum(present, dtype=np.intp) - 1
    levels = (np.flatnonzero(present) + lo).astype(s.dtype)
    return lookup[shifted], tuple(levels.tolist())


def _check_levels_agree(s, levels, name):
    """Refuse ``levels=`` that contradicts the order of an ordered Categorical response."""
    if not (isinstance(s.dtype, pd.CategoricalDtype) and s.dtype.ordered):
        return
    own = list(s.cat.categories)
    if own != list(levels):
        raise OrdinalDataError(
            f"response {name!r} is an ordered categorical with levels {own!r} but levels= gives "
            f"{list(levels)!r}; drop levels= or reorder the column (s.cat.reorder_categories)")


def check_mixed_types(data, columns):
    for c in columns:
        col = data[c]
        if col.dtype != object:
            continue
        vals = col.dropna()
        numeric = vals.map(lambda v: isinstance(v, (int, float, np.number)) and not isinstance(v, bool))
        if numeric.any() and not numeric.all():
            bad = sorted({repr(v) for v in vals[~numeric]})[:5]
            raise OrdinalDataError(
                f"column {c!r} mixes numbers with non-numeric values ({', '.join(bad)}); "
                "clean it or convert it explicitly"
            )


def weights_array(weights, data):
    """The weights of the rows of ``data`` as a Series on its index (``None`` unweighted).

    ``weights`` is a column name, an array (by position) or a Series (by its labels, see
    :func:`~ordwidgets.core.arguments.aligned_values`).
    """
    if weights is None:
        return None
    if isinstance(weights, str):
        if weights not in data.columns:
            raise OrdinalDataError(f"weights column {weights!r} is not in the data")
        w = data[weights]
    else:
        values = np.asarray(aligned_values("fit", "weights", weights, data.index))
        if values.ndim != 1 or len(values) != len(data):
            raise OrdinalDataError(f"weights has shape {values.shape} for {len(data)} rows; "
                                   "give one weight per row (or a column name)")
        w = pd.Series(values, index=data.index)
    if not pd.api.types.is_numeric_dtype(w.dtype) or pd.api.types.is_bool_dtype(w.dtype):
        raise OrdinalDataError(f"weights must be numeric, got {w.dtype}")
    w = w.astype(float)
    if (~np.isfinite(w.dropna())).any():
        raise OrdinalDataError("weights must be finite")
    if (w.dropna() < 0).any():
        raise OrdinalDataError("weights must be non-negative")
    return w


def unusable_rows(data, response, columns, w):
    """Rows with missing (or infinite) values, with per-column tallies.

    Returns
    -------
    keep : pandas.Series of bool
        Rows that can be used.
    tally : dict
        ``{"missing": (rows, counts), "infinite": (rows, counts)}`` where ``counts`` is a
        Series of cells per column; tallies of disjoint row sets add up.
    """
    cols = {c: data[c] for c in [response] + columns}
    if w is not None:
        cols["(weights)"] = w
    bad = np.zeros(len(data), dtype=bool)
    counts = {}
    clean = {name for name, col in cols.items() if _all_finite(col)}
    for name, col in cols.items():
        if name in clean:
            counts[name] = 0
            continue
        miss = np.isnan(col.to_numpy()) if _plain_float(col) else col.isna().to_numpy()
        counts[name] = np.count_nonzero(miss)
        bad |= miss
    tally = {"missing": (np.count_nonzero(bad), pd.Series(counts))}
    rows, counts = np.zeros(len(data), dtype=bool), {}
    for c in columns:
        col = data[c]
        if c in clean:
            counts[c] = 0
        elif pd.api.types.is_numeric_dtype(col.dtype):
            inf = np.isinf(col.to_numpy() if _plain_float(col) else col.to_numpy(dtype=float, na_value=np.nan))
            counts[c] = np.count_nonzero(inf)
            rows |= inf
    if counts:
        tally["infinite"] = (np.count_nonzero(rows), pd.Series(counts))
        bad |= rows
    bad = pd.Series(bad, index=data.index)
    return ~bad, tally


def _all_finite(col):
    """A numpy float column with no missing or infinite value, known from one sum (``nan``
    and ``inf`` propagate; a sum that overflows only sends the column to the cell checks).
    A numpy integer or boolean column cannot hold either."""
    if isinstance(col.dtype, np.dtype) and col.dtype.kind in "iub":
        return True
    if not _plain_float(col):
        return False
    with np.errstate(over="ignore", invalid="ignore"):
        return bool(np.isfinite(np.add.reduce(col.to_numpy())))


def _plain_float(col):
    """A numpy float column (no extension type): missing is NaN, read without a copy."""
    return isinstance(col.dtype, np.dtype) and col.dtype.kind == "f"


def unusable_notes(tally):
    """Plain-language notes (with counts per column) for a tally of :func:`unusable_rows`."""
    notes = []
    for kind in ("missing", "infinite"):
        rows, counts = tally.get(kind, (0, None))
        if rows:
            detail = ", ".join(f"{c}: {int(n)}" for c, n in counts.items() if n)
            notes.append(f"dropped {rows} rows with {kind} values ({detail})")
    return notes


def _drop_unusable(data, response, columns, w):
    """Drop rows with missing (or infinite) values; warn with counts per column."""
    keep, tally = unusable_rows(data, response, columns, w)
    notes = unusable_notes(tally)
    for n in notes:
        warnings.warn(n, DataWarning, stacklevel=4)
    return keep, notes


#: Rows formulaic reads to learn the model spec when every term is a numeric column.
SPEC_ROWS = 8


def design_matrix(rhs, data):
    """The design columns of ``rhs`` on ``data``: Fortran-order array, names, model spec.

    When every term is a numeric data column the columns are copied straight from the frame
    and formulaic builds the model spec from the first rows only (such columns have no
    state to learn); otherwise formulaic encodes all rows.
    """
    bare = _numeric_column_terms(rhs, data)
    if bare:
        key = (rhs, tuple((c, str(data[c].dtype)) for c in bare))
        if key not in _BARE_SPECS:
            mm = _model_matrix(rhs, data.iloc[:SPEC_ROWS])
            cols = [c for c in mm.columns if c != "Intercept"]
            ok = [str(c) for c in cols] == bare  # else formulaic read the terms otherwise
            _remember(key, mm.model_spec if ok else None)
        spec = _BARE_SPECS[key]
        if spec is not None:
            return _column_major(data, bare, len(data)), tuple(bare), spec
    mm = _model_matrix(rhs, float_arithmetic(parsed_terms(rhs), data))
    cols = [c for c in mm.columns if c != "Intercept"]
    nonnum = [c for c in cols if not pd.api.types.is_numeric_dtype(mm[c].dtype)]
    if nonnum:
        raise OrdinalDataError(f"predictor columns are not numeric: {', '.join(nonnum)}")
    return _column_major(mm, cols, len(data)), tuple(str(c) for c in cols), mm.model_spec


#: Model specs of formulas whose terms are all plain numeric columns, by formula and column
#: types (such a spec learns nothing from the rows); ``None`` where formulaic read the terms
#: otherwise.  Refits of the same formula (every click of a panel) skip formulaic.
_BARE_SPECS = {}
_BARE_SPECS_MAX = 256


def _remember(key, spec):
    if len(_BARE_SPECS) >= _BARE_SPECS_MAX:
        _BARE_SPECS.pop(next(iter(_BARE_SPECS)))
    _BARE_SPECS[key] = spec


def _model_matrix(rhs, data):
    from formulaic import model_matrix

    try:
        return model_matrix(rhs, data, na_action="ignore")
    except Exception as exc:
        raise OrdinalDataError(f"cannot build the design for {rhs!r}: {exc}") from exc


def float_arithmetic(terms, data):
    """``data`` with the integer columns that formula arithmetic reads as float64.

    Integer arithmetic wraps around silently (``I(u * 100)`` on a uint8 column, ``I(v ** 2)``
    on int64 values near 1e10, the product of an interaction); in doubles it does not.
    Columns read by a ``C(...)`` factor keep their type, so their level labels stay as they
    are (``C(site)[T.3]``); one that arithmetic reads too is left as it is, with a warning.

    Parameters
    ----------
    terms : tuple
        The formula's terms, as :func:`~ordwidgets.core.naming.parsed_terms` gives them.
    data : pandas.DataFrame

    Returns
    -------
    pandas.DataFrame
        ``data`` itself when nothing needs a cast, else a copy with those columns cast.
    """
    factor, arithmetic = _column_uses(terms)
    integer = {c for c in arithmetic if c in data.columns and _plain_integer(data[c])}
    for c in sorted(integer & factor):
        warnings.warn(f"integer column {c!r} is both a factor (C(...)) and used in arithmetic, which is "
                      "done in its integer type and can wrap around; convert it with .astype(float) for the "
                      "arithmetic or give the factor its own column", DataWarning, stacklevel=5)
    cast = sorted(integer - factor)
    return data.astype({c: np.float64 for c in cast}) if cast else data


def _column_uses(terms):
    """Columns read by ``C(...)`` factors, and columns that expressions or interactions compute with."""
    factor, arithmetic = set(), set()
    for term in terms:
        for f in term:
            if f.method == "python" and f.expr.startswith("C("):
                factor |= f.variables
            elif f.method == "python" or len(term) > 1:
                arithmetic |= f.variables
    return factor, arithmetic


def _plain_integer(col):
    dtype = col.dtype
    return pd.api.types.is_integer_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)


def _numeric_column_terms(rhs, data):
    """The column names when every term of ``rhs`` is one numeric (not boolean) data column,
    else ``None``."""
    names = []
    for term in parsed_terms(rhs):
        if len(term) != 1 or term[0].method != "lookup" or term[0].expr not in data.columns:
            return None
        dtype = data[term[0].expr].dtype
        if not pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_bool_dtype(dtype):
            return None
        names.append(term[0].expr)
    return names or None


def _column_major(frame, cols, n):
    """The columns ``cols`` of ``frame`` as one Fortran-order float array, filled column by
    column (one copy; no sub-frame and no row-interleaved intermediate)."""
    X = np.empty((n, len(cols)), order="F")
    for j, c in enumerate(cols):
        X[:, j] = frame[c].to_numpy(dtype=float)
    return X


def check_collinear(X, columns, weights=None):
    """Refuse predictors that are constant or perfectly collinear, naming them.

    The thresholds act as intercepts, so a constant column is collinear with them.  The
    check uses the eigenvectors of the correlation matrix: each near-zero eigenvalue names
    the columns that combine to a constant (common practice, no source).
    """
    if X.shape[1] == 0:
        return
    w = np.ones(len(X)) if weights is None else weights
    mean = (w @ X) / w.sum()
    Xc = X - mean
    check_collinear_moments(columns, mean, (Xc.T @ (Xc * w[:, None])) / w.sum())


def check_collinear_moments(columns, mean, cov):
    """:func:`check_collinear` from the weighted means and (population) covariance matrix."""
    if not len(columns):
        return
    overflow = [c for c, v in zip(columns, np.diag(cov)) if not np.isfinite(v)]
    if overflow or not np.all(np.isfinite(mean)):
        raise OrdinalDataError(f"predictor values too large for double-precision moments: "
                               f"{', '.join(overflow) or ', '.join(columns)}; rescale those columns")
    sd = np.sqrt(np.maximum(np.diag(cov), 0.0))
    const = [c for c, s, m in zip(columns, sd, mean) if s <= 1e-12 * max(1.0, abs(m))]
    if const:
        far = [c for c, s, m in zip(columns, sd, mean) if c in const and s > 0 and abs(m) > 1.0]
        raise CollinearityError(
            f"predictors constant in the rows used (collinear with the thresholds): {', '.join(const)}"
            + (f"; {', '.join(far)} varies, but by less than 1e-12 of its size, which double precision cannot "
               "tell from a constant: subtract a typical value (centre it) first" if far else "")
        )
    vals, vecs = np.linalg.eigh(cov / np.outer(sd, sd))
    small = vals < 1e-10 * max(vals.max(), 1.0)
    if small.any():
        v = vecs[:, np.argmax(small)]
        names = [c for c, a in zip(columns, v) if abs(a) > 1e-6]
        raise CollinearityError(f"predictors are perfectly collinear: {', '.join(names)}")


def check_response_not_used(response, names, where):
    """Refuse the response among predictor names (its own values would explain it).

    Parameters
    ----------
    response : str
        The response column.
    names : iterable of str
        Column or predictor names an option or the formula uses.
    where : str
        Where they are used, for the message (``"in scale_by="``).

    Raises
    ------
    OrdinalDataError
        Naming the response column.
    """
    if response in set(names):
        raise OrdinalDataError(f"the response {response!r} is also used as a predictor ({where}); a model of "
                               f"{response!r} cannot explain it by itself: remove it there")


def prepare(formula, data, *, weights=None, levels=None):
    """Validate and encode the data of one fit.

    Column names that are not strings are used as ``str(name)`` (write ``"`3`"`` in the
    formula); rows whose transformed predictor values are missing or infinite (``np.log``
    of a non-positive value) are dropped with a :class:`DataWarning`, like rows with
    missing data.

    Returns
    -------
    PreparedData
    """
    if not isinstance(data, pd.DataFrame):
        raise OrdinalDataError(f"data must be a pandas DataFrame, got {type(data).__name__}")
    response, rhs = split_formula(formula)
    columns = required_columns(rhs, data)
    data = string_columns(data)
    if response not in data.columns:
        raise OrdinalDataError(f"response column {response!r} is not in the data")
    check_response_not_used(response, columns, "in the formula")
    check_unique(data, [response, *columns] + ([weights] if isinstance(weights, str) else []))
    check_mixed_types(data, columns)
    check_design_size(rhs, data)
    w = weights_array(weights, data)
    keep, notes = _drop_unusable(data, response, columns, w)
    data = data if bool(keep.all()) else data[keep.to_numpy()]
    y, lv = encode_response(data[response], levels, name=response)
    X, names, spec = design_matrix(rhs, data)
    warr = None if w is None else w[keep.to_numpy()].to_numpy(float)
    peaks = _column_peaks(X) if X.size else None
    finite, more = _finite_design_rows(X, names, peaks)
    if finite is not None:
        data, X, y = data[finite], np.asfortranarray(X[finite]), y[finite]
        warr = None if warr is None else warr[finite]
        peaks = None
    check_magnitudes(X, names, peaks=peaks)
    y, lv, levels_notes = _drop_empty_levels(y, lv, warr, response)
    notes += more + levels_notes
    return PreparedData(X, y, warr, lv, names, response, rhs, spec, data.index, notes, frame=data)


def _finite_design_rows(X, names, peaks=None):
    """Rows whose design values are all finite (``None`` when every row is), with the note.

    One pass of column minima and maxima (they propagate ``nan``; ``peaks`` when already
    known) decides whether any row needs looking at.
    """
    if not X.size or np.isfinite(_column_peaks(X) if peaks is None else peaks).all():
        return None, []
    bad = ~np.isfinite(X)
    counts = bad.sum(axis=0)
    detail = ", ".join(f"{c}: {int(k)}" for c, k in zip(names, counts) if k)
    rows = bad.any(axis=1)
    note = f"dropped {int(rows.sum())} rows whose transformed values are missing or infinite ({detail})"
    warnings.warn(note, DataWarning, stacklevel=4)
    return ~rows, [note]


def _column_peaks(X):
    """Largest magnitude per column (``nan`` where a column holds one)."""
    return np.maximum(np.abs(X.min(axis=0)), np.abs(X.max(axis=0)))


#: Largest magnitude of a design value: sums of squares of larger ones overflow in doubles.
MAX_MAGNITUDE = 1e100
#: Largest design (rows x columns x 8 bytes) a formula may ask for before it is built.
MAX_DESIGN_BYTES = 2 ** 31


def check_magnitudes(X, names, *, peaks=None):
    """Refuse design columns with values too large for double-precision moments (``peaks``:
    the largest magnitude per column, when already known)."""
    if not X.size:
        return
    peaks = _column_peaks(X) if peaks is None else peaks
    big = peaks > MAX_MAGNITUDE
    if big.any():
        detail = ", ".join(f"{c} (up to {peaks[j]:.3g})" for j, c in enumerate(names) if big[j])
        raise OrdinalDataError(f"predictor values beyond {MAX_MAGNITUDE:.0e} cannot be fitted in double "
                               f"precision: {detail}; rescale those columns")


def check_design_size(rhs, data):
    """Refuse, before building it, a design with more columns than rows or beyond the memory cap.

    Each categorical factor (a text, boolean or categorical column, or ``C(...)`` of one
    column) contributes at least ``levels - 1`` columns per term (treatment coding); the
    estimate is a lower bound, so nothing that could be fitted is refused.
    """
    n = len(data)
    sizes, total = {}, 0
    for term in parsed_terms(rhs):
        cols = 1
        for f in term:
            levels = _factor_levels(f, data, sizes)
            cols *= max(levels - 1, 1) if levels else 1
        total += cols
    if (n and total + 1 > n) or total * n * 8 > MAX_DESIGN_BYTES:  # + 1: at least one threshold
        wide = ", ".join(f"{e} ({k:,} levels)" for e, k in sizes.items() if k > 20) or "several factors"
        raise OrdinalDataError(
            f"the formula would build at least {total:,} design columns for {n:,} rows "
            f"({total * n * 8 / 1e9:.2g} GB): {wide}; a C(...) of a continuous column or an "
            "identifier makes one column per distinct value"
        )


def _factor_levels(factor, data, sizes):
    """Distinct values of a categorical factor (``None`` for a numeric one)."""
    if factor.method == "lookup":
        col = data[factor.expr]
        if pd.api.types.is_numeric_dtype(col.dtype) and not pd.api.types.is_bool_dtype(col.dtype):
            return None
    elif factor.expr.startswith("C(") and len(factor.variables) == 1:
        col = data[next(iter(factor.variables))]
    else:
        return None
    if factor.expr not in sizes:
        sizes[factor.expr] = int(col.nunique(dropna=True))
    return sizes[factor.expr]


def _drop_empty_levels(y, levels, w, response):
    """Recode ``y`` without the levels that have no observations.

    Levels whose rows all have weight zero are refused: the weights, not the data, removed them.
    """
    rows_per = np.bincount(y, minlength=len(levels))
    counts = rows_per if w is None else np.bincount(y, weights=w, minlength=len(levels))
    zeroed = [levels[i] for i in np.flatnonzero((counts <= 0) & (rows_per > 0))]
    if zeroed:
        raise OrdinalDataError(
            f"weights are zero for every row of level(s) {', '.join(map(repr, zeroed))} of {response!r}; "
            "drop those rows (or the level) explicitly, or give them positive weights"
        )
    kept, lv, notes = empty_levels(counts, levels, response)
    for n in notes:
        warnings.warn(n, DataWarning, stacklevel=4)
    if kept is None:
        return y, levels, notes
    remap = np.full(len(levels), -1)
    remap[kept] = np.arange(len(kept))
    return remap[y], lv, notes


def empty_levels(counts, levels, response):
    """Levels left after dropping those without observations (refusing fewer than two).

    Returns
    -------
    kept : ndarray of int or None
        Positions of the kept levels (``None`` when none is dropped).
    levels : tuple
    notes : list of str
    """
    empty = [levels[i] for i in np.flatnonzero(counts <= 0)]
    if len(levels) - len(empty) < 2:
        raise OrdinalDataError(
            f"response {response!r} has fewer than two observed categories "
            f"(levels {list(levels)!r}, counts {np.asarray(counts).tolist()})"
        )
    if not empty:
        return None, tuple(levels), []
    kept = np.flatnonzero(counts > 0)
    note = f"levels of {response!r} with no observations were dropped: {', '.join(map(str, empty))}"
    return kept, tuple(levels[i] for i in kept), [note]

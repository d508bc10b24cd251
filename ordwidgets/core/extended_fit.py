"""Preparing the extended model: non-parallel (per-threshold) and scale effects.

``fit(..., nonparallel=[...], scale_by=[...])`` prepares its problem here: predictor names
are resolved to design columns, the :class:`~ordwidgets.core.layout.ModelLayout` is built
and the rows are handed to the engine as a design (standardised internally: location
columns centred and scaled, scale columns only scaled, which keeps the map back to the
user's scale linear).  :func:`fit_layout` refits any layout on given rows (the
proportional-odds tests use it).

Per-threshold effects must keep the cuts ``theta_j - w'gamma_j`` increasing for every
observed row; when the likelihood is maximised on that boundary (some observed rows would
need a negative category probability) the fit is refused with a
:class:`~ordwidgets.core.exceptions.CrossingError`.  Crossing that happens only between
observed rows, inside the box spanned by the non-parallel columns, is reported with a
:class:`~ordwidgets.core.exceptions.CrossingWarning` and ``options["crossing"]``.
"""
from __future__ import annotations

import warnings

import numpy as np

from .design import check_collinear_moments, check_response_not_used, prepare, split_formula, threshold_labels
from .engine import PreparedFit, check_enough_rows, maximise, separated_columns, user_scale_matrix
from .exceptions import CrossingError, CrossingWarning, OrdinalDataError
from .layout import ModelLayout
from .objective import sort_by_category, sorted_standardised
from .sorted_design import layout_sorted_design
from .optimize import ascent_direction

__all__ = ["extended_problem", "fit_layout", "layout_design", "resolve_predictors", "crossing_in_range"]


def as_names(names, what):
    """A list of predictor names from ``None``, one name or a list; anything else is refused."""
    if names is None:
        return []
    if isinstance(names, str):
        return [names]
    names = list(names)
    if not all(isinstance(n, str) for n in names):
        raise OrdinalDataError(f"{what}= must be a list of predictor names, got {names!r}")
    return names


def _predictor_catalogue(prep):
    """Map each accepted name (column, term, variable) to its design column indices."""
    spec = prep.model_spec
    col_pos = {c: i for i, c in enumerate(prep.columns)}
    cat = {c: [i] for c, i in col_pos.items()}
    if spec is None:
        return cat
    mm_cols = list(spec.column_names)
    term_cols = {}
    for term, idx in spec.term_indices.items():
        cols = [col_pos[mm_cols[i]] for i in idx if mm_cols[i] in col_pos]
        if cols:
            term_cols[term] = cols
            cat.setdefault(str(term), cols)
    for var in map(str, spec.required_variables):
        cols = sorted({i for t, c in term_cols.items() if var in map(str, spec.term_variables[t]) for i in c})
        if cols:
            cat.setdefault(var, cols)
    return cat


def resolve_predictors(names, prep, what):
    """Design column indices for predictor names; unknown names raise, listing the choices.

    A name may be a design column (``"C(g)[T.b]"``), a term (``"C(g)"``) or a data variable
    (``"g"``: every column of every term that uses it).
    """
    cat = _predictor_catalogue(prep)
    bad = [n for n in names if n not in cat]
    if bad:
        raise OrdinalDataError(
            f"{what}= names {', '.join(map(repr, bad))}, not a predictor of the formula; "
            f"predictors: {', '.join(cat) or '(none)'}"
        )
    return sorted({i for n in names for i in cat[n]})


def _prepare_with_scale(formula, data, weights, levels, scale_names):
    """Prepare the data; scale-only variables (not in the formula) are added to the design."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        prep = prepare(formula, data, weights=weights, levels=levels)
    known = _predictor_catalogue(prep)
    extra = [n for n in scale_names if n not in known and n in data.columns]
    if not extra:
        for w in caught:  # the data warnings belong to this preparation: pass them on
            warnings.warn(w.message, w.category, stacklevel=4)
        return prep, set()
    response, rhs = split_formula(formula)
    rhs2 = " + ".join([rhs] + [f"`{n}`" for n in extra])
    wide = prepare(f"`{response}` ~ {rhs2}", data, weights=weights, levels=levels)
    scale_only = set(resolve_predictors(extra, wide, "scale_by")) - set(
        wide.columns.index(c) for c in prep.columns if c in wide.columns
    )
    return wide, scale_only


def two_valued(low, high, mean, cov):
    """Which columns take at most two values, from their range and moments.

    A variable on ``[a, b]`` with mean ``mu`` has variance at most ``(b - mu)(mu - a)``, with
    equality exactly when all its mass sits on ``a`` and ``b`` (Bhatia & Davis 2000, Amer.
    Math. Monthly 107:353-357).

    Parameters
    ----------
    low, high : ndarray, shape (J, p)
        Per-category ranges (see :class:`~ordwidgets.core.objective.SortedColumns`).
    mean, cov : weighted moments
    """
    a, b = low.min(axis=0), high.max(axis=0)
    bound = (b - mean) * (mean - a)
    var = np.diag(cov)
    return var >= bound - 1e-9 * np.maximum(np.abs(bound), np.abs(b - a) ** 2)


def build_layout(prep, nonparallel, scale_by, scale_only, at_most_two):
    """The layout of the named predictors (``prep``: columns, model spec, levels).

    ``at_most_two`` is a boolean per design column (:func:`two_valued`).
    """
    nonpar = resolve_predictors(nonparallel, prep, "nonparallel")
    scale = resolve_predictors(scale_by, prep, "scale_by")
    bad = [i for i in nonpar if i in scale_only]
    if bad:
        raise OrdinalDataError(f"nonparallel= names columns not in the formula: {_names(prep, bad)}")
    for i in set(nonpar) & set(scale):
        if at_most_two[i]:
            raise OrdinalDataError(
                f"predictor {prep.columns[i]!r} takes at most two values: per-threshold effects "
                "and a scale effect for it cannot both be identified; drop it from one list"
            )
    loc = [i for i in range(len(prep.columns)) if i not in scale_only and i not in nonpar]
    return ModelLayout(tuple(prep.columns), tuple(loc), tuple(nonpar), tuple(scale),
                       tuple(threshold_labels(prep.levels)))


def _names(prep, idx):
    return ", ".join(prep.columns[i] for i in idx)


def _crossing_failure(design, outcome, layout):
    """Whether a failed fit stopped on the boundary where observed cuts meet."""
    if not layout.nonparallel or not np.all(np.isfinite(outcome.grad)):
        return False
    gaps = design.gaps(outcome.params)
    if gaps.size == 0:
        return False
    step, _ = ascent_direction(outcome.grad, outcome.hess)
    tight = gaps.min(initial=np.inf) < 1e-3 * max(float(np.median(gaps)), 1e-12)
    return tight or not design.feasible(outcome.params + step)


def _raise_crossing(layout, design, params):
    cols = ", ".join(layout.columns[i] for i in layout.nonparallel)
    gaps = design.gaps(params)
    tight = gaps <= 1e-3 * max(float(np.median(gaps)), 1e-12)
    t = layout.thresholds
    where = "; ".join(f"{t[j]} and {t[j + 1]} for {int(tight[:, j].sum())} rows"
                      for j in np.flatnonzero(tight.any(axis=0)))
    cats = np.unique(design.y[tight.any(axis=1)])
    separated = ""
    if len(cats) == 1 and cats[0] in (0, layout.m):
        separated = (" All rows where the cuts meet are in the same extreme category, so the "
                     f"per-threshold effects of {cols} also separate the categories.")
    raise CrossingError(
        f"with per-threshold effects for {cols}, cumulative probabilities would have to cross "
        f"for observed rows (cuts meeting: {where or 'at the boundary'}); the likelihood has no "
        "maximum with valid probabilities. Use fewer non-parallel terms (nonparallel=[...]) "
        f"or a scale effect instead.{separated}"
    )


def layout_design(layout, D, y, weights, *, columns=None):
    """The engine's design for ``layout`` on rows ``D`` (user scale) and its map back.

    Rows are sorted by category once; location columns (parallel and per-threshold) are
    centred and scaled, scale columns only scaled.

    Parameters
    ----------
    columns : SortedColumns, optional
        ``sorted_standardised(D, ...)`` when the caller already has it.

    Returns
    -------
    design : SortedDesign
    to_user : ndarray
    """
    order, bounds = sort_by_category(y, layout.m + 1)
    w = None if weights is None else np.asarray(weights, float)[order]
    cols = sorted_standardised(D, order, bounds, w) if columns is None else columns
    design = layout_sorted_design(layout, cols.X, bounds, w, cols.mean, cols.sd)
    return design, user_scale_matrix(layout, cols.mean, cols.sd)


def _explainer(layout, design):
    """``explain_failure`` for the engine: a fit stopped where observed cuts meet."""

    def explain(outcome):
        if _crossing_failure(design, outcome, layout):
            _raise_crossing(layout, design, outcome.params)

    return explain


def fit_layout(layout, D, y, weights, link, *, max_iter=100, tol=1e-12, callback=None, what="fit", warn=True,
               start=None, columns=None):
    """Maximise the likelihood of one layout on a full design ``D`` (user-scale answer).

    Parameters
    ----------
    start : ndarray, optional
        Feasible starting point on the user's scale (a warm start, e.g. a nested fit's
        estimates); default the closed-form thresholds and zero effects.
    columns : SortedColumns, optional
        Passed to :func:`layout_design` (rows sorted by ``y`` once for several fits).

    Returns
    -------
    EngineFit

    Raises
    ------
    CrossingError
        If the maximum needs crossing cumulative probabilities for observed rows.
    """
    design, to_user = layout_design(layout, D, y, weights, columns=columns)
    engine_design = design if start is None else _StartedAt(design, np.linalg.solve(to_user, start))
    return maximise(engine_design, link, to_user=to_user, names=layout.param_names(), max_iter=max_iter, tol=tol,
                    callback=callback, what=what, warn=warn, explain_failure=_explainer(layout, design))


class _StartedAt:
    """A design with its own starting point (the optional ``start`` of the design protocol)."""

    def __init__(self, design, start):
        self._design, self._start = design, start

    def __getattr__(self, name):
        return getattr(self._design, name)

    def start(self, link):
        return self._start


def crossing_in_range(layout, params, D):
    """Adjacent threshold pairs whose cuts cross inside the box of the non-parallel columns.

    The gap ``(theta_{j+1} - theta_j) - w'(gamma_{j+1} - gamma_j)`` is linear in ``w``, so
    its minimum over the box ``[min w, max w]`` is found at a corner, column by column.
    """
    if not layout.nonparallel:
        return []
    W = layout.arrays(D)[1]
    return crossing_in_box(layout, params, W.min(axis=0), W.max(axis=0))


def crossing_in_box(layout, params, lo, hi):
    """:func:`crossing_in_range` from the smallest and largest value of each non-parallel column."""
    if not layout.nonparallel:
        return []
    theta, _, gamma, _ = layout.split(params)
    dg = np.diff(gamma, axis=1)
    worst = np.diff(theta) - np.maximum(lo[:, None] * dg, hi[:, None] * dg).sum(axis=0)
    t = layout.thresholds
    return [f"{t[j]} / {t[j + 1]}" for j in np.flatnonzero(worst < 0)]


def extended_problem(formula, data, *, weights=None, levels=None, nonparallel=None, scale_by=None):
    """Prepare a fit with per-threshold and/or scale effects (see :func:`ordwidgets.core.fit`)."""
    nonparallel, scale_by = as_names(nonparallel, "nonparallel"), as_names(scale_by, "scale_by")
    response = split_formula(formula)[0]
    check_response_not_used(response, nonparallel, "in nonparallel=")
    check_response_not_used(response, scale_by, "in scale_by=")
    prep, scale_only = _prepare_with_scale(formula, data, weights, levels, scale_by)
    order, bounds = sort_by_category(prep.y, len(prep.levels))
    cols = sorted_standardised(prep.X, order, bounds, None if prep.weights is None else prep.weights[order])
    layout = build_layout(prep, nonparallel, scale_by, scale_only, two_valued(cols.low, cols.high, cols.mean, cols.cov))
    check_enough_rows(prep.y.shape[0] if prep.weights is None else int(np.count_nonzero(prep.weights)),
                      layout.n_params)
    check_layout_columns(prep.columns, layout, cols.mean, cols.cov)
    design, to_user = layout_design(layout, prep.X, prep.y, prep.weights, columns=cols)
    return PreparedFit(design=design, layout=layout, to_user=to_user, prep=prep,
                       separated=tuple(layout_separation(layout, cols.low, cols.high)),
                       options={"weights": weights, "levels": levels, "nonparallel": nonparallel,
                                "scale_by": scale_by},
                       explain_failure=_explainer(layout, design), after=crossing_report(layout, cols.low, cols.high))


def layout_separation(layout, low, high):
    """Location columns (parallel or per-threshold) separated in the data (scale-only ones cannot be)."""
    loc = sorted(layout.location + layout.nonparallel)
    return separated_columns(low[:, loc], high[:, loc], [layout.columns[i] for i in loc])


def crossing_report(layout, low, high):
    """``after`` hook of an extended fit: warn when fitted cuts cross inside the data's range."""
    nonpar = list(layout.nonparallel)
    lo, hi = low[:, nonpar].min(axis=0), high[:, nonpar].max(axis=0)

    def after(fitted):
        crossing = crossing_in_box(layout, fitted.params, lo, hi)
        if crossing:
            warnings.warn(
                f"fitted cumulative probabilities cross inside the range of "
                f"{', '.join(layout.columns[i] for i in nonpar)} (between thresholds {'; '.join(crossing)}); "
                "predictions there are not valid probabilities", CrossingWarning, stacklevel=5)
        return {"crossing": crossing}

    return after


def check_layout_columns(columns, layout, mean, cov):
    """Location columns, and scale columns, must each be free of collinearity."""
    loc = sorted(layout.location + layout.nonparallel)
    check_collinear_moments([columns[i] for i in loc], mean[loc], cov[np.ix_(loc, loc)])
    sc = list(layout.scale)
    check_collinear_moments([f"{columns[i]} (scale)" for i in sc], mean[sc], cov[np.ix_(sc, sc)])

"""Fitting the extended model: non-parallel (per-threshold) and scale effects.

``fit(..., nonparallel=[...], scale_by=[...])`` lands here.  As for the parallel model the
design is standardised internally (location columns centred and scaled, scale columns only
scaled, which keeps the map back to the user's scale linear), the safeguarded Newton
iteration of :mod:`ordwidgets.core.optimize` runs on the analytic gradient and Hessian of
:class:`~ordwidgets.core.extended.ExtendedDesign`, and the answer is mapped back.

Per-threshold effects must keep the cuts ``theta_j - w'gamma_j`` increasing for every
observed row; when the likelihood is maximised on that boundary (some observed rows would
need a negative category probability) the fit is refused with a
:class:`~ordwidgets.core.exceptions.CrossingError`.  Crossing that happens only between
observed rows, inside the box spanned by the non-parallel columns, is reported with a
:class:`~ordwidgets.core.exceptions.CrossingWarning` and ``options["crossing"]``.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from .design import check_collinear, prepare, split_formula, threshold_labels
from .exceptions import CrossingError, CrossingWarning, OrdinalDataError
from .extended import ExtendedDesign, ModelLayout
from .fitting import _covariance, _second_start, _separation_check, closed_form_thresholds, standardise
from .links import get_link
from .optimize import ascent_direction, check_convergence, newton_maximize
from .results import FitResult, TrainingData

__all__ = ["fit_extended", "fit_layout", "LayoutFit", "resolve_predictors"]


@dataclass(frozen=True, eq=False)
class LayoutFit:
    """Raw outcome of :func:`fit_layout` on the user's scale."""

    params: np.ndarray
    cov: np.ndarray
    loglik: float
    converged: bool
    message: str
    curvature_condition: float
    largest_score: float
    iterations: int
    n_obs: float


def _as_list(names, what):
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


def _build_layout(prep, nonparallel, scale_by, scale_only):
    nonpar = resolve_predictors(nonparallel, prep, "nonparallel")
    scale = resolve_predictors(scale_by, prep, "scale_by")
    bad = [i for i in nonpar if i in scale_only]
    if bad:
        raise OrdinalDataError(f"nonparallel= names columns not in the formula: {_names(prep, bad)}")
    for i in set(nonpar) & set(scale):
        if len(np.unique(prep.X[:, i])) <= 2:
            raise OrdinalDataError(
                f"predictor {prep.columns[i]!r} takes at most two values: per-threshold effects "
                "and a scale effect for it cannot both be identified; drop it from one list"
            )
    loc = [i for i in range(len(prep.columns)) if i not in scale_only and i not in nonpar]
    return ModelLayout(tuple(prep.columns), tuple(loc), tuple(nonpar), tuple(scale),
                       tuple(threshold_labels(prep.levels)))


def _names(prep, idx):
    return ", ".join(prep.columns[i] for i in idx)


def _to_user_scale(layout, mean, sd):
    """``A`` with ``params_user = A @ params_internal`` (location centred+scaled, scale scaled)."""
    m = layout.m
    A = np.eye(layout.n_params)
    tb, bb, gb, zb = layout.blocks()
    for k, i in enumerate(layout.location):
        A[bb.start + k, bb.start + k] = 1.0 / sd[i]
        A[:m, bb.start + k] = mean[i] / sd[i]
    for q, i in enumerate(layout.nonparallel):
        for j in range(m):
            c = gb.start + q * m + j
            A[c, c] = 1.0 / sd[i]
            A[j, c] = mean[i] / sd[i]
    for k, i in enumerate(layout.scale):
        A[zb.start + k, zb.start + k] = 1.0 / sd[i]
    return A


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


def _interpret(design, outcome, layout, what, converged, message):
    """Separation first (estimates running away), then crossing, then other failures."""
    names = layout.param_names()[layout.m:]
    if np.all(np.isfinite(outcome.hess)):
        separated, sep_message = _separation_check(outcome.params, outcome.hess, layout.m, names, message)
        if not separated:
            return False, sep_message
    if converged:
        return True, message
    if _crossing_failure(design, outcome, layout):
        _raise_crossing(layout, design, outcome.params)
    check_convergence(outcome, what=what)
    return False, message


def fit_layout(layout, D, y, weights, link, *, max_iter=100, tol=1e-10, callback=None, what="fit",
               warn=True):
    """Maximise the likelihood of one layout on a full design ``D`` (user-scale answer).

    Raises
    ------
    CrossingError
        If the maximum needs crossing cumulative probabilities for observed rows.
    """
    lk = get_link(link)
    mean, sd = standardise(D, weights)
    design = ExtendedDesign(layout, (D - mean) / sd, y, weights, scale_design=D / sd)
    start = np.concatenate([closed_form_thresholds(lk, design.counts()), np.zeros(layout.n_params - layout.m)])
    evaluate = lambda x, o: design.sums(lk, x, order=o)  # noqa: E731
    outcome = newton_maximize(evaluate, start, feasible=design.feasible, max_iter=max_iter, tol=tol,
                              callback=callback)
    if lk.name == "cauchit" and layout.n_params > layout.m:
        outcome = _second_start(outcome, design, evaluate, design.feasible, layout.m, max_iter, tol)
    converged, message, condition = check_convergence(outcome, what=what, warn=False)
    if warn:
        converged, message = _interpret(design, outcome, layout, what, converged, message)
    elif not converged and _crossing_failure(design, outcome, layout):
        _raise_crossing(layout, design, outcome.params)
    A = _to_user_scale(layout, mean, sd)
    grad_user = np.linalg.solve(A.T, outcome.grad)
    return LayoutFit(A @ outcome.params, _covariance(outcome.hess, A), float(outcome.loglik), converged,
                     message, condition, float(np.max(np.abs(grad_user), initial=0.0)), outcome.iterations,
                     float(design.counts().sum()))


def crossing_in_range(layout, params, D):
    """Adjacent threshold pairs whose cuts cross inside the box of the non-parallel columns.

    The gap ``(theta_{j+1} - theta_j) - w'(gamma_{j+1} - gamma_j)`` is linear in ``w``, so
    its minimum over the box ``[min w, max w]`` is found at a corner, column by column.
    """
    if not layout.nonparallel:
        return []
    theta, _, gamma, _ = layout.split(params)
    W = layout.arrays(D)[1]
    lo, hi = W.min(axis=0), W.max(axis=0)
    dg = np.diff(gamma, axis=1)
    worst = np.diff(theta) - np.maximum(lo[:, None] * dg, hi[:, None] * dg).sum(axis=0)
    t = layout.thresholds
    return [f"{t[j]} / {t[j + 1]}" for j in np.flatnonzero(worst < 0)]


def fit_extended(formula, data, *, link="logit", weights=None, levels=None, max_iter=100, tol=1e-10,
                 keep_data=True, callback=None, nonparallel=None, scale_by=None):
    """Fit with per-threshold effects and/or scale effects (see :func:`ordwidgets.core.fit`)."""
    lk = get_link(link)
    nonparallel, scale_by = _as_list(nonparallel, "nonparallel"), _as_list(scale_by, "scale_by")
    prep, scale_only = _prepare_with_scale(formula, data, weights, levels, scale_by)
    layout = _build_layout(prep, nonparallel, scale_by, scale_only)
    used = prep.y.shape[0] if prep.weights is None else int(np.count_nonzero(prep.weights))
    if used < layout.n_params:
        raise OrdinalDataError(f"{used} rows for {layout.n_params} parameters: fewer rows than parameters")
    loc = sorted(layout.location + layout.nonparallel)
    check_collinear(prep.X[:, loc], [prep.columns[i] for i in loc], prep.weights)
    check_collinear(prep.X[:, list(layout.scale)], [scale_name_of(prep, i) for i in layout.scale], prep.weights)
    out = fit_layout(layout, prep.X, prep.y, prep.weights, lk, max_iter=max_iter, tol=tol,
                     callback=callback, what=formula)
    crossing = crossing_in_range(layout, out.params, prep.X)
    if crossing:
        warnings.warn(
            f"fitted cumulative probabilities cross inside the range of "
            f"{_names(prep, layout.nonparallel)} (between thresholds {'; '.join(crossing)}); "
            "predictions there are not valid probabilities", CrossingWarning, stacklevel=3)
    return FitResult(
        link=lk, levels=prep.levels, threshold_names=layout.thresholds,
        coef_names=tuple(layout.param_names()[layout.m:]), params=out.params, cov=out.cov,
        loglik=out.loglik, n_obs=out.n_obs, n_rows=int(len(prep.y)), iterations=out.iterations,
        converged=out.converged, message=out.message, largest_score=out.largest_score, curvature_condition=out.curvature_condition,
        formula=formula, response=prep.response, model_spec=prep.model_spec, notes=tuple(prep.notes),
        training=TrainingData(prep.X, prep.y, prep.weights, prep.index, frame=prep.frame) if keep_data else None,
        options={"weights": weights, "levels": levels, "nonparallel": nonparallel, "scale_by": scale_by,
                 "crossing": crossing},
        layout=layout,
    )


def scale_name_of(prep, i):
    """Display name of a scale column in collinearity messages."""
    return f"{prep.columns[i]} (scale)"

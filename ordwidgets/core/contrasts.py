"""Comparisons a reader can act on: level contrasts, group-averaged probabilities, what-ifs.

* :func:`contrasts`: pairwise differences between the levels of a factor on the latent scale
  (``beta_a - beta_b``; positive = level ``a`` sits towards higher categories than ``b``), with
  Wald intervals and p-values adjusted for the number of pairs by Holm's (1979) step-down
  method; and, per level, the predicted probabilities averaged over the training rows with
  the factor set to that level for every row (others as observed), with delta-method
  intervals.
* :func:`holm_adjust`: Holm (1979), Scand. J. Statist. 6:65-70.
* :func:`probability_difference`: scenario minus baseline category probabilities (and the
  expected score) with delta-method intervals.

The comparisons are associations in the data, not effects of changing a case's values.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from .effects import check_level, logit_interval, probability_jacobian, wald_bounds
from .layout import all_training_rows, layout_of
from .terms import term_columns

__all__ = ["Contrasts", "contrasts", "holm_adjust", "probability_difference"]


def holm_adjust(p_values) -> np.ndarray:
    """Holm's (1979) step-down adjusted p-values (same order as given).

    Sorted ascending, ``p_(i)`` becomes ``max_{k <= i} min(1, (m - k + 1) p_(k))``; rejecting
    where the adjusted value is at most ``alpha`` controls the family-wise error rate at
    ``alpha`` for any dependence between the tests.  ``nan`` entries are ignored (and stay).
    """
    p = np.asarray(p_values, float)
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    order = ok[np.argsort(p[ok], kind="stable")]
    m = len(order)
    scaled = np.minimum(1.0, (m - np.arange(m)) * p[order])
    out[order] = np.maximum.accumulate(scaled)
    return out


@dataclass(frozen=True, eq=False)
class Contrasts:
    """Level comparisons of one factor.

    Attributes
    ----------
    term : str
    levels : tuple
        Levels of the factor, reference first.
    differences : pandas.DataFrame
        One row per pair ``"a - b"``: ``estimate`` (latent scale), ``std_error``, ``z``,
        ``p_value``, ``p_holm``, ``wald_low``, ``wald_high``.
    probabilities : pandas.DataFrame
        One row per level; columns a MultiIndex ``(part, response level)`` with ``part`` in
        ``"estimate"``, ``"lower"``, ``"upper"``.
    level : float
    """

    term: str
    levels: tuple
    differences: pd.DataFrame
    probabilities: pd.DataFrame
    level: float


def _find_term(res, name):
    cols = term_columns(res)
    for term in (name, f"C({name})"):
        if term in cols:
            return term, cols[term]
    raise ValueError(f"{name!r} is not a term of the fit; terms: {', '.join(cols)}")


def _level_of(term, column, levels):
    suffix = column[len(term):]
    for lv in levels:
        if suffix in (f"[T.{lv}]", f"[{lv}]"):
            return lv
    raise ValueError(f"column {column!r} is not a level of {term!r}")


def _variable(res, term):
    frame = all_training_rows(res, "contrasts").frame
    var = term[2:-1].split(",")[0].strip() if term.startswith("C(") else term
    if frame is None or var not in frame.columns:
        raise ValueError(f"contrasts need the fitted rows of {var!r} (fit a pandas DataFrame)")
    return var, frame


def _factor_levels(column):
    if isinstance(column.dtype, pd.CategoricalDtype):
        return [lv for lv in column.cat.categories if (column == lv).any()]
    return sorted(column.dropna().unique().tolist(), key=str)


def _latent_differences(res, dummies, levels, q):
    """Pairwise ``beta_a - beta_b`` (reference effect 0) with SEs, z, p and Holm's p."""
    idx = {lv: res.names.index(col) for lv, col in dummies.items()}
    rows, names = [], []
    for i, a in enumerate(levels):
        for b in levels[:i]:
            c = np.zeros(res.n_params)
            c[idx[a]] = 1.0 if a in idx else 0.0
            if b in idx:
                c[idx[b]] -= 1.0
            est, se = float(c @ res.params), float(np.sqrt(max(c @ res.cov @ c, 0.0)))
            z = est / se if se > 0 else np.nan
            rows.append([est, se, z, float(2 * stats.norm.sf(abs(z)))])
            names.append(f"{a} - {b}")
    out = pd.DataFrame(rows, index=pd.Index(names, name="pair"), columns=["estimate", "std_error", "z", "p_value"])
    out["p_holm"] = holm_adjust(out["p_value"])
    out["wald_low"], out["wald_high"] = out["estimate"] - q * out["std_error"], out["estimate"] + q * out["std_error"]
    return out


def _set_level(frame, var, value):
    col = frame[var]
    if isinstance(col.dtype, pd.CategoricalDtype):
        new = pd.Categorical([value] * len(frame), categories=col.cat.categories, ordered=col.cat.ordered)
    else:
        new = pd.Series([value] * len(frame), index=frame.index, dtype=col.dtype)
    return frame.assign(**{var: new})


def averaged_probabilities(res, frames, level):
    """Weighted means over rows of the category probabilities of each frame, with intervals.

    Each frame holds the training rows with something changed; the interval is the delta
    method on the logit scale of the averaged probability (see
    :func:`~ordwidgets.core.effects.prediction_intervals`).
    """
    tr = res.training_rows()
    w = np.ones(len(tr.y)) if tr.weights is None else tr.weights
    w = w / w.sum()
    est, grad = [], []
    for frame in frames:
        P, G = probability_jacobian(res, res.design(frame))
        est.append(w @ P)
        grad.append(np.einsum("n,njp->jp", w, G))
    est, grad = np.array(est), np.array(grad)
    lower, upper = logit_interval(est, grad, res.cov, level)
    return est, lower, upper


def contrasts(res, term, *, level=0.95) -> Contrasts:
    """Compare the levels of the factor ``term`` (see the module docstring).

    Parameters
    ----------
    res : FitResult
    term : str
        The factor's name as in the formula (``"species"`` or ``"C(species)"``).
    level : float
        Coverage of the intervals.

    Raises
    ------
    ValueError
        If ``term`` is not a factor of the fit, or its effects are not parallel (per-threshold
        or scale effects have no single latent difference; compare probabilities instead).
    """
    check_level(level)
    term, cols = _find_term(res, term)
    var, frame = _variable(res, term)
    levels = _factor_levels(frame[var])
    dummies = {_level_of(term, c, [str(v) for v in levels]): c for c in cols}
    levels = [str(v) for v in levels]
    if len(dummies) != len(levels) - 1:
        raise ValueError(f"{term!r} is not a factor with one reference level (columns: {', '.join(cols)})")
    layout = layout_of(res)
    if any(layout.columns.index(c) not in layout.location for c in cols):
        raise ValueError(f"{term!r} has per-threshold or scale effects: its levels differ by more than one "
                         "latent shift; compare their probabilities instead")
    ref = [lv for lv in levels if lv not in dummies]
    levels = ref + [lv for lv in levels if lv in dummies]
    q = stats.norm.isf((1 - level) / 2)
    diffs = _latent_differences(res, dummies, levels, q)
    raw = {str(v): v for v in _factor_levels(frame[var])}
    est, lower, upper = averaged_probabilities(res, [_set_level(frame, var, raw[lv]) for lv in levels], level)
    cols_mi = pd.MultiIndex.from_product([["estimate", "lower", "upper"], [str(v) for v in res.levels]],
                                         names=["part", "response"])
    probs = pd.DataFrame(np.hstack([est, lower, upper]), index=pd.Index(levels, name=var), columns=cols_mi)
    return Contrasts(term, tuple(levels), diffs, probs, level)


def probability_difference(res, scenario, baseline, *, level=0.95) -> pd.DataFrame:
    """Scenario minus baseline: category probabilities and expected score, with intervals.

    Parameters
    ----------
    scenario, baseline : pandas.DataFrame
        One row each (predictor values of the two cases).
    level : float

    Returns
    -------
    pandas.DataFrame
        One row per response level and a last row ``"expected score (1..J)"`` (levels
        scored ``1..J``); columns ``baseline``, ``scenario``, ``difference``, ``std_error``,
        ``low``, ``high``.  The interval of the difference is ``difference -+ z SE`` with the
        delta-method ``SE = sqrt(g' V g)``, ``g`` the gradient of the difference (common
        practice, no source).  At the fitted thresholds.
    """
    check_level(level)
    (pb, gb), (ps, gs) = (probability_jacobian(res, res.design(f)) for f in (baseline, scenario))
    scores = np.arange(1, len(res.levels) + 1, dtype=float)
    est_b = np.append(pb[0], scores @ pb[0])
    est_s = np.append(ps[0], scores @ ps[0])
    g = gs[0] - gb[0]
    g = np.vstack([g, scores @ g])
    se = np.sqrt(np.maximum(np.einsum("jp,pq,jq->j", g, res.cov, g), 0.0))
    diff = est_s - est_b
    low, high = wald_bounds(diff, se, level)
    index = pd.Index([str(v) for v in res.levels] + ["expected score (1..J)"], name="response")
    return pd.DataFrame({"baseline": est_b, "scenario": est_s, "difference": diff, "std_error": se,
                         "low": low, "high": high}, index=index)

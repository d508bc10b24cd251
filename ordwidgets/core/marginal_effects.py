"""Average marginal effects of each design column on each category probability.

For a numeric column the effect is the weighted mean over the training rows of the analytic
derivative ``dP(Y = k)/dx = f(u_k) du_k/dx - f(u_{k-1}) du_{k-1}/dx`` with
``du_j/dx_c = -(beta_c + gamma_cj) / sigma - u_j zeta_c`` (the parts the column has).  For a
0/1 column it is the mean discrete change ``P(Y = k | x = 1) - P(Y = k | x = 0)``; for the
dummies of a factor, the change from the reference level to that level (the other dummies
of the factor set to 0).  Effects sum to zero over the levels.

Standard errors by the delta method (Oehlert 1992, Am. Stat. 46:27-29) with analytic
parameter gradients: of the averaged probabilities for discrete changes, and of the averaged
derivative itself (second derivatives through ``f'``) for numeric columns.

**Cost.**  The dummies of one factor share the cuts with the whole factor at its reference
level (one product with the design per factor); each level only shifts them by its own
effects, and the parameter gradients of all levels come from one product of the other design
columns with the stacked per-level weights (:func:`level_changes`).

Sign convention: a positive location effect moves probability towards higher categories,
so its marginal effect is negative on the lowest level and positive on the highest.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from .exceptions import CrossingWarning
from .layout import cumulative_predictors, layout_of, unscaled_cuts
from .terms import term_columns

__all__ = ["average_marginal_effects", "analytic_marginal_effect", "cut_gradient", "level_changes"]

#: Stacked per-level weights are multiplied with the design in chunks of about this many floats.
_CHUNK_FLOATS = 2_000_000


def cut_gradient(layout, asum, PA, PB):
    """``sum_i a_ij du_ij/dparams`` for each threshold ``j``, shape ``(m, P)``.

    ``du_ij`` is ``1 / sigma_i`` times ``e_j``, ``-x_i`` and ``-w_i`` (at threshold ``j``)
    for thresholds, parallel and per-threshold effects, and ``-u_ij z_i`` for scale effects.

    Parameters
    ----------
    asum : ndarray, shape (m,)
        ``sum_i a_ij / sigma_i``.
    PA, PB : ndarray, shape (m, d)
        ``sum_i (a_ij / sigma_i) d_i`` and ``sum_i a_ij u_ij d_i`` over the full design rows
        ``d_i`` (``PB`` is only read for scale columns).
    """
    m = layout.m
    _, bb, gb, zb = layout.blocks()
    C = np.zeros((m, layout.n_params))
    j = np.arange(m)
    C[j, j] = asum
    C[:, bb] = -PA[:, list(layout.location)]
    for r, col in enumerate(layout.nonparallel):
        C[j, gb.start + r * m + j] = -PA[:, col]
    if layout.scale:
        C[:, zb] = -PB[:, list(layout.scale)]
    return C


def _as_categories(C):
    """Cumulative rows ``(m, ...)`` -> category rows ``(m + 1, ...)``: ``C_k - C_{k-1}``."""
    pad = np.zeros((1,) + C.shape[1:])
    return np.diff(np.concatenate([pad, C, pad]), axis=0)


def _ends(link, U):
    """``F(u)``, ``S(u)``, ``f(u)`` and ``f'(u) / f(u)`` (the one-pass kernel on finite ``u``)."""
    if np.all(np.isfinite(U)):
        return link.kernel(U)
    return link.cdf(U), link.sf(U), link.pdf(U), link.dlogpdf(U)


def _mean_probabilities(link, U, F, S, w):
    """Weighted mean category probabilities, each difference taken on its exact side of the median."""
    upper = U[:, :-1] >= link.median  # the lower end of categories 1 .. m - 1
    inner = np.where(upper, S[:, :-1] - S[:, 1:], F[:, 1:] - F[:, :-1])
    last = np.where(U[:, -1] >= link.median, S[:, -1], 1.0 - F[:, -1])
    return np.concatenate([[w @ F[:, 0]], w @ np.maximum(inner, 0.0), [w @ last]])


def _column_parts(layout, params, c):
    """Shift ``beta_c + gamma_c`` (m,) and scale effect ``zeta_c`` of design column ``c``."""
    _, beta, gamma, zeta = layout.split(params)
    shift = np.zeros(layout.m)
    if c in layout.location:
        shift += beta[layout.location.index(c)]
    if c in layout.nonparallel:
        shift += gamma[layout.nonparallel.index(c)]
    return shift, (zeta[layout.scale.index(c)] if c in layout.scale else 0.0)


def level_changes(res, D, w, group):
    """Mean discrete changes from all of ``group`` at 0 to each member at 1 (the rest at 0).

    Parameters
    ----------
    D : ndarray, shape (n, d)
        Full design (the training rows).
    w : ndarray, shape (n,)
        Row weights summing to one.
    group : list of int
        0/1 design columns set together (a factor's dummies, or one 0/1 column).

    Returns
    -------
    effects : ndarray, shape (len(group), J)
    grads : ndarray, shape (len(group), J, P)
        Parameter gradients of the effects.
    crossed : list of bool
        Per member: cumulative probabilities cross for some edited rows (effect ``nan``).
    """
    layout, link, params = layout_of(res), res.link, res.params
    base = np.array(D, float)
    base[:, group] = 0.0
    X, W, Z = layout.arrays(base)
    _, beta, _, zeta = layout.split(params)
    num = unscaled_cuts(layout, params, W) - (X @ beta if beta.size else 0.0)[:, None]
    logsig = Z @ zeta if zeta.size else np.zeros(len(base))
    rest = [c for c in range(base.shape[1]) if c not in group]
    members = [None] + list(group)
    parts = [_level_terms(layout, link, params, num, logsig, w, c) for c in members]
    PA, PB = _stacked_products(base[:, rest], [p[2] for p in parts], [p[3] for p in parts], bool(layout.scale))
    grads = []
    for k, (c, (_, asum, _, _, bsum)) in enumerate(zip(members, parts)):
        full_a, full_b = np.zeros((layout.m, base.shape[1])), np.zeros((layout.m, base.shape[1]))
        full_a[:, rest], full_b[:, rest] = PA[k], PB[k]
        if c is not None:
            full_a[:, c], full_b[:, c] = asum, bsum
        grads.append(_as_categories(cut_gradient(layout, asum, full_a, full_b)))
    crossed = [bool(p[0] is None) for p in parts]
    means = np.array([np.full(layout.m + 1, np.nan) if p[0] is None else p[0] for p in parts])
    effects = means[1:] - means[0]
    return effects, np.array(grads[1:]) - grads[0], [crossed[0] or x for x in crossed[1:]]


def _level_terms(layout, link, params, num, logsig, w, c):
    """Mean probabilities and gradient weights of one level (``c`` at 1; ``None``: the reference)."""
    shift, zc = (np.zeros(layout.m), 0.0) if c is None else _column_parts(layout, params, c)
    with np.errstate(over="ignore"):
        sigma = np.exp(logsig + zc)
    U = (num - shift) / sigma[:, None]
    F, S, f, _ = _ends(link, U)
    A = (w / sigma)[:, None] * f
    B = w[:, None] * f * U if layout.scale else None
    crossing = layout.m > 1 and bool(np.any(np.diff(U, axis=1) < 0))
    mean = None if crossing else _mean_probabilities(link, U, F, S, w)
    return mean, A.sum(axis=0), A, B, (B.sum(axis=0) if B is not None else np.zeros(layout.m))


def _stacked_products(R, As, Bs, scale):
    """``A_k' R`` (and ``B_k' R``) for every level ``k``: products of the stacked weights in chunks."""
    n, m = As[0].shape
    levels = len(As)
    PA, PB = np.zeros((levels, m, R.shape[1])), np.zeros((levels, m, R.shape[1]))
    if R.shape[1] == 0:
        return PA, PB
    step = max(1, _CHUNK_FLOATS // max(1, n * m))
    for s in range(0, levels, step):
        ks = range(s, min(levels, s + step))
        PA[ks.start:ks.stop] = (R.T @ np.hstack([As[k] for k in ks])).T.reshape(len(ks), m, -1)
        if scale:
            PB[ks.start:ks.stop] = (R.T @ np.hstack([Bs[k] for k in ks])).T.reshape(len(ks), m, -1)
    return PA, PB


def analytic_marginal_effect(res, D, c, weights, *, gradient=False):
    """Weighted mean of ``dP(Y = k)/dx_c`` over the rows of ``D`` (shape ``(J,)``).

    With ``gradient``, also its parameter gradient ``(J, P)``: with ``g_ij = du_ij/dx_c``,
    ``d/dpsi sum_i w_i f(u_ij) g_ij = sum_i w_i [(f'(u_ij) g_ij - f(u_ij) zeta_c) du_ij/dpsi
    + f(u_ij) (-(dshift_j/dpsi) / sigma_i + shift_j z_i'dzeta/dpsi / sigma_i - u_ij dzeta_c/dpsi)]``.
    """
    layout = layout_of(res)
    U, sigma = cumulative_predictors(layout, res.params, D)
    shift, zc = _column_parts(layout, res.params, c)
    g = -shift[None, :] / sigma[:, None] - U * zc
    _, _, f, score = _ends(res.link, U)
    effect = _as_categories(weights @ (f * g))
    if not gradient:
        return effect
    a = weights[:, None] * f * (score * g - zc)
    a_s = a / sigma[:, None]
    C = cut_gradient(layout, a_s.sum(axis=0), a_s.T @ D, (a * U).T @ D if layout.scale else None)
    C += _shift_terms(layout, c, weights[:, None] * f, U, sigma, shift, D)
    return effect, _as_categories(C)


def _shift_terms(layout, c, wf, U, sigma, shift, D):
    """The part of the derivative's gradient through ``shift_c``, ``sigma`` and ``zeta_c`` (u fixed)."""
    m = layout.m
    _, bb, gb, zb = layout.blocks()
    C = np.zeros((m, layout.n_params))
    q = wf / sigma[:, None]
    qsum = q.sum(axis=0)
    if c in layout.location:
        C[:, bb.start + layout.location.index(c)] -= qsum
    if c in layout.nonparallel:
        j = np.arange(m)
        C[j, gb.start + layout.nonparallel.index(c) * m + j] -= qsum
    if layout.scale:
        C[:, zb] += shift[:, None] * (q.T @ D[:, list(layout.scale)])
    if c in layout.scale:
        C[:, zb.start + layout.scale.index(c)] -= (wf * U).sum(axis=0)
    return C


def _binary_columns(D):
    return [bool(np.all((D[:, c] == 0.0) | (D[:, c] == 1.0))) for c in range(D.shape[1])]


def _binary_groups(res, binary):
    """For each 0/1 design column, the 0/1 columns of its formula term (a factor's dummies) as one tuple."""
    cols = list(layout_of(res).columns)
    out = {c: (c,) for c in range(len(cols)) if binary[c]}
    for members in term_columns(res).values():
        idx = tuple(sorted(cols.index(m) for m in members if m in cols and binary[cols.index(m)]))
        out.update({c: idx for c in idx})
    return out


def _discrete_changes(res, D, w, groups):
    """``{column: (effect, gradient)}`` of every 0/1 column, one :func:`level_changes` per group."""
    out = {}
    for group in sorted(set(groups.values())):
        effects, grads, crossed = level_changes(res, D, w, list(group))
        for c, e, g, x in zip(group, effects, grads, crossed):
            if x:
                warnings.warn(f"average marginal effect of {layout_of(res).columns[c]}: cumulative probabilities "
                              "cross for some rows with the level changed (per-threshold effects used outside the "
                              "data); the effect is nan", CrossingWarning, stacklevel=4)
            out[c] = (e, g)
    return out


def _shared_variables(res):
    """``{design column: other terms}`` for columns that are a data variable which also
    enters other formula terms (``x`` beside ``I(x ** 2)`` or ``x:z``): their row is the
    effect of that column with the other terms held fixed, not of changing the variable."""
    spec = getattr(res, "model_spec", None)
    by_term = getattr(spec, "term_variables", None) if spec is not None else None
    if not by_term:
        return {}
    columns = set(layout_of(res).columns)
    out = {}
    for term, variables in by_term.items():
        for v in variables:
            if v in columns and str(term) != v:
                out.setdefault(v, []).append(str(term))
    return out


def _warn_held_fixed(res):
    shared = _shared_variables(res)
    if shared:
        detail = "; ".join(f"{v} also enters {', '.join(terms)}" for v, terms in shared.items())
        warnings.warn(f"average marginal effects are per design column with the other columns held fixed: "
                      f"{detail}; the row of such a column is not the effect of changing the variable itself",
                      UserWarning, stacklevel=4)


def average_marginal_effects(res):
    """Average marginal effect of each design column on each category probability.

    See the module docstring for the definitions.

    Returns
    -------
    pandas.DataFrame
        One row per design column (a warning names columns whose variable also enters
        other terms, such as ``x`` beside ``I(x ** 2)``: their row holds those terms
        fixed); columns a two-level MultiIndex ``(part, level)`` with
        ``part`` in ``"effect"``, ``"std_error"``; ``frame.attrs["kind"]`` says which rows are
        derivatives and which discrete changes.
    """
    _warn_held_fixed(res)
    tr = res.training_rows()
    layout = layout_of(res)
    w = np.ones(len(tr.y)) if tr.weights is None else tr.weights
    w = w / w.sum()
    D = np.asarray(tr.X, float)
    groups = _binary_groups(res, _binary_columns(D))
    changes = _discrete_changes(res, D, w, groups)
    effects, ses, kinds = [], [], {}
    for c, name in enumerate(layout.columns):
        if c in changes:
            (eff, grad), kinds[name] = changes[c], "change 0 -> 1"
        else:
            (eff, grad), kinds[name] = analytic_marginal_effect(res, D, c, w, gradient=True), "derivative"
        effects.append(eff)
        se = np.sqrt(np.maximum(np.sum((grad @ res.cov) * grad, axis=1), 0.0))
        ses.append(np.where(np.isnan(eff), np.nan, se))
    cols = pd.MultiIndex.from_product([["effect", "std_error"], [str(v) for v in res.levels]],
                                      names=["part", "level"])
    data = np.hstack([np.array(effects), np.array(ses)]) if effects else np.empty((0, len(cols)))
    out = pd.DataFrame(data, index=pd.Index(layout.columns, name="predictor"), columns=cols)
    out.attrs["kind"] = kinds
    return out

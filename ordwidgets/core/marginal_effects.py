"""Average marginal effects of each design column on each category probability.

For a numeric column the effect is the weighted mean over the training rows of the analytic
derivative ``dP(Y = k)/dx = f(u_k) du_k/dx - f(u_{k-1}) du_{k-1}/dx`` with
``du_j/dx_c = -(beta_c + gamma_cj) / sigma - u_j zeta_c`` (the parts the column has).  For a
0/1 column it is the mean discrete change ``P(Y = k | x = 1) - P(Y = k | x = 0)``; for the
dummies of a factor, the change from the reference level to that level (the other dummies
of the factor set to 0).  Effects sum to zero over the levels.

Standard errors by the delta method (Oehlert 1992, Am. Stat. 46:27-29) with the analytic
parameter gradients of averaged probabilities
(:func:`~ordwidgets.core.effects.averaged_probabilities`); for a numeric column that
gradient is differenced over ``-+ 1e-4`` standard deviations of the column.

Sign convention: a positive location effect moves probability towards higher categories,
so its marginal effect is negative on the lowest level and positive on the highest.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .effects import averaged_probabilities
from .layout import cumulative_predictors, layout_of
from .terms import term_columns

__all__ = ["average_marginal_effects", "analytic_marginal_effect"]


def analytic_marginal_effect(res, D, c, weights):
    """Weighted mean of ``dP(Y = k)/dx_c`` over the rows of ``D`` (shape ``(J,)``)."""
    layout = layout_of(res)
    theta, beta, gamma, zeta = layout.split(res.params)
    U, sigma = cumulative_predictors(layout, res.params, D)
    shift = np.zeros(layout.m)
    if c in layout.location:
        shift += beta[layout.location.index(c)]
    if c in layout.nonparallel:
        shift += gamma[layout.nonparallel.index(c)]
    du = -shift[None, :] / sigma[:, None]
    if c in layout.scale:
        du = du - U * zeta[layout.scale.index(c)]
    dF = res.link.pdf(U) * du
    n = len(U)
    return weights @ np.diff(np.column_stack([np.zeros(n), dF, np.zeros(n)]), axis=1)


def _binary_columns(D):
    return [bool(np.all((D[:, c] == 0.0) | (D[:, c] == 1.0))) for c in range(D.shape[1])]


def _sibling_index(res, binary):
    """For each design column, the other 0/1 columns of its formula term (a factor's dummies)."""
    cols = list(layout_of(res).columns)
    out = {c: [] for c in range(len(cols))}
    for members in term_columns(res).values():
        idx = [cols.index(m) for m in members if m in cols]
        for c in idx:
            out[c] = [s for s in idx if s != c and binary[s]]
    return out


class _ParallelEdits:
    """Mean probabilities of a parallel fit with some design columns set to other values.

    Only the linear predictor changes (``eta - x_cols'beta_cols + new'beta_cols``) and the
    gradient's effect block is ``-a'X`` with the edited columns replaced by ``-a'new``, so
    no edited copy of the design is made; the old part of ``eta`` is kept per column set
    (one product for all the dummies of a factor).
    """

    def __init__(self, res, X, w):
        self.res, self.X, self.w = res, X, w
        self.m = res.n_thresholds
        self.theta, self.beta = res.params[:self.m], res.params[self.m:]
        self.eta = X @ self.beta
        self._old = {}

    def average(self, cols, new):
        """``new``: one value (scalar or ``(n,)`` array) per column of ``cols``."""
        key = tuple(sorted(cols))
        if key not in self._old:
            self._old[key] = self.X[:, list(key)] @ self.beta[list(key)]
        eta = self.eta - self._old[key] + sum(v * self.beta[c] for c, v in zip(cols, new))
        U = self.theta[None, :] - eta[:, None]
        n, m, link = len(U), self.m, self.res.link
        A = self.w[:, None] * link.pdf(U)
        C = np.zeros((m + 2, self.res.n_params))
        C[np.arange(1, m + 1), np.arange(m)] = A.sum(axis=0)
        C[1:m + 1, m:] = -(A.T @ self.X)
        for c, v in zip(cols, new):
            C[1:m + 1, m + c] = -(A.T @ np.broadcast_to(v, (n,)))
        P = np.diff(np.column_stack([np.zeros(n), link.cdf(U), np.ones(n)]), axis=1)
        return self.w @ P, np.diff(C, axis=0)


def _averages(res, D, w, fast, cols, new):
    """Mean probabilities and gradient with ``D[:, cols]`` set to ``new`` (any layout)."""
    if fast is not None:
        return fast.average(cols, new)
    edited = D.copy()
    for c, v in zip(cols, new):
        edited[:, c] = v
    return averaged_probabilities(res, edited, w)


def _effect(res, D, c, w, binary, siblings, fast):
    """Effect ``(J,)``, its parameter gradient ``(J, P)`` and the kind of column ``c``."""
    if binary[c]:
        cols = [c] + list(siblings)
        zero = [0.0] * len(cols)
        (p0, g0), (p1, g1) = (_averages(res, D, w, fast, cols, zero),
                              _averages(res, D, w, fast, cols, [1.0] + zero[1:]))
        return p1 - p0, g1 - g0, "change 0 -> 1"
    h = 1e-4 * max(float(np.std(D[:, c])), 1e-8)
    g = (_averages(res, D, w, fast, [c], [D[:, c] + h])[1] - _averages(res, D, w, fast, [c], [D[:, c] - h])[1]) / (2 * h)
    return analytic_marginal_effect(res, D, c, w), g, "derivative"


def average_marginal_effects(res):
    """Average marginal effect of each design column on each category probability.

    See the module docstring for the definitions.

    Returns
    -------
    pandas.DataFrame
        One row per design column; columns a two-level MultiIndex ``(part, level)`` with
        ``part`` in ``"effect"``, ``"std_error"``; ``frame.attrs["kind"]`` says which rows are
        derivatives and which discrete changes.
    """
    tr = res.training_rows()
    layout = layout_of(res)
    w = np.ones(len(tr.y)) if tr.weights is None else tr.weights
    w = w / w.sum()
    binary = _binary_columns(tr.X)
    siblings = _sibling_index(res, binary)
    fast = _ParallelEdits(res, tr.X, w) if layout.is_parallel else None
    effects, ses, kinds = [], [], {}
    for c, name in enumerate(layout.columns):
        eff, grad, kinds[name] = _effect(res, tr.X, c, w, binary, siblings[c], fast)
        effects.append(eff)
        ses.append(np.sqrt(np.maximum(np.sum((grad @ res.cov) * grad, axis=1), 0.0)))
    cols = pd.MultiIndex.from_product([["effect", "std_error"], [str(v) for v in res.levels]],
                                      names=["part", "level"])
    data = np.hstack([np.array(effects), np.array(ses)]) if effects else np.empty((0, len(cols)))
    out = pd.DataFrame(data, index=pd.Index(layout.columns, name="predictor"), columns=cols)
    out.attrs["kind"] = kinds
    return out

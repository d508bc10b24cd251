"""Model layout: which design columns enter where, and the cuts it implies.

Every fit carries a :class:`ModelLayout`; a plain (proportional-odds) fit has every column
as a parallel effect and no scale effect.

The extended model lets some predictors have a separate effect at each threshold (partial
proportional odds; Peterson & Harrell 1990, Appl. Statist. 39:205-217) and lets others
change the spread of the latent error (location-scale model; McCullagh 1980, J. R. Statist.
Soc. B 42:109-142, sec. 6):

    P(Y <= j | x) = F(u_j),   u_j = (theta_j - x'beta - w'gamma_j) / exp(z'zeta).

``x`` are the parallel location columns, ``w`` the non-parallel ones and ``z`` the scale
columns (no intercept in ``z``).  Positive ``beta`` or ``gamma_j`` move probability towards
higher categories (at threshold ``j`` for ``gamma_j``); positive ``zeta`` widens the latent
error distribution (more mass in both extreme categories).

Parameters are stored as ``[theta (m), beta (p), gamma (q blocks of m), zeta (r)]`` and named

* thresholds: ``"low->high"`` (e.g. ``"poor->fair"``),
* parallel effects: the design column name (``"dose"``),
* per-threshold effects: ``"<column> @ <threshold>"`` (``"dose @ poor->fair"``),
* scale effects: ``"scale: <column>"`` (``"scale: dose"``).

The objective reuses :func:`~ordwidgets.core.objective.row_terms` (derivatives of one row's
``log P`` with respect to its interval ends) and the chain rule through ``u``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .arguments import check_thresholds
from .exceptions import OrdinalDataError
from .links import get_link
from .objective import row_terms

__all__ = ["ModelLayout", "ExtendedDesign", "layout_of", "parallel_layout", "scale_name", "per_threshold_name",
           "effect_groups", "all_training_rows", "latent_predictor"]


def per_threshold_name(column, threshold):
    """Name of the effect of ``column`` at one threshold: ``"dose @ poor->fair"``."""
    return f"{column} @ {threshold}"


def scale_name(column):
    """Name of the scale effect of ``column``: ``"scale: dose"``."""
    return f"scale: {column}"


@dataclass(frozen=True)
class ModelLayout:
    """Which design columns enter where.

    Attributes
    ----------
    columns : tuple of str
        All distinct design columns (the columns of ``training.X``).
    location, nonparallel, scale : tuple of int
        Indices into ``columns`` of the parallel location effects, the per-threshold
        effects and the scale effects.  A column may be in a location group and in
        ``scale``.
    thresholds : tuple of str
        Threshold labels.
    """

    columns: tuple
    location: tuple
    nonparallel: tuple
    scale: tuple
    thresholds: tuple

    @property
    def m(self) -> int:
        return len(self.thresholds)

    @property
    def is_parallel(self) -> bool:
        return not self.nonparallel and not self.scale

    @property
    def n_params(self) -> int:
        return self.m * (1 + len(self.nonparallel)) + len(self.location) + len(self.scale)

    def param_names(self) -> list:
        """Names of all parameters in storage order."""
        c = self.columns
        names = list(self.thresholds) + [c[i] for i in self.location]
        names += [per_threshold_name(c[i], t) for i in self.nonparallel for t in self.thresholds]
        return names + [scale_name(c[i]) for i in self.scale]

    def blocks(self):
        """Slices of ``theta``, ``beta``, ``gamma`` and ``zeta`` in the parameter vector."""
        m, p, q = self.m, len(self.location), len(self.nonparallel)
        b = m + p
        g = b + q * m
        return slice(0, m), slice(m, b), slice(b, g), slice(g, g + len(self.scale))

    def split(self, params):
        """``theta (m,), beta (p,), gamma (q, m), zeta (r,)`` from a parameter vector."""
        t, b, g, z = self.blocks()
        params = np.asarray(params, float)
        return params[t], params[b], params[g].reshape(len(self.nonparallel), self.m), params[z]

    def arrays(self, D):
        """Location, non-parallel and scale parts ``(X, W, Z)`` of a full design ``D``."""
        D = np.asarray(D, float).reshape(len(D), len(self.columns))
        X = D if self.location == tuple(range(len(self.columns))) else D[:, list(self.location)]
        return X, D[:, list(self.nonparallel)], D[:, list(self.scale)]

    def with_nonparallel(self, extra):
        """The same layout with design columns ``extra`` (indices) moved to per-threshold."""
        extra = [i for i in extra if i not in self.nonparallel]
        loc = tuple(i for i in self.location if i not in extra)
        nonpar = tuple(sorted(self.nonparallel + tuple(extra)))
        return ModelLayout(self.columns, loc, nonpar, self.scale, self.thresholds)


def parallel_layout(columns, thresholds) -> ModelLayout:
    """The layout of a plain fit: every column a parallel effect, no scale effect."""
    columns = tuple(columns)
    return ModelLayout(columns, tuple(range(len(columns))), (), (), tuple(thresholds))


def layout_of(res) -> ModelLayout:
    """The layout of a fit (every fit carries one)."""
    return res.layout


def unscaled_cuts(layout, params, W):
    """``theta_j - w'gamma_j`` for each row (the location part common to all cuts dropped)."""
    theta, _, gamma, _ = layout.split(params)
    return theta[None, :] - (W @ gamma if gamma.size else 0.0)


def cumulative_predictors(layout, params, D):
    """``u_ij`` for every row and threshold, and the row scales ``sigma_i``.

    Returns
    -------
    U : ndarray, shape (n, m)
    sigma : ndarray, shape (n,)
    """
    return cuts_from_arrays(layout, params, layout.arrays(D))


def cuts_from_arrays(layout, params, arrays):
    """:func:`cumulative_predictors` from the split design ``(X, W, Z)``."""
    X, W, Z = arrays
    _, beta, _, zeta = layout.split(params)
    eta = X @ beta if beta.size else np.zeros(len(X))
    with np.errstate(over="ignore"):
        sigma = np.exp(Z @ zeta) if zeta.size else np.ones(len(X))
    return (unscaled_cuts(layout, params, W) - eta[:, None]) / sigma[:, None], sigma


def end_values(U, j):
    """``U[i, j_i]``, with ``-inf`` where ``j_i < 0`` and ``inf`` where ``j_i >= m``."""
    m = U.shape[1]
    inside = (j >= 0) & (j < m)
    picked = U[np.arange(len(U)), np.clip(j, 0, m - 1)]
    return np.where(inside, picked, np.where(j < 0, -np.inf, np.inf))


def end_jacobian(layout, arrays, U, sigma, j):
    """Derivatives ``du_i/dparams`` of the cut ``j_i`` of each row.

    Parameters
    ----------
    arrays : (X, W, Z)
    U, sigma : from :func:`cumulative_predictors`
    j : ndarray of int, shape (n,)
        Threshold index per row, ``-1`` or ``m`` where the end is infinite.

    Returns
    -------
    u : ndarray, shape (n,)
        ``u_i`` (``-inf`` / ``inf`` at missing ends).
    du : ndarray, shape (n, P)
        Zero rows at missing ends.
    """
    X, W, Z = arrays
    m = layout.m
    n = len(X)
    inside = (j >= 0) & (j < m)
    jj = np.clip(j, 0, m - 1)
    rows = np.arange(n)
    u = end_values(U, j)
    inv = np.where(inside, 1.0 / sigma, 0.0)
    tb, bb, gb, zb = layout.blocks()
    du = np.zeros((n, layout.n_params))
    du[rows, jj] = inv
    du[:, bb] = -X * inv[:, None]
    for q in range(W.shape[1]):
        du[rows, gb.start + q * m + jj] = -W[:, q] * inv
    if Z.shape[1]:
        du[:, zb] = -np.where(inside, u, 0.0)[:, None] * Z
    return u, du


def _second_order_scale(H, du, u, c, Z, zb):
    """Add ``sum_i c_i d2u_i/dparams2`` (non-zero only through the scale effects).

    ``d2u/(dpsi dzeta') = -(du/dpsi) z'`` for every parameter ``psi``; for two scale effects
    it is ``u z z'``.
    """
    T = du.T @ (c[:, None] * Z)
    H[:, zb] -= T
    H[zb, :] -= T.T
    cu = np.where(np.isfinite(u), u, 0.0) * c
    H[zb, zb] -= np.einsum("ni,nj->ij", Z, cu[:, None] * Z)  # BLAS is slow for tiny outputs


@dataclass(eq=False)
class ExtendedDesign:
    """Rows of an extended fit: pure function from parameters to ``(loglik, grad, hess)``.

    Parameters
    ----------
    layout : ModelLayout
    D : ndarray, shape (n, d)
        Full design (columns ``layout.columns``).
    y : ndarray of int
        Category codes ``0..m``.
    weights : ndarray or None
        Frequency weights.
    scale_design : ndarray, optional
        Design used for the scale columns instead of ``D`` (the fitter scales them without
        centring, while the location columns are centred).
    """

    layout: ModelLayout
    D: np.ndarray
    y: np.ndarray
    weights: np.ndarray | None = None
    scale_design: np.ndarray | None = None

    def __post_init__(self):
        X, W, Z = self.layout.arrays(self.D)
        if self.scale_design is not None:
            Z = self.layout.arrays(self.scale_design)[2]
        self._arrays = (X, W, Z)

    @property
    def n_params(self) -> int:
        return self.layout.n_params

    def counts(self):
        """Weighted number of rows in each category."""
        return np.bincount(self.y, weights=self.weights, minlength=self.layout.m + 1).astype(float)

    def cuts(self, params):
        """``(U, sigma)`` for the training rows."""
        return cuts_from_arrays(self.layout, params, self._arrays)

    def gaps(self, params):
        """Gaps between adjacent unscaled cuts, ``(n, m - 1)``; all positive when feasible."""
        return np.diff(unscaled_cuts(self.layout, params, self._arrays[1]), axis=1)

    def feasible(self, params):
        """Finite parameters and strictly increasing cuts for every training row."""
        return bool(np.all(np.isfinite(params)) and np.all(self.gaps(params) > 0))

    def sums(self, link, params, *, order=2):
        """Log-likelihood and, for ``order`` 1 or 2, its gradient and Hessian."""
        link = get_link(link)
        U, sigma = self.cuts(params)
        up, lo = end_values(U, self.y), end_values(U, self.y - 1)
        t = row_terms(link, upper=up, lower=lo, hessian=order >= 2)
        w = np.ones(len(self.y)) if self.weights is None else self.weights
        ll = float(w @ t["logp"]) if np.all(np.isfinite(t["logp"][w > 0])) else -np.inf
        if order == 0 or not np.isfinite(ll):
            return ll, None, None
        with np.errstate(over="ignore", invalid="ignore"):
            du = end_jacobian(self.layout, self._arrays, U, sigma, self.y)[1]
            dl = end_jacobian(self.layout, self._arrays, U, sigma, self.y - 1)[1]
        gu, gl = _zero_missing(t["gu"]), _zero_missing(t["gl"])
        g = du.T @ (w * gu) + dl.T @ (w * gl)
        if order < 2:
            return ll, g, None
        return ll, g, self._hessian(t, w, up, du, lo, dl)

    def _hessian(self, t, w, up, du, lo, dl):
        huu, hll, hul = (_zero_missing(t[k]) for k in ("huu", "hll", "hul"))
        cross = du.T @ ((w * hul)[:, None] * dl)
        H = du.T @ ((w * huu)[:, None] * du) + dl.T @ ((w * hll)[:, None] * dl) + cross + cross.T
        Z = self._arrays[2]
        if Z.shape[1]:
            zb = self.layout.blocks()[3]
            _second_order_scale(H, du, up, w * _zero_missing(t["gu"]), Z, zb)
            _second_order_scale(H, dl, lo, w * _zero_missing(t["gl"]), Z, zb)
        return H


def _zero_missing(v):
    return np.where(np.isfinite(v), v, 0.0)


def location_predictor(layout, params, D):
    """``x'beta`` over the parallel location columns (per-threshold parts excluded)."""
    X = layout.arrays(D)[0]
    beta = layout.split(params)[1]
    return X @ beta if beta.size else np.zeros(len(X))


def latent_predictor(layout, params, D):
    """``x'beta`` over the parallel location columns, refused when there are none to use.

    The latent predictor of a fit holds its parallel location effects only: per-threshold
    effects move each cut on its own and scale effects stretch the latent error, so neither
    has a place on one latent scale.  A fit whose every predictor is per-threshold or scale
    would give 0 for every row whatever its data, so it is refused.

    Raises
    ------
    OrdinalDataError
        The fit has predictors but no parallel location effect (the message names them).
    """
    if layout.columns and not layout.location:
        parts = [layout.columns[i] for i in (*layout.nonparallel, *layout.scale)]
        raise OrdinalDataError(
            "kind='latent' has no single latent scale for this fit: every predictor "
            f"({', '.join(map(repr, dict.fromkeys(parts)))}) has per-threshold or scale effects and "
            "none a parallel location effect; use kind='probabilities' or 'cumulative'")
    return location_predictor(layout, params, D)


def error_bounds_of(res, thresholds=None, coefficients=None):
    """Standardised latent interval ``(lower, upper)`` of each training row's category.

    With scale effects the ends are divided by the row's scale ``exp(z'zeta)``; with
    per-threshold effects each end uses the effects of its own threshold.
    """
    tr = res.training_rows()
    m = res.n_thresholds
    theta = res.params[:m] if thresholds is None else check_thresholds(thresholds, res.threshold_names)
    rest = res.params[m:] if coefficients is None else np.asarray(coefficients, float)
    U, _ = cumulative_predictors(layout_of(res), np.concatenate([theta, rest]), tr.X)
    n = len(U)
    full = np.column_stack([np.full(n, -np.inf), U, np.full(n, np.inf)])
    rows = np.arange(n)
    return full[rows, tr.y], full[rows, tr.y + 1]


def effect_groups(res):
    """Names of a fit's effects by kind: ``"parallel"``, ``"per_threshold"``, ``"scale"``."""
    layout = layout_of(res)
    names = layout.param_names()
    _, bb, gb, zb = layout.blocks()
    return {"parallel": names[bb], "per_threshold": names[gb], "scale": names[zb]}


def model_facts(res) -> dict:
    """Display facts of a fit with per-threshold or scale effects (empty for a parallel fit)."""
    layout = res.layout
    if layout.is_parallel:
        return {}
    cols = layout.columns
    facts = {"per-threshold effects": ", ".join(cols[i] for i in layout.nonparallel) or "none",
             "scale effects": ", ".join(cols[i] for i in layout.scale) or "none"}
    crossing = res.options.get("crossing")
    if crossing:
        facts["cumulative probabilities cross"] = "; ".join(crossing)
    return facts


def all_training_rows(res, what):
    """The training rows of a fit, refusing a display sample (a Dask fit) with a clear error.

    Refits and profiles compare log-likelihoods with ``res.loglik``, which only makes sense
    on every row that was fitted.
    """
    tr = res.training_rows()
    if getattr(tr, "is_sample", False):
        raise ValueError(f"{what} needs every fitted row, but this fit keeps {tr.describe()}; "
                         "fit the rows as a pandas DataFrame for it")
    return tr

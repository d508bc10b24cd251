"""Marginal likelihood of a cumulative link model with a normal random intercept per group.

Model (Hedeker & Gibbons 1994, Biometrics 50:933-944): for row ``i`` in group ``g``,
``P(Y_i <= j | u_g) = F(theta_j - x_i'beta - u_g)`` with ``u_g = sigma * z_g`` and
``z_g ~ N(0, 1)`` independent.  A positive ``u_g`` moves that group's rows towards higher
categories, like a positive effect.  The likelihood of group ``g`` is

    ``L_g = int prod_i P_i(z)^{w_i} phi(z) dz``

(``w_i`` frequency weights).  It is computed by adaptive Gauss-Hermite quadrature
(Pinheiro & Bates 1995, J. Comput. Graph. Statist. 4:12-35): with ``h_g(z) = sum_i w_i
log P_i(z) + log phi(z)``, its mode ``zhat_g`` and curvature ``c_g = -h_g''(zhat_g)``,

    ``L_g ~= c_g^{-1/2} sum_k omega_k exp(h_g(zhat_g + t_k / sqrt(c_g)) + t_k^2 / 2)``

for the probabilists' Gauss-Hermite nodes ``t_k`` and weights ``omega_k``
(:func:`numpy.polynomial.hermite_e.hermegauss`).  One point is the Laplace approximation.

``sigma`` is a free real parameter (the likelihood is even in it and smooth through 0, so a
true value of 0 is an ordinary interior point for the optimiser); the reported SD is
``|sigma|``.

The gradient is the exact gradient of the quadrature approximation, nodes included: the
mode and curvature move with the parameters, and their derivatives follow from the
implicit-function theorem (``dzhat/dpsi = h_zpsi / c``,
``dc/dpsi = -(h_zzpsi + h_zzz dzhat/dpsi)``), which needs third derivatives of the row
log-probabilities (:func:`log_density_curvature`).  The Hessian returned is that of the
quadrature with the nodes held where they are (``sum_k pi_k (H_k + s_k s_k') - sbar sbar'``
per group); it is what Newton steps use.  With the nodes held fixed the derivatives lose
part of the adaptive rule's accuracy, so the covariance of a fit takes this Hessian with as
many points as it needs to match one with about twice the points
(:func:`ordwidgets.core.grouped_choices.choose_covariance_points`), or
:func:`differenced_hessian`, which differences the exact gradient, for the Laplace
approximation.

Every evaluation passes over the rows once for all nodes (arrays of shape ``(n, Q)``) plus
a few times for the modes (Newton steps per group, warm-started from the previous
evaluation's modes) and once for the third derivatives at the modes; sums per group are
products with a sparse group matrix.  The default number of points is chosen per data set
(:func:`ordwidgets.core.grouped_choices.choose_points`).
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.polynomial.hermite_e import hermegauss
from scipy.special import logsumexp

from .links import get_link
from .grouped_sums import group_matrix, moment_hessian, node_scores, outer_term, parameter_sums, score_matrices
from .objective import row_logp, row_terms, sort_by_category

__all__ = ["GroupedRows", "MarginalSums", "marginal_sums", "find_modes", "log_density_curvature",
           "differenced_hessian", "quadrature_rule", "DEFAULT_POINTS", "default_points", "shift_terms",
           "shift_derivatives", "parameter_sums", "sorted_codes", "sorted_counts"]

#: Points of a fixed rule (:func:`default_points`) for callers that want one without looking
#: at the data: enough for the log-likelihood to match a 50-point integral to 1e-4 on the
#: tests' data (groups of about 15 rows, SD 1.1); the cauchit's heavy tails make the
#: conditional densities less normal and need :data:`CAUCHIT_POINTS`.  Fits choose their
#: default per data set instead (:mod:`ordwidgets.core.grouped_choices`).
DEFAULT_POINTS = 9
CAUCHIT_POINTS = 17

def default_points(link):
    """Fixed default quadrature points for ``link`` (see :data:`DEFAULT_POINTS`)."""
    return CAUCHIT_POINTS if get_link(link).name == "cauchit" else DEFAULT_POINTS


_LOG_SQRT_2PI = 0.5 * np.log(2.0 * np.pi)
_MODE_TOL = 1e-10


def log_density_curvature(link, t, score=None):
    """``(log f)''(t)``, the slope of the density's score ``f'/f``, at finite ``t``.

    Closed forms of the five latent distributions: logistic ``-(1 - tanh^2(t/2)) / 2``,
    normal ``-1``, Gumbel-min ``-exp(t)``, Gumbel-max ``-exp(-t)``, Cauchy
    ``-2 (1 - t^2) / (1 + t^2)^2``.  Given ``score`` (``f'/f`` at ``t``) the first four are
    written in it (``(s^2 - 1) / 2``, ``-1``, ``s - 1``, ``-(s + 1)``), saving a
    transcendental function per row.
    """
    t = np.asarray(t, float)
    name = get_link(link).name
    with np.errstate(over="ignore"):
        if name == "logit":
            return 0.5 * (score * score - 1.0) if score is not None else -0.5 * (1.0 - np.tanh(0.5 * t) ** 2)
        if name == "probit":
            return -np.ones_like(t)
        if name == "cloglog":
            return score - 1.0 if score is not None else -np.exp(t)
        if name == "loglog":
            return -(score + 1.0) if score is not None else -np.exp(-t)
        if name == "cauchit":
            return -2.0 * (1.0 - t * t) / (1.0 + t * t) ** 2
    raise ValueError(f"no density curvature for link {name!r}")


def quadrature_rule(points):
    """Nodes ``t_k`` and log weights ``log(omega_k / sqrt(2 pi)) + t_k^2 / 2``."""
    if not (isinstance(points, (int, np.integer)) and not isinstance(points, bool) and 1 <= points <= 100):
        raise ValueError(f"quadrature must be a whole number of points from 1 to 100, got {points!r}")
    if points == 1:
        return np.zeros(1), np.zeros(1)
    t, omega = hermegauss(int(points))
    return t, np.log(omega) - _LOG_SQRT_2PI + 0.5 * t * t


def sorted_codes(bounds):
    """Category code of each row of a category-sorted design with segment ``bounds``."""
    return np.repeat(np.arange(len(bounds) - 1), np.diff(bounds))


def sorted_counts(bounds, weights=None):
    """Weighted number of rows in each category of a category-sorted design."""
    if weights is None:
        return np.diff(bounds).astype(float)
    return np.bincount(sorted_codes(bounds), weights=weights, minlength=len(bounds) - 1)


@dataclass(eq=False)
class GroupedRows:
    """Rows sorted by response category, with each row's group code.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Predictor columns (no intercept), rows sorted by category.
    bounds : ndarray, shape (J + 1,)
        Category ``k`` occupies rows ``bounds[k]:bounds[k+1]``.
    groups : ndarray of int, shape (n,)
        Group code ``0..n_groups-1`` of each (sorted) row.
    n_groups : int
    weights : ndarray or None
        Frequency weights in the same order.
    """

    X: np.ndarray
    bounds: np.ndarray
    groups: np.ndarray
    n_groups: int
    weights: np.ndarray | None = None

    @classmethod
    def from_rows(cls, X, y, groups, n_levels, weights=None):
        """Sort rows given in any order; returns the layout and the order used."""
        order, bounds = sort_by_category(np.asarray(y), n_levels)
        groups = np.asarray(groups)
        w = None if weights is None else np.asarray(weights, float)[order]
        n_groups = int(groups.max()) + 1 if len(groups) else 0
        return cls(np.asarray(X, float)[order], bounds, groups[order].astype(np.intp), n_groups, w), order

    @property
    def n_levels(self) -> int:
        return len(self.bounds) - 1

    @property
    def n_params(self) -> int:
        """Thresholds, effects and the one SD."""
        return self.n_levels - 1 + self.X.shape[1] + 1

    @cached_property
    def codes(self):
        """Category code of each sorted row."""
        return sorted_codes(self.bounds)

    def counts(self):
        """Weighted number of rows in each category."""
        return sorted_counts(self.bounds, self.weights)

    @cached_property
    def group_matrix(self):
        """Sparse (n_groups, n) matrix of the rows' weights in their groups."""
        return group_matrix(self)

    @cached_property
    def score_matrices(self):
        """Sparse matrices adding rows into each group's score (see grouped_sums)."""
        return score_matrices(self)

    def group_total(self, values):
        """Weighted sum of per-row ``values`` (shape (n,) or (n, k)) within each group."""
        return self.group_matrix @ values

    def rows_per_group(self):
        """Number of (sorted) rows in each group."""
        return np.bincount(self.groups, minlength=self.n_groups)

    def subset(self, group_ids):
        """The rows of the groups ``group_ids`` (recoded ``0..len(group_ids)-1``), still
        sorted by category."""
        recode = np.full(self.n_groups, -1, np.intp)
        recode[np.asarray(group_ids, np.intp)] = np.arange(len(group_ids))
        keep = recode[self.groups] >= 0
        counts = np.bincount(self.codes[keep], minlength=self.n_levels)
        bounds = np.concatenate([[0], np.cumsum(counts)])
        w = None if self.weights is None else self.weights[keep]
        return GroupedRows(self.X[keep], bounds, recode[self.groups[keep]], len(group_ids), w)


@dataclass(frozen=True, eq=False)
class MarginalSums:
    """Adaptive-quadrature log-likelihood and its derivatives at one parameter vector.

    ``grad`` is exact for the quadrature approximation; ``hess`` holds the nodes fixed
    (see the module docstring).  ``modes`` and ``curvature`` are ``zhat_g`` and ``c_g`` on
    the standard-normal scale of ``z``; ``group_loglik`` the per-group terms.
    """

    loglik: float
    grad: np.ndarray | None
    hess: np.ndarray | None
    modes: np.ndarray
    curvature: np.ndarray
    group_loglik: np.ndarray
    group_scores: np.ndarray | None = None


def shift_terms(link, rows, theta, shift, *, order=2, third=False):
    """Per-row ``log P`` and derivatives in the interval ends, zeros for a missing end.

    Row ``i`` in category ``k`` has ``upper = theta_k - shift_i`` and ``lower =
    theta_{k-1} - shift_i``; ``shift`` has shape (n,) or (n, Q) (one column per quadrature
    node).  Returns a dict of arrays of the shape of ``shift`` in the sorted row order:
    ``lp`` and, with ``order >= 1``, ``u``, ``l`` (first), with ``order >= 2`` ``uu``,
    ``ul``, ``ll`` (second) and, with ``third``, ``uuu``, ``uul``, ``ull``, ``lll``.
    """
    m = rows.n_levels - 1
    second = order >= 2 or third
    keys = ["lp"] + (["u", "l"] if order >= 1 or third else []) + (["uu", "ul", "ll"] if second else []) + (
        ["uuu", "uul", "ull", "lll"] if third else [])
    out = {k: np.zeros(shift.shape) for k in keys}
    b = rows.bounds
    for k in range(rows.n_levels):
        s, e = int(b[k]), int(b[k + 1])
        if s == e:
            continue
        up = theta[k] - shift[s:e] if k < m else None
        lo = theta[k - 1] - shift[s:e] if k > 0 else None
        if len(keys) == 1:
            out["lp"][s:e] = row_logp(link, upper=up, lower=lo)
            continue
        t = row_terms(link, upper=up, lower=lo, hessian=second)
        out["lp"][s:e] = t["logp"]
        for key, src in (("u", "gu"), ("l", "gl"), ("uu", "huu"), ("ll", "hll"), ("ul", "hul")):
            if key in out and t[src] is not None:
                out[key][s:e] = t[src]
        if third:
            _third_terms(link, out, s, e, up, lo, t)
    return out


def _third_terms(link, out, s, e, up, lo, t):
    """Third derivatives of ``log(F(u) - F(l))`` from ``a = f(u)/P``, ``b = f(l)/P``.

    With the scores ``d_u = f'/f(u)``, ``d_l = f'/f(l)`` and ``c_u = f''/f(u) =
    (log f)''(u) + d_u^2`` (``c_l`` likewise): ``uuu = a (c_u - a (3 d_u - 2 a))``,
    ``uul = a b (d_u - 2 a)``, ``ull = a b (d_l + 2 b)``, ``lll = -b (c_l + b (3 d_l + 2 b))``
    (zero where an end is missing).
    """
    with np.errstate(over="ignore", invalid="ignore"):
        if up is not None:
            a = t["gu"]
            du = link.dlogpdf(up)
            cu = log_density_curvature(link, up, score=du) + du * du
            out["uuu"][s:e] = a * (cu - a * (3.0 * du - 2.0 * a))
        if lo is not None:
            b = -t["gl"]
            dl = link.dlogpdf(lo)
            cl = log_density_curvature(link, lo, score=dl) + dl * dl
            out["lll"][s:e] = -b * (cl + b * (3.0 * dl + 2.0 * b))
        if up is not None and lo is not None:
            ab = a * b
            out["uul"][s:e] = ab * (du - 2.0 * a)
            out["ull"][s:e] = ab * (dl + 2.0 * b)


def shift_derivatives(T):
    """First, second (and third) derivatives of ``log P`` in the shift ``x'beta + u``."""
    s1 = -(T["u"] + T["l"])
    s2 = T["uu"] + 2.0 * T["ul"] + T["ll"] if "uu" in T else None
    s3 = -(T["uuu"] + 3.0 * T["uul"] + 3.0 * T["ull"] + T["lll"]) if "uuu" in T else None
    return s1, s2, s3


def find_modes(rows, link, theta, eta, sigma, *, start=None, max_iter=100):
    """Mode ``zhat_g`` of ``h_g(z)`` and curvature ``c_g = -h_g''(zhat_g)`` for every group.

    Vectorised Newton iteration over groups with a step-halving safeguard per group (a
    step is kept only where ``h_g`` does not decrease).  Where ``-h_g''`` is below 1 (only
    possible for a link that is not log-concave, the cauchit) the step uses the prior's
    curvature 1; steps are capped at 4 standard deviations.
    """
    G = rows.n_groups
    if sigma == 0.0:
        return np.zeros(G), np.ones(G)
    z = np.zeros(G) if start is None else np.array(start, float)
    h, hz, c = _mode_terms(rows, link, theta, eta, sigma, z)
    for _ in range(max_iter):
        step = np.clip(hz / np.maximum(c, 1.0), -4.0, 4.0)
        if np.max(np.abs(step), initial=0.0) < _MODE_TOL:
            break
        pending = np.ones(G, bool)
        for _ in range(40):
            trial = np.where(pending, z + step, z)
            ht, hzt, ct = _mode_terms(rows, link, theta, eta, sigma, trial)
            ok = pending & (ht >= h - 1e-13 * np.abs(h))
            z, h, hz, c = (np.where(ok, a, b) for a, b in ((trial, z), (ht, h), (hzt, hz), (ct, c)))
            pending &= ~ok
            step = np.where(pending, 0.5 * step, 0.0)
            if not pending.any() or np.max(np.abs(step)) < _MODE_TOL:
                break
    return z, np.maximum(c, 1e-8)


def _mode_terms(rows, link, theta, eta, sigma, z):
    """``h_g(z_g)`` (without constants), ``h_g'`` and ``-h_g''`` for every group."""
    T = shift_terms(link, rows, theta, eta + sigma * z[rows.groups], order=2)
    s1, s2, _ = shift_derivatives(T)
    h = rows.group_total(T["lp"]) - 0.5 * z * z
    return h, sigma * rows.group_total(s1) - z, 1.0 - sigma * sigma * rows.group_total(s2)


def _weighted(rows, v):
    return v if rows.weights is None else rows.weights * v


def marginal_sums(rows, link, params, *, points=None, order=2, start_modes=None,
                  group_scores=False):
    """Adaptive Gauss-Hermite log-likelihood (and derivatives) at ``[theta, beta, sigma]``.

    All quadrature nodes are evaluated in one pass over the rows (arrays of shape
    ``(n, points)``), and the sums per group are sparse products.

    Parameters
    ----------
    rows : GroupedRows
    link : Link or str
    params : ndarray, shape (J - 1 + p + 1,)
    points : int, optional
        Quadrature points per group (1 = Laplace); default :func:`default_points` (fits
        choose theirs per data set: :func:`ordwidgets.core.grouped_choices.choose_points`).
    order : {0, 1, 2}
        0: log-likelihood only; 1: with the exact gradient; 2: also the fixed-node Hessian.
    start_modes : ndarray, optional
        Starting values of the modes (for example from the previous evaluation).
    group_scores : bool
        Also return each group's (fixed-node) score vector, shape (n_groups, n_params).

    Returns
    -------
    MarginalSums
    """
    link = get_link(link)
    m, p = rows.n_levels - 1, rows.X.shape[1]
    theta, beta, sigma = params[:m], params[m:m + p], float(params[m + p])
    eta = rows.X @ beta if p else np.zeros(len(rows.groups))
    if points is None:
        points = default_points(link)
    z, c = find_modes(rows, link, theta, eta, sigma, start=start_modes)
    t, logw = quadrature_rule(points)
    nodes = z[:, None] + t[None, :] / np.sqrt(c)[:, None]
    need = max(order, 2 if group_scores else 0)
    T = shift_terms(link, rows, theta, eta[:, None] + sigma * np.take(nodes, rows.groups, axis=0), order=need)
    ll_gk = rows.group_total(T["lp"]) - 0.5 * nodes ** 2 + logw
    lse = logsumexp(ll_gk, axis=1)
    group_ll = lse - 0.5 * np.log(c)
    if need == 0:
        return MarginalSums(float(group_ll.sum()), None, None, z, c, group_ll)
    pi = np.exp(ll_gk - lse[:, None])
    s1 = -(T["u"] + T["l"])
    s1_groups = rows.group_total(s1)
    v = np.take(pi, rows.groups, axis=0)
    if rows.weights is not None:
        v *= rows.weights[:, None]
    zr = np.take(nodes, rows.groups, axis=0)
    grad = parameter_sums(rows, _rowdot(v, T["u"]), _rowdot(v, T["l"]), _rowdot(v, s1), _rowdot(v * zr, s1))
    grad = grad + _node_correction(rows, link, theta, eta, sigma, z, c, t, pi, nodes, s1_groups)
    scores = node_scores(rows, rows.score_matrices, T, nodes, s1_groups)
    hess = moment_hessian(rows, _node_moments(T, v, zr)) + outer_term(pi, scores) if order >= 2 else None
    gs = np.einsum("gk,gka->ga", pi, scores) if group_scores else None
    return MarginalSums(float(group_ll.sum()), grad if order >= 1 else None, hess, z, c, group_ll, gs)


def _rowdot(a, b):
    """``sum_k a_ik b_ik`` for every row ``i``."""
    return np.einsum("ik,ik->i", a, b)


def _node_moments(T, v, zr):
    """Per-row sums over nodes of the second-derivative pieces :func:`moment_hessian` needs
    (the sums of ``uu + ul`` and the like are added from the three basic ones)."""
    vz = v * zr
    uu, ul, ll = _rowdot(v, T["uu"]), _rowdot(v, T["ul"]), _rowdot(v, T["ll"])
    zuu, zul, zll = _rowdot(vz, T["uu"]), _rowdot(vz, T["ul"]), _rowdot(vz, T["ll"])
    ss = T["uu"] + T["ll"]
    ss += 2.0 * T["ul"]
    vz *= zr
    return {"uu": uu, "ll": ll, "ul": ul, "tu0": uu + ul, "tl0": ul + ll, "tu1": zuu + zul, "tl1": zul + zll,
            "s0": uu + 2.0 * ul + ll, "s1": zuu + 2.0 * zul + zll, "s2": _rowdot(vz, ss)}


def _node_correction(rows, link, theta, eta, sigma, z, c, t, pi, nodes, s1_groups):
    """Gradient terms from the mode and curvature moving with the parameters."""
    if sigma == 0.0:
        return np.zeros(rows.n_params)  # h_zpsi and h_zzpsi carry a factor sigma
    g = rows.groups
    hz = sigma * s1_groups - nodes
    A = np.sum(pi * hz, axis=1)
    B = -0.5 / c - 0.5 * c ** -1.5 * np.sum(pi * t[None, :] * hz, axis=1)
    T0 = shift_terms(link, rows, theta, eta + sigma * z[g], order=2, third=True)
    s1, s2, s3 = shift_derivatives(T0)
    hzzz = sigma ** 3 * rows.group_total(s3)
    r = _weighted(rows, ((A - B * hzzz) / c)[g])
    q = _weighted(rows, -B[g])
    zr = z[g]
    s2_ = sigma * sigma
    cu = r * sigma * -(T0["uu"] + T0["ul"]) + q * s2_ * (T0["uuu"] + 2 * T0["uul"] + T0["ull"])
    cl = r * sigma * -(T0["ul"] + T0["ll"]) + q * s2_ * (T0["uul"] + 2 * T0["ull"] + T0["lll"])
    cs = r * sigma * s2 + q * s2_ * s3
    csig = r * (s1 + sigma * zr * s2) + q * (2 * sigma * s2 + s2_ * zr * s3)
    return parameter_sums(rows, cu, cl, cs, csig)


def differenced_hessian(gradient, params, *, rel_step=1e-5):
    """Symmetrised central differences of an exact gradient function.

    ``H[:, j] = (g(x + h e_j) - g(x - h e_j)) / (2h)`` with ``h = rel_step * max(1, |x_j|)``.
    """
    x = np.asarray(params, float)
    H = np.empty((len(x), len(x)))
    for j in range(len(x)):
        h = rel_step * max(1.0, abs(x[j]))
        e = np.zeros(len(x))
        e[j] = h
        H[:, j] = (gradient(x + e) - gradient(x - e)) / (2 * h)
    return 0.5 * (H + H.T)

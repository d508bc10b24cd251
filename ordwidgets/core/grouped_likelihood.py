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
per group); it is what Newton steps use.  For the covariance of the estimates use
:func:`differenced_hessian`, which differences the exact gradient.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.polynomial.hermite_e import hermegauss
from scipy import sparse
from scipy.special import logsumexp

from .links import get_link
from .objective import row_terms, sort_by_category

__all__ = ["GroupedRows", "MarginalSums", "marginal_sums", "find_modes", "log_density_curvature",
           "differenced_hessian", "quadrature_rule", "DEFAULT_POINTS", "default_points", "shift_terms",
           "shift_derivatives", "parameter_sums", "sorted_codes", "sorted_counts"]

#: Default number of quadrature points: enough for the log-likelihood to match a 50-point
#: integral to 1e-4 on the tests' data (groups of about 15 rows, SD 1.1); the cauchit's heavy
#: tails make the conditional densities less normal and need :data:`CAUCHIT_POINTS`.
DEFAULT_POINTS = 9
CAUCHIT_POINTS = 17


def default_points(link):
    """Default quadrature points for ``link`` (see :data:`DEFAULT_POINTS`)."""
    return CAUCHIT_POINTS if get_link(link).name == "cauchit" else DEFAULT_POINTS

_LOG_SQRT_2PI = 0.5 * np.log(2.0 * np.pi)
_MODE_TOL = 1e-10


def log_density_curvature(link, t):
    """``(log f)''(t)``, the slope of the density's score ``f'/f``, at finite ``t``.

    Closed forms of the five latent distributions: logistic ``-(1 - tanh^2(t/2)) / 2``,
    normal ``-1``, Gumbel-min ``-exp(t)``, Gumbel-max ``-exp(-t)``, Cauchy
    ``-2 (1 - t^2) / (1 + t^2)^2``.
    """
    t = np.asarray(t, float)
    name = get_link(link).name
    with np.errstate(over="ignore"):
        if name == "logit":
            return -0.5 * (1.0 - np.tanh(0.5 * t) ** 2)
        if name == "probit":
            return -np.ones_like(t)
        if name == "cloglog":
            return -np.exp(t)
        if name == "loglog":
            return -np.exp(-t)
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

    @property
    def codes(self):
        """Category code of each sorted row."""
        return sorted_codes(self.bounds)

    def counts(self):
        """Weighted number of rows in each category."""
        return sorted_counts(self.bounds, self.weights)

    def group_total(self, values):
        """Weighted sum of per-row ``values`` within each group."""
        v = values if self.weights is None else self.weights * values
        return np.bincount(self.groups, weights=v, minlength=self.n_groups)

    def rows_per_group(self):
        """Number of (sorted) rows in each group."""
        return np.bincount(self.groups, minlength=self.n_groups)


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
    theta_{k-1} - shift_i``.  Returns a dict of arrays in the sorted row order: ``lp``,
    ``u``, ``l`` (first), ``uu``, ``ul``, ``ll`` (second) and, with ``third``, ``uuu``,
    ``uul``, ``ull``, ``lll``.
    """
    m = rows.n_levels - 1
    keys = ["lp", "u", "l"] + (["uu", "ul", "ll"] if order >= 2 or third else []) + (
        ["uuu", "uul", "ull", "lll"] if third else [])
    out = {k: np.zeros(len(shift)) for k in keys}
    b = rows.bounds
    for k in range(rows.n_levels):
        s, e = int(b[k]), int(b[k + 1])
        if s == e:
            continue
        up = theta[k] - shift[s:e] if k < m else None
        lo = theta[k - 1] - shift[s:e] if k > 0 else None
        t = row_terms(link, upper=up, lower=lo, hessian=order >= 2 or third)
        out["lp"][s:e] = t["logp"]
        for key, src, sign in (("u", "gu", 1.0), ("l", "gl", 1.0), ("uu", "huu", 1.0), ("ll", "hll", 1.0),
                               ("ul", "hul", 1.0)):
            if key in out and t[src] is not None:
                out[key][s:e] = sign * t[src]
        if third:
            _third_terms(link, out, s, e, up, lo, t)
    return out


def _third_terms(link, out, s, e, up, lo, t):
    """Third derivatives of ``log(F(u) - F(l))`` from ``a = f(u)/P``, ``b = f(l)/P``.

    With ``A = f'(u)/P``, ``A2 = f''(u)/P`` (and ``B``, ``B2`` at ``l``):
    ``uuu = A2 - 3aA + 2a^3``, ``uul = b (A - 2a^2)``, ``ull = a (B + 2b^2)``,
    ``lll = -B2 - 3bB - 2b^3``.
    """
    a = t["gu"] if up is not None else 0.0
    b = -t["gl"] if lo is not None else 0.0
    A = A2 = B = B2 = 0.0
    with np.errstate(over="ignore", invalid="ignore"):
        if up is not None:
            du = link.dlogpdf(up)
            A, A2 = a * du, a * (log_density_curvature(link, up) + du * du)
        if lo is not None:
            dl = link.dlogpdf(lo)
            B, B2 = b * dl, b * (log_density_curvature(link, lo) + dl * dl)
        out["uuu"][s:e] = A2 - 3 * a * A + 2 * a ** 3
        out["uul"][s:e] = b * (A - 2 * a * a)
        out["ull"][s:e] = a * (B + 2 * b * b)
        out["lll"][s:e] = -B2 - 3 * b * B - 2 * b ** 3


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


def parameter_sums(rows, cu, cl, cs, csig):
    """``sum_i`` of per-row derivative pieces mapped onto ``[theta, beta, sigma]``.

    ``cu`` multiplies ``d upper/d theta`` (the row's own threshold), ``cl`` ``d lower/d
    theta`` (the one below), ``cs`` the row's ``x`` and ``csig`` goes to ``sigma``.
    """
    m = rows.n_levels - 1
    y = rows.codes
    up, lo = y < m, y > 0
    g_theta = np.bincount(y[up], weights=cu[up], minlength=m)[:m] + np.bincount(y[lo] - 1, weights=cl[lo],
                                                                                 minlength=m)[:m]
    return np.concatenate([g_theta, rows.X.T @ cs, [csig.sum()]])


def _weighted(rows, v):
    return v if rows.weights is None else rows.weights * v


def marginal_sums(rows, link, params, *, points=None, order=2, start_modes=None,
                  group_scores=False):
    """Adaptive Gauss-Hermite log-likelihood (and derivatives) at ``[theta, beta, sigma]``.

    Parameters
    ----------
    rows : GroupedRows
    link : Link or str
    params : ndarray, shape (J - 1 + p + 1,)
    points : int, optional
        Quadrature points per group (1 = Laplace; default :func:`default_points`).
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
    z, c = find_modes(rows, link, theta, eta, sigma, start=start_modes)
    t, logw = quadrature_rule(default_points(link) if points is None else points)
    nodes = z[:, None] + t[None, :] / np.sqrt(c)[:, None]
    terms, ll_gk = [], np.empty_like(nodes)
    for k in range(len(t)):
        T = shift_terms(link, rows, theta, eta + sigma * nodes[rows.groups, k], order=order)
        ll_gk[:, k] = rows.group_total(T["lp"]) - 0.5 * nodes[:, k] ** 2 + logw[k]
        terms.append(T)
    lse = logsumexp(ll_gk, axis=1)
    group_ll = lse - 0.5 * np.log(c)
    if order == 0 and not group_scores:
        return MarginalSums(float(group_ll.sum()), None, None, z, c, group_ll)
    pi = np.exp(ll_gk - lse[:, None])
    grad = _fixed_gradient(rows, terms, pi, nodes) + _node_correction(
        rows, link, theta, eta, sigma, z, c, t, terms, pi, nodes)
    hess = _fixed_hessian(rows, terms, pi, nodes, sigma) if order >= 2 else None
    scores = _group_node_scores(rows, terms, nodes) if (order >= 2 or group_scores) else None
    if hess is not None:
        hess = hess + _outer_term(pi, scores)
    gs = np.einsum("gk,gka->ga", pi, scores) if group_scores else None
    return MarginalSums(float(group_ll.sum()), grad if order >= 1 else None, hess, z, c, group_ll, gs)


def _fixed_gradient(rows, terms, pi, nodes):
    g = rows.groups
    n = len(g)
    cu, cl, cs, csig = (np.zeros(n) for _ in range(4))
    for k, T in enumerate(terms):
        v = _weighted(rows, pi[g, k])
        s1 = -(T["u"] + T["l"])
        cu += v * T["u"]
        cl += v * T["l"]
        cs += v * s1
        csig += v * s1 * nodes[g, k]
    return parameter_sums(rows, cu, cl, cs, csig)


def _node_correction(rows, link, theta, eta, sigma, z, c, t, terms, pi, nodes):
    """Gradient terms from the mode and curvature moving with the parameters."""
    if sigma == 0.0:
        return np.zeros(rows.n_params)  # h_zpsi and h_zzpsi carry a factor sigma
    g = rows.groups
    hz = np.stack([sigma * rows.group_total(-(T["u"] + T["l"])) - nodes[:, k] for k, T in enumerate(terms)], 1)
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


def _fixed_hessian(rows, terms, pi, nodes, sigma):
    """``sum_k pi_k H_k`` over groups, with the node moments aggregated per row."""
    g, y, X = rows.groups, rows.codes, rows.X
    m, p = rows.n_levels - 1, X.shape[1]
    n = len(g)
    acc = {key: np.zeros(n) for key in ("uu", "ll", "ul", "tu0", "tl0", "tu1", "tl1", "s0", "s1", "s2")}
    for k, T in enumerate(terms):
        v = _weighted(rows, pi[g, k])
        zk = nodes[g, k]
        su, sl = T["uu"] + T["ul"], T["ul"] + T["ll"]
        ss = su + sl
        acc["uu"] += v * T["uu"]
        acc["ll"] += v * T["ll"]
        acc["ul"] += v * T["ul"]
        acc["tu0"] += v * su
        acc["tl0"] += v * sl
        acc["tu1"] += v * su * zk
        acc["tl1"] += v * sl * zk
        acc["s0"] += v * ss
        acc["s1"] += v * ss * zk
        acc["s2"] += v * ss * zk * zk
    P = m + p + 1
    H = np.zeros((P, P))
    up, lo = y < m, y > 0
    both = up & lo
    H[:m, :m] += np.diag(np.bincount(y[up], acc["uu"][up], minlength=m)[:m]
                         + np.bincount(y[lo] - 1, acc["ll"][lo], minlength=m)[:m])
    off = np.bincount(y[both] - 1, acc["ul"][both], minlength=m)[:m]  # between theta_{k-1} and theta_k
    idx = np.arange(m - 1)
    H[idx, idx + 1] += off[: m - 1]
    H[idx + 1, idx] += off[: m - 1]
    for key_u, key_l, col, span in (("tu0", "tl0", X, slice(m, m + p)), ("tu1", "tl1", np.ones((n, 1)), slice(m + p, P))):
        block = _theta_block(y, m, up, lo, acc[key_u], acc[key_l], col)
        H[:m, span] -= block
        H[span, :m] -= block.T
    H[m:m + p, m:m + p] += X.T @ (X * acc["s0"][:, None])
    H[m:m + p, -1] += X.T @ acc["s1"]
    H[-1, m:m + p] += X.T @ acc["s1"]
    H[-1, -1] += acc["s2"].sum()
    return H


def _theta_block(y, m, up, lo, cu, cl, cols):
    """``sum_i cu_i 1{y_i = j} cols_i + cl_i 1{y_i - 1 = j} cols_i`` as an (m, k) array."""
    out = np.empty((m, cols.shape[1]))
    for j in range(cols.shape[1]):
        out[:, j] = (np.bincount(y[up], cu[up] * cols[up, j], minlength=m)[:m]
                     + np.bincount(y[lo] - 1, cl[lo] * cols[lo, j], minlength=m)[:m])
    return out


def _group_node_scores(rows, terms, nodes):
    """Score vector of each group at each node, shape (n_groups, n_nodes, n_params)."""
    g, y, X = rows.groups, rows.codes, rows.X
    m, p = rows.n_levels - 1, X.shape[1]
    n = len(g)
    w = np.ones(n) if rows.weights is None else rows.weights
    Z = sparse.csr_matrix((w, (g, np.arange(n))), shape=(rows.n_groups, n))
    up, lo = y < m, y > 0
    out = np.empty((rows.n_groups, len(terms), m + p + 1))
    for k, T in enumerate(terms):
        R = np.zeros((n, m + p + 1))
        R[np.flatnonzero(up), y[up]] = T["u"][up]
        R[np.flatnonzero(lo), y[lo] - 1] += T["l"][lo]
        s1 = -(T["u"] + T["l"])
        R[:, m:m + p] = s1[:, None] * X
        R[:, -1] = s1 * nodes[g, k]
        out[:, k, :] = Z @ R
    return out


def _outer_term(pi, scores):
    mean = np.einsum("gk,gka->ga", pi, scores)
    return np.einsum("gk,gka,gkb->ab", pi, scores, scores) - mean.T @ mean


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

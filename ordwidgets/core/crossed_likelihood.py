"""Laplace approximation for random intercepts of several grouping columns (nested or crossed).

Row ``i`` has one group in each grouping column ``c`` and the shift
``s_i = x_i'beta + sum_c sigma_c z_{c, g_c(i)}`` with all ``z ~ N(0, 1)`` independent, so
``P(Y_i <= j | z) = F(theta_j - s_i)``.  Nested groupings (inspectors within districts) and
crossed ones (inspectors and years) are the same model: only the pattern of ``g_c(i)``
differs.  With ``h(z) = sum_i w_i log P_i(z) - z'z/2``, its mode ``zhat`` and
``C = -h''(zhat) = I - Z_s' diag(w l'') Z_s`` (``Z_s`` the sparse row-by-group matrix with
``sigma_c`` in the columns of grouping ``c``), the Laplace approximation is

    ``log L ~= h(zhat) - log det(C) / 2``

(Tierney & Kadane 1986, J. Amer. Statist. Assoc. 81:82-86; for these models e.g. Pinheiro &
Bates 1995).  Its gradient is exact: ``dh/dpsi`` at the mode (envelope theorem) minus
``tr(C^{-1} dC/dpsi) / 2``, where ``dC/dpsi`` includes the mode's own movement
``dzhat/dpsi = C^{-1} h_zpsi``; the trace needs the entries of ``C^{-1}`` at each row's pairs
of groups, taken from a dense inverse (fine up to a few thousand groups in all).  Newton
steps use central differences of that gradient as their Hessian.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg, sparse

from .grouped_likelihood import parameter_sums, shift_derivatives, shift_terms, sorted_codes, sorted_counts
from .links import get_link
from .objective import sort_by_category
from .optimize import ascent_direction

__all__ = ["CrossedRows", "laplace_sums", "joint_modes", "MAX_GROUPS"]

#: Largest total number of groups over all grouping columns (dense ``C^{-1}``).
MAX_GROUPS = 5_000


@dataclass(eq=False)
class CrossedRows:
    """Rows sorted by category with one group code per grouping column.

    ``codes`` has shape (n, C); ``sizes[c]`` groups in column ``c``; the stacked vector of
    all group effects puts column ``c`` at ``offsets[c]:offsets[c] + sizes[c]``.
    """

    X: np.ndarray
    bounds: np.ndarray
    codes: np.ndarray
    sizes: tuple
    weights: np.ndarray | None = None

    @classmethod
    def from_rows(cls, X, y, codes, n_levels, weights=None):
        order, bounds = sort_by_category(np.asarray(y), n_levels)
        codes = np.asarray(codes, np.intp).reshape(len(y), -1)
        sizes = tuple(int(codes[:, c].max()) + 1 for c in range(codes.shape[1]))
        w = None if weights is None else np.asarray(weights, float)[order]
        return cls(np.asarray(X, float)[order], bounds, codes[order], sizes, w), order

    # the attributes the one-column helpers read
    @property
    def n_levels(self) -> int:
        return len(self.bounds) - 1

    @property
    def n_columns(self) -> int:
        return len(self.sizes)

    @property
    def n_params(self) -> int:
        return self.n_levels - 1 + self.X.shape[1] + self.n_columns

    @property
    def offsets(self):
        return np.concatenate([[0], np.cumsum(self.sizes)[:-1]]).astype(np.intp)

    @property
    def stacked(self):
        """Index of each row's group in the stacked effect vector, shape (n, C)."""
        return self.codes + self.offsets[None, :]

    @property
    def codes_1d(self):
        return sorted_codes(self.bounds)

    def counts(self):
        return sorted_counts(self.bounds, self.weights)

    def w(self, v):
        return v if self.weights is None else self.weights * v

    def incidence(self, values):
        """Sparse (n, K) matrix with ``values[c]`` in each row's column-``c`` group."""
        n, C = self.codes.shape
        data = np.tile(np.asarray(values, float), n)
        return sparse.csr_matrix((data, (np.repeat(np.arange(n), C), self.stacked.ravel())),
                                 shape=(n, int(sum(self.sizes))))


class _OneColumnView:
    """What the one-column helpers need (bounds, levels, X, codes) from CrossedRows."""

    def __init__(self, rows):
        self.bounds, self.X, self.n_levels = rows.bounds, rows.X, rows.n_levels
        self.codes = rows.codes_1d


def joint_modes(rows, link, theta, eta, sigmas, *, start=None, max_iter=100):
    """Mode ``zhat`` of ``h`` and ``C = -h''(zhat)`` (dense), by safeguarded Newton steps."""
    K = int(sum(rows.sizes))
    Zs = rows.incidence(sigmas)
    z = np.zeros(K) if start is None else np.array(start, float)
    h, g, Cm = _joint_terms(rows, link, theta, eta, Zs, z)
    for _ in range(max_iter):
        d, _ = ascent_direction(g, -Cm)
        if np.max(np.abs(d), initial=0.0) < 1e-11:
            break
        alpha = 1.0
        for _ in range(40):
            trial = z + alpha * d
            ht, gt, Ct = _joint_terms(rows, link, theta, eta, Zs, trial)
            if ht >= h - 1e-13 * abs(h):
                z, h, g, Cm = trial, ht, gt, Ct
                break
            alpha *= 0.5
        else:
            break
    return z, Cm, Zs


def _joint_terms(rows, link, theta, eta, Zs, z):
    T = shift_terms(link, _OneColumnView(rows), theta, eta + Zs @ z, order=2)
    s1, s2, _ = shift_derivatives(T)
    h = float(np.sum(rows.w(T["lp"])) - 0.5 * z @ z)
    g = Zs.T @ rows.w(s1) - z
    Cm = np.eye(len(z)) - (Zs.T @ sparse.diags(rows.w(s2)) @ Zs).toarray()
    return h, g, Cm


@dataclass(frozen=True, eq=False)
class LaplaceSums:
    """Laplace log-likelihood, exact gradient, the Newton metric (``order=2``), the modes
    of the stacked ``z`` and ``C^{-1}``."""

    loglik: float
    grad: np.ndarray | None
    modes: np.ndarray
    inverse: np.ndarray | None
    hess: np.ndarray | None = None


def laplace_sums(rows, link, params, *, order=1, start_modes=None):
    """Laplace log-likelihood (and its exact gradient) at ``[theta, beta, sigma_1..sigma_C]``."""
    link = get_link(link)
    view = _OneColumnView(rows)
    m, p, C = rows.n_levels - 1, rows.X.shape[1], rows.n_columns
    theta, beta, sig = params[:m], params[m:m + p], np.asarray(params[m + p:], float)
    eta = rows.X @ beta if p else np.zeros(len(rows.codes))
    z, Cm, Zs = joint_modes(rows, link, theta, eta, sig, start=start_modes)
    chol = linalg.cho_factor(Cm, lower=True)
    logdet = 2.0 * float(np.sum(np.log(np.diag(chol[0]))))
    T = shift_terms(link, view, theta, eta + Zs @ z, order=2, third=order >= 1)
    ll = float(np.sum(rows.w(T["lp"])) - 0.5 * z @ z) - 0.5 * logdet
    if order == 0:
        return LaplaceSums(ll, None, z, None)
    Cinv = linalg.cho_solve(chol, np.eye(len(z)))
    grad = _laplace_gradient(rows, view, T, z, sig, Zs, Cinv)
    hess = _profile_metric(rows, T, z, Zs, Cinv) if order >= 2 else None
    return LaplaceSums(ll, grad, z, Cinv, hess)


def _profile_metric(rows, T, z, Zs, Cinv):
    """Hessian of ``h(zhat(psi); psi)``: the Schur complement ``h_pp + h_pz C^{-1} h_zp``.

    It leaves out the second derivatives of ``log det C``; the Newton steps use it as their
    metric (value and gradient are those of the Laplace approximation).
    """
    n = len(rows.codes)
    m, p, C = rows.n_levels - 1, rows.X.shape[1], rows.n_columns
    y = rows.codes_1d
    zc = z[rows.stacked]
    Du, Dl = np.zeros((n, m + p + C)), np.zeros((n, m + p + C))
    up, lo = np.flatnonzero(y < m), np.flatnonzero(y > 0)
    Du[up, y[up]] = 1.0
    Dl[lo, y[lo] - 1] = 1.0
    for D in (Du, Dl):
        D[:, m:m + p] = -rows.X
        D[:, m + p:] = -zc
    wu, wl, wul = rows.w(T["uu"]), rows.w(T["ll"]), rows.w(T["ul"])
    cross = Du.T @ (wul[:, None] * Dl)
    H = Du.T @ (wu[:, None] * Du) + Dl.T @ (wl[:, None] * Dl) + cross + cross.T
    Rs = -((T["uu"] + T["ul"])[:, None] * Du + (T["ul"] + T["ll"])[:, None] * Dl)
    Hzp = Zs.T @ rows.w(Rs) if rows.weights is None else Zs.T @ (rows.weights[:, None] * Rs)
    s1 = -(T["u"] + T["l"])
    for c in range(C):
        Hzp[:, m + p + c] += np.bincount(rows.stacked[:, c], weights=rows.w(s1), minlength=len(z))
    return H + Hzp.T @ Cinv @ Hzp


def _laplace_gradient(rows, view, T, z, sig, Zs, Cinv):
    s1, s2, s3 = shift_derivatives(T)
    k = rows.stacked
    zc = z[k]  # (n, C): each row's standardised effects
    n, C = k.shape
    # q_i = (Z_s C^{-1} Z_s')_ii and r_ci = (Z_s C^{-1} Z_c')_ii
    r = np.stack([sum(sig[a] * Cinv[k[:, a], k[:, c]] for a in range(C)) for c in range(C)], axis=1)
    q = r @ sig
    wq = rows.w(q)
    # direct part: dh/dpsi at the mode, and +1/2 sum_i w q_i (partial d l''_i / d psi)
    cu = rows.w(T["u"]) + 0.5 * wq * (T["uuu"] + 2 * T["uul"] + T["ull"])
    cl = rows.w(T["l"]) + 0.5 * wq * (T["uul"] + 2 * T["ull"] + T["lll"])
    cs = rows.w(s1) + 0.5 * wq * s3
    grad = parameter_sums(view, cu, cl, cs, np.zeros(n))[:-1]
    g_sig = np.array([np.sum(rows.w(s1) * zc[:, c]) + 0.5 * np.sum(wq * s3 * zc[:, c])
                      + np.sum(rows.w(s2) * r[:, c]) for c in range(C)])
    # the mode's movement: a = C^{-1} Z_s'(w q l'''), then a' h_zpsi
    a = Cinv @ (Zs.T @ (0.5 * wq * s3))
    rho = Zs @ a
    wr = rows.w(rho)
    mu = parameter_sums(view, wr * -(T["uu"] + T["ul"]), wr * -(T["ul"] + T["ll"]), wr * s2, np.zeros(n))[:-1]
    ak = a[k]
    m_sig = np.array([np.sum(rows.w(s1) * ak[:, c]) + np.sum(wr * s2 * zc[:, c]) for c in range(C)])
    return np.concatenate([grad + mu, g_sig + m_sig])

"""Log-likelihood, gradient and Hessian of the cumulative link model.

For a row in category ``k`` (0-based, of ``J``) with linear predictor ``eta = x'beta`` the
contribution is ``log P`` with ``P = F(u) - F(l)``, ``u = theta_k - eta`` and
``l = theta_{k-1} - eta`` (``l = -inf`` for the first category, ``u = inf`` for the last);
McCullagh (1980), J. R. Statist. Soc. B 42:109-142, eq. (2.3).

Rows are kept sorted by category, so each category is a contiguous block of the design
matrix.  The sums are accumulated over *segments* (a contiguous run of rows inside one
category, at most ``chunk`` rows long): the threshold parts are scalar sums, the
threshold-effect block is one matrix-vector product per segment and the effect block one
weighted Gram product ``X'WX``.  Every quantity is additive over rows, which is what lets
the same code run per partition on Dask.

Everything is computed in log space, so rows whose probability underflows still give
finite contributions and derivatives.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .links import get_link
from .probabilities import interval_logprob

__all__ = ["row_terms", "SortedDesign", "sort_by_category"]

DEFAULT_CHUNK = 65_536


def row_terms(link, upper=None, lower=None, *, hessian=True):
    """Per-row log-probability and its derivatives with respect to ``u`` and ``l``.

    With ``P = F(u) - F(l)``: ``d logP/du = f(u)/P``, ``d logP/dl = -f(l)/P``,
    ``d2/du2 = f'(u)/P - (f(u)/P)^2``, ``d2/dl2 = -f'(l)/P - (f(l)/P)^2`` and
    ``d2/du dl = f(u) f(l) / P^2``.  ``P`` is taken on the side of the median where the
    difference is exact; rows whose probability is below ``1e-280`` (or whose ends are not
    finite) are recomputed entirely in log space.

    Parameters
    ----------
    link : Link
    upper, lower : ndarray or None
        Interval ends; ``None`` means ``+inf`` (for ``upper``) or ``-inf`` (for ``lower``).
    hessian : bool
        Also return the second derivatives.

    Returns
    -------
    dict
        ``logp``; ``gu = d logP/du``, ``gl = d logP/dl``; with ``hessian`` also ``huu``,
        ``hll``, ``hul``.  Entries for a missing end are ``None``.
    """
    link = get_link(link)
    with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
        logp, ru, du, rl, dl = _ratios(link, upper, lower)
        out = {"logp": logp, "gu": ru, "gl": None if rl is None else -rl,
               "huu": None, "hll": None, "hul": None}
        if hessian and ru is not None:
            out["huu"] = ru * (du - ru)
        if hessian and rl is not None:
            out["hll"] = -rl * (dl + rl)
            if ru is not None:
                out["hul"] = ru * rl
    return out


def _ratios(link, upper, lower):
    """``log P``, ``f(u)/P``, ``f'/f(u)``, ``f(l)/P``, ``f'/f(l)`` (None for a missing end)."""
    ru = du = rl = dl = None
    if upper is not None:
        Fu, Su, fu, du = link.kernel(upper)
    if lower is not None:
        Fl, Sl, fl, dl = link.kernel(lower)
    if lower is None:
        P = Fu
    elif upper is None:
        P = Sl
    else:
        P = np.where(lower >= link.median, Sl - Su, Fu - Fl)
    if upper is not None:
        ru = fu / P
    if lower is not None:
        rl = fl / P
    logp = np.log(P)
    bad = ~(P > 1e-280) | ~np.isfinite(logp)
    if bad.any():
        _log_space_rows(link, upper, lower, bad, logp, ru, rl)
        if du is not None:
            du[bad] = link.dlogpdf(upper[bad])
        if dl is not None:
            dl[bad] = link.dlogpdf(lower[bad])
    return logp, ru, du, rl, dl


def _log_space_rows(link, upper, lower, bad, logp, ru, rl):
    """Recompute tiny-probability rows in log space (in place)."""
    u = None if upper is None else upper[bad]
    lo = None if lower is None else lower[bad]
    if lo is None:
        lp = link.logcdf(u)
    elif u is None:
        lp = link.logsf(lo)
    else:
        lp = interval_logprob(link, lo, u)
    logp[bad] = lp
    if ru is not None:
        ru[bad] = np.exp(link.logpdf(u) - lp)
    if rl is not None:
        rl[bad] = np.exp(link.logpdf(lo) - lp)


def sort_by_category(y, n_levels):
    """Stable order that sorts rows by category code, and the block bounds.

    Returns
    -------
    order : ndarray of int
    bounds : ndarray, shape (n_levels + 1,)
        Category ``k`` occupies ``order[bounds[k]:bounds[k+1]]``.
    """
    y = np.asarray(y)
    order = np.argsort(y, kind="stable")
    counts = np.bincount(y, minlength=n_levels)
    return order, np.concatenate([[0], np.cumsum(counts)])


def _segments(bounds, chunk):
    for k in range(len(bounds) - 1):
        for s in range(int(bounds[k]), int(bounds[k + 1]), chunk):
            yield k, s, min(s + chunk, int(bounds[k + 1]))


def _wsum(w, v):
    return float(v.sum()) if w is None else float(w @ v)


@dataclass(eq=False)
class SortedDesign:
    """Design matrix with rows sorted by response category.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Predictor columns (no intercept), rows sorted by category.
    bounds : ndarray, shape (J + 1,)
        Block bounds of the categories in ``X``.
    weights : ndarray or None
        Frequency weights in the same row order (``None`` for all ones).
    chunk : int
        Maximum rows per segment (bounds temporary memory).
    """

    X: np.ndarray
    bounds: np.ndarray
    weights: np.ndarray | None = None
    chunk: int = DEFAULT_CHUNK

    @property
    def n_levels(self) -> int:
        return len(self.bounds) - 1

    @property
    def n_params(self) -> int:
        return self.n_levels - 1 + self.X.shape[1]

    def counts(self):
        """Weighted number of rows in each category."""
        if self.weights is None:
            return np.diff(self.bounds).astype(float)
        b = self.bounds
        return np.array([self.weights[b[k]:b[k + 1]].sum() for k in range(len(b) - 1)])

    def loglik(self, link, params):
        """Log-likelihood at ``params = [theta, beta]``."""
        return self.sums(link, params, order=0)[0]

    def sums(self, link, params, *, order=2):
        """Log-likelihood and, for ``order`` 1 or 2, gradient and Hessian.

        Parameters
        ----------
        link : Link or str
        params : ndarray, shape (J - 1 + p,)
            Thresholds followed by effects.
        order : {0, 1, 2}
            Highest derivative to compute.

        Returns
        -------
        (loglik, grad or None, hess or None)
        """
        link = get_link(link)
        J, p = self.n_levels, self.X.shape[1]
        m = J - 1
        theta, beta = params[:m], params[m:]
        ll = 0.0
        g = np.zeros(m + p) if order >= 1 else None
        H = np.zeros((m + p, m + p)) if order >= 2 else None
        for k, s, e in _segments(self.bounds, self.chunk):
            Xs = self.X[s:e]
            w = None if self.weights is None else self.weights[s:e]
            eta = Xs @ beta
            t = row_terms(
                link,
                upper=theta[k] - eta if k < m else None,
                lower=theta[k - 1] - eta if k > 0 else None,
                hessian=order >= 2,
            )
            ll += _wsum(w, t["logp"])
            if order >= 1:
                _accumulate(g, H, t, k, m, Xs, w)
        return ll, g, H


def _accumulate(g, H, t, k, m, Xs, w):
    """Add one segment's gradient and Hessian terms (chain rule through u and l).

    With ``u = theta_k - eta`` and ``l = theta_{k-1} - eta``: the threshold parts are
    scalar sums, the threshold-effect block and the effect gradient are matrix-vector
    products (measured faster here than one product with three columns), and the effect
    block is one weighted Gram product.
    """
    zero = np.zeros(len(Xs))
    get = lambda key: zero if t[key] is None else t[key]  # noqa: E731
    gu, gl = get("gu"), get("gl")
    wt = 1.0 if w is None else w
    if k < m:
        g[k] += _wsum(w, gu)
    if k > 0:
        g[k - 1] += _wsum(w, gl)
    if H is None:
        g[m:] -= Xs.T @ (wt * (gu + gl))
        return
    huu, hll, hul = get("huu"), get("hll"), get("hul")
    g[m:] -= Xs.T @ (wt * (gu + gl))
    if k < m:
        H[k, k] += _wsum(w, huu)
        H[k, m:] -= Xs.T @ (wt * (huu + hul))
    if k > 0:
        H[k - 1, k - 1] += _wsum(w, hll)
        H[k - 1, m:] -= Xs.T @ (wt * (hll + hul))
    if 0 < k < m:
        c = _wsum(w, hul)
        H[k, k - 1] += c
        H[k - 1, k] += c
    H[m:, m:] += _weighted_gram(Xs, wt * (huu + hll + 2.0 * hul))
    H[m:, :m] = H[:m, m:].T


def _weighted_gram(Xs, c):
    """``Xs' diag(c) Xs``; as ``-(A'A)`` with ``A = Xs sqrt(-c)`` when ``c <= 0`` (log-concave
    links), which lets BLAS use the symmetric rank-k update at half the cost."""
    if Xs.shape[1] == 0:
        return np.zeros((0, 0))
    if np.all(c <= 0):
        A = Xs * np.sqrt(-c)[:, None]
        return -(A.T @ A)
    return Xs.T @ (Xs * c[:, None])

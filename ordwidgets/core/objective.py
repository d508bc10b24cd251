"""Per-row terms of the cumulative link likelihood, and the rows sorted by category.

For a row in category ``k`` (0-based, of ``J``) with linear predictor ``eta = x'beta`` the
contribution is ``log P`` with ``P = F(u) - F(l)``, ``u = theta_k - eta`` and
``l = theta_{k-1} - eta`` (``l = -inf`` for the first category, ``u = inf`` for the last);
McCullagh (1980), J. R. Statist. Soc. B 42:109-142, eq. (2.3).

The fitter keeps rows sorted by category (:func:`sort_by_category`, with one gather that also
standardises the columns and learns their moments and per-category ranges:
:func:`sorted_standardised`); the sums over those rows are in
:mod:`ordwidgets.core.sorted_design`.

Everything is computed in log space, so rows whose probability underflows still give
finite contributions and derivatives.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .engine import safe_sd, separated_columns
from .links import get_link, pick
from .probabilities import interval_logprob

__all__ = ["row_terms", "row_logp", "sort_by_category", "sorted_standardised", "SortedColumns", "category_ranges",
           "CategoryMoments", "category_moments"]


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
        out = {"logp": logp, "gu": ru, "gl": None if rl is None else np.negative(rl),
               "huu": None, "hll": None, "hul": None}
        if hessian and ru is not None and rl is not None:
            out["hul"] = ru * rl
        if hessian and ru is not None:  # the kernel's f'/f arrays are ours: reused in place
            out["huu"] = np.multiply(np.subtract(du, ru, out=du), ru, out=du)  # ru (du - ru)
        if hessian and rl is not None:
            hll = np.multiply(np.add(dl, rl, out=dl), rl, out=dl)
            out["hll"] = np.negative(hll, out=hll)  # -rl (dl + rl)
    return out


def row_logp(link, upper=None, lower=None):
    """Per-row log-probability only: the ``logp`` of :func:`row_terms`, without derivatives.

    The same arithmetic as :func:`row_terms` (so the values agree to the last bit), for
    line-search trial points, where only the log-likelihood is needed.
    """
    link = get_link(link)
    with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
        P, _, _ = _interval_probability(link, upper, lower)
        logp, bad = _log_probability(P)
        if bad is not None:
            _log_space_rows(link, upper, lower, bad, logp, None, None)
    return logp


def _interval_probability(link, upper, lower):
    """``P = F(u) - F(l)`` taken on the exact side of the median, and both ends' kernels."""
    ku = None if upper is None else link.kernel(upper)
    kl = None if lower is None else link.kernel(lower)
    if lower is None:
        P = ku[0]
    elif upper is None:
        P = kl[1]
    else:  # P = S(l) - S(u) above the median, else F(u) - F(l) (both differences in [-1, 1])
        P = pick(lower >= link.median, np.subtract(kl[1], ku[1], out=kl[1]),
                 np.subtract(ku[0], kl[0], out=ku[0]))
    return P, ku, kl


def _log_probability(P):
    """``log P`` and the rows to recompute in log space (``None`` when there is none).

    A row is recomputed when its probability is below ``1e-280`` or not finite; one minimum
    (which propagates ``nan``) decides whether any row needs looking at.
    """
    if P.size and P.min() > 1e-280:
        return np.log(P), None
    logp = np.log(P)
    bad = ~(P > 1e-280) | ~np.isfinite(logp)
    return logp, (bad if bad.any() else None)


def _ratios(link, upper, lower):
    """``log P``, ``f(u)/P``, ``f'/f(u)``, ``f(l)/P``, ``f'/f(l)`` (None for a missing end)."""
    ru = du = rl = dl = None
    P, ku, kl = _interval_probability(link, upper, lower)
    if ku is not None:
        du = ku[3]
        ru = np.divide(ku[2], P, out=ku[2])
    if kl is not None:
        dl = kl[3]
        rl = np.divide(kl[2], P, out=kl[2])
    logp, bad = _log_probability(P)
    if bad is not None:
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
    # the same stable order from the smallest code type: numpy sorts 8- and 16-bit integers
    # stably by radix (one pass), wider ones by merging
    small = np.uint8 if n_levels <= 2 ** 8 else np.uint16 if n_levels <= 2 ** 16 else None
    codes = y.astype(small) if small is not None and y.size and y.min() >= 0 else y
    order = np.argsort(codes, kind="stable")
    counts = np.bincount(y, minlength=n_levels)
    return order, np.concatenate([[0], np.cumsum(counts)])


@dataclass(frozen=True, eq=False)
class SortedColumns:
    """Columns sorted by category and standardised, with what was learnt on the way.

    Attributes
    ----------
    X : ndarray, shape (n, p), Fortran order
        ``(x - mean) / sd`` in sorted row order.
    mean, sd : ndarray, shape (p,)
    cov : ndarray, shape (p, p)
        Weighted population covariance of the columns (collinearity check).
    low, high : ndarray, shape (J, p)
        Smallest and largest value of each column (user scale) in each category, over the
        rows with positive weight (separation check).
    moments : CategoryMoments or None
        Weighted count, column sums and Gram matrix of the standardised columns in each
        category.
    """

    X: np.ndarray
    mean: np.ndarray
    sd: np.ndarray
    cov: np.ndarray
    low: np.ndarray
    high: np.ndarray
    moments: "CategoryMoments | None" = None

    def separated(self, names):
        """Columns whose non-zero rows all sit in one end category (see ``separated_columns``)."""
        return separated_columns(self.low, self.high, names)


@dataclass(frozen=True, eq=False)
class CategoryMoments:
    """Weighted count ``n_k``, column sums ``s_k = sum w x`` and Gram matrix
    ``G_k = sum w x x'`` of the rows of each category: ``(J,)``, ``(J, p)``, ``(J, p, p)``.

    Where every effect is zero, each row of a category has the same per-row terms, so the
    log-likelihood and its derivatives at that point are these moments times the terms of
    one row (:meth:`ordwidgets.core.sorted_design.SortedDesign.sums`).
    """

    counts: np.ndarray
    sums: np.ndarray
    grams: np.ndarray

    def standardised(self, centre, sd):
        """The moments of ``(x - centre) / sd`` from those of ``x``."""
        n, s, G = self.counts, self.sums, self.grams
        sums = s - n[:, None] * centre[None, :]
        cross = np.einsum("ki,j->kij", s, centre)
        grams = G - cross - cross.transpose(0, 2, 1) + n[:, None, None] * np.outer(centre, centre)[None]
        return CategoryMoments(n, sums / sd[None, :], grams / np.outer(sd, sd)[None])


def category_moments(Xs, bounds, weights=None):
    """:class:`CategoryMoments` of rows sorted by category (one Gram product per category)."""
    J, p = len(bounds) - 1, Xs.shape[1]
    counts, sums, grams = np.zeros(J), np.zeros((J, p)), np.zeros((J, p, p))
    for k in range(J):
        block = Xs[bounds[k]:bounds[k + 1]]
        if weights is None:
            counts[k], sums[k], grams[k] = len(block), block.sum(axis=0), block.T @ block
        else:
            w = weights[bounds[k]:bounds[k + 1]]
            counts[k], sums[k], grams[k] = w.sum(), w @ block, block.T @ (block * w[:, None])
    return CategoryMoments(counts, sums, grams)


def category_ranges(Xs, bounds, weights=None):
    """Smallest and largest value of each column per category (rows sorted by category;
    rows with positive weight only), shape ``(J, p)`` each."""
    J, p = len(bounds) - 1, Xs.shape[1]
    low, high = np.full((J, p), np.inf), np.full((J, p), -np.inf)
    for k in range(J):
        block = Xs[bounds[k]:bounds[k + 1]]
        if weights is not None:
            w = weights[bounds[k]:bounds[k + 1]]
            if not np.all(w > 0):
                block = block[w > 0]
        if len(block) and p:
            low[k], high[k] = block.min(axis=0), block.max(axis=0)
    return low, high


def sorted_standardised(X, order, bounds, weights=None):
    """Rows of ``X`` in ``order``, centred and scaled, with the weighted moments.

    One gather into a column-major copy, one min/max pass per category (separation check)
    and one Gram product give the means, the covariance (for the collinearity check) and
    the scaling; columns are first shifted by their first value so that the moments do not
    cancel for columns far from zero.

    Parameters
    ----------
    X : ndarray, shape (n, p)
    order, bounds : from :func:`sort_by_category`
    weights : ndarray or None
        Weights already in sorted order.

    Returns
    -------
    SortedColumns
    """
    n, p = X.shape
    Xs = np.empty((n, p), order="F")
    if p == 0 or n == 0:
        low, high = category_ranges(Xs, bounds, weights)
        return SortedColumns(Xs, np.zeros(p), np.ones(p), np.zeros((p, p)), low, high)
    shift = X[order[0]].copy()
    low, high = np.empty((len(bounds) - 1, p)), np.empty((len(bounds) - 1, p))
    for j in range(p):  # column by column while it is in cache: gather, ranges, shift
        col = Xs[:, j:j + 1]
        # ``order`` is a permutation (always in range): "clip" spares the checked mode's
        # buffered copy, which doubles the cost of a gather into ``out``
        np.take(X[:, j], order, out=col[:, 0], mode="clip")
        low[:, j:j + 1], high[:, j:j + 1] = category_ranges(col, bounds, weights)
        col -= shift[j]
    moments = category_moments(Xs, bounds, weights)  # per category: the same products as one Gram
    total = moments.counts.sum()
    centre = moments.sums.sum(axis=0) / total
    cov = moments.grams.sum(axis=0) / total - np.outer(centre, centre)
    sd = safe_sd(cov)
    for j in range(p):
        col = Xs[:, j]
        col -= centre[j]
        col /= sd[j]
    return SortedColumns(Xs, shift + centre, sd, cov, low, high, moments.standardised(centre, sd))

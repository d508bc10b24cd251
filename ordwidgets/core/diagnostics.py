"""Residual diagnostics as plain data: QQ points, binned trends and summary tests.

Everything the residual panel draws is computed here from surrogate residuals
(Liu & Zhang 2018, J. Amer. Statist. Assoc. 113:845-854), cheaply enough to redo on every
threshold edit.  The plots use all draws; the tests use the first draw, for which the theory
is exact (under a correct model the residuals are independent, identically distributed
draws from the reference distribution, whatever the predictors).

Tests work on the probability integral transform ``v = G(r) - 1/2`` of the residuals, where
``G`` is the reference distribution: ``v`` is uniform on ``(-1/2, 1/2)`` under a correct
model for every link, so the same tests serve links without moments (cauchit) and the
probability-scale residuals of non-parallel fits.

* distance: Kolmogorov-Smirnov distance of the residuals from ``G`` (Kolmogorov 1933;
  the exact null distribution :data:`scipy.stats.kstwo` up to 10,000 rows, the asymptotic
  :data:`scipy.stats.kstwobign` above, where the exact one costs a tenth of a second and
  differs negligibly).  The fitted parameters are estimated, which makes the p-value
  conservative.
* trend: least-squares F-test of ``v`` on a predictor and its square (the nested-model
  F-test; common practice, no source); a U-shape (omitted curvature) or a slope shows as a
  small p-value.
* spread: the same F-test on ``|v|`` (in the manner of Glejser 1969, J. Amer. Statist.
  Assoc. 64:316-323); a spread that changes with the predictor (heteroscedasticity) shows
  as a small p-value.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special, stats

_EXACT_KS_ROWS = 10_000

__all__ = ["qq_points", "binned_means", "distance_test", "trend_test", "spread_test",
           "display_rows", "moment_table", "Axis", "SortedDraws", "level_test"]


# ---- sorted draws: QQ and distance -----------------------------------------------------------
def qq_points(residuals, reference, *, quantiles=1000, weights=None) -> pd.DataFrame:
    """Quantile-quantile points of residuals against a reference distribution.

    Parameters
    ----------
    residuals : array_like, shape (n,) or (n, draws)
        Sample quantiles are computed per draw and averaged over draws.
    reference : ReferenceDistribution
    quantiles : int
        At most this many points (fewer when ``n`` is smaller), at probabilities
        ``(k - 1/2) / K``.
    weights : array_like, optional
        Frequency weights of the rows.

    Returns
    -------
    DataFrame
        Columns ``theoretical`` (reference quantiles) and ``sample`` (draw-averaged sample
        quantiles), one row per probability, increasing.
    """
    return qq_from_sorted(SortedDraws.of(residuals, weights), reference, quantiles)


def distance_test(residuals, reference, *, weights=None):
    """Kolmogorov-Smirnov distance of one draw of residuals from the reference.

    Returns
    -------
    statistic, p_value : float
        ``sup |ECDF - G|`` and its p-value with ``n`` the (weighted) number of rows: exact
        (:data:`scipy.stats.kstwo`) for ``n <= 10,000``, asymptotic
        (:data:`scipy.stats.kstwobign` at ``sqrt(n) D``, Kolmogorov 1933) above.
    """
    return ks_from_sorted(SortedDraws.of(np.asarray(residuals, float).ravel(), weights), reference)


@dataclass(frozen=True, eq=False)
class SortedDraws:
    """Each draw sorted, with the (weighted) ECDF value at each sorted point."""

    values: np.ndarray      # (n, draws), each column increasing
    ecdf: np.ndarray        # (n, draws) or (n, 1): fraction of weight at or below the point
    step: np.ndarray        # (n, draws) or (n, 1): weight fraction of the point itself
    total: float            # number of rows, or total frequency weight

    @classmethod
    def of(cls, residuals, weights=None):
        r = _columns(residuals)
        if weights is None:
            n = r.shape[0]
            return cls(np.sort(r, axis=0), (np.arange(1, n + 1) / n)[:, None], np.full((n, 1), 1.0 / n), n)
        order = np.argsort(r, axis=0)
        w = np.asarray(weights, float)[order]
        total = w[:, 0].sum()
        return cls(np.take_along_axis(r, order, axis=0), np.cumsum(w, axis=0) / total, w / total, total)


def qq_from_sorted(sd, reference, quantiles):
    k = int(min(quantiles, sd.values.shape[0]))
    probs = (np.arange(k) + 0.5) / k
    picked = [sd.values[np.minimum(np.searchsorted(sd.ecdf[:, min(j, sd.ecdf.shape[1] - 1)], probs),
                                   sd.values.shape[0] - 1), j] for j in range(sd.values.shape[1])]
    return pd.DataFrame({"theoretical": reference.ppf(probs), "sample": np.mean(picked, axis=0)})


def ks_from_sorted(sd, reference):
    s, hi = sd.values[:, 0], sd.ecdf[:, 0]
    lo = hi - sd.step[:, 0]
    g = reference.cdf(s)
    d = float(max(np.max(hi - g), np.max(g - lo)))
    n = max(int(round(sd.total)), 1)
    p = stats.kstwo.sf(d, n) if n <= _EXACT_KS_ROWS else special.kolmogorov(d * np.sqrt(n))
    return d, float(p)


# ---- prepared axes: binned means and trend / spread tests ------------------------------------
@dataclass(frozen=True, eq=False)
class Axis:
    """Everything about one variable that does not depend on the residuals.

    Prepared once per fit and variable, then applied to new residuals in a few
    milliseconds (threshold edits change residuals, not variables).
    """

    keep: np.ndarray | None     # rows used (finite x, positive weight); None: all rows
    weights: np.ndarray | None  # weights of the kept rows; None: unweighted
    codes: np.ndarray           # bin of each kept row
    count: np.ndarray           # weighted rows per non-empty bin
    center: np.ndarray          # mean x per non-empty bin
    used: np.ndarray            # which bins are non-empty
    terms: np.ndarray           # (q, kept) centred, standardised x (and x**2) for the F-tests
    gram: np.ndarray            # (q, q) weighted cross-products of ``terms``
    total: float                # weighted number of kept rows

    @classmethod
    def of(cls, x, *, bins=20, weights=None):
        x = np.asarray(x, float)
        w = np.ones(len(x)) if weights is None else np.asarray(weights, float)
        keep = np.isfinite(x) & (w > 0)
        x, w = x[keep], w[keep]
        codes, nbins = _bin_codes(x, bins)
        count = np.bincount(codes, w, nbins)
        used = count > 0
        center = np.bincount(codes, w * x, nbins)[used] / count[used]
        terms = _poly_terms(x, w)
        return cls(None if keep.all() else keep, None if weights is None else w, codes, count[used], center,
                   used, terms, _dot("ij,kj->ik", terms * w, terms), float(w.sum()))

    @classmethod
    def of_levels(cls, codes, *, weights=None):
        """The axis of a factor: one bin per level, F-tests on the level dummies.

        ``codes`` are level numbers ``0..K-1`` (negative: missing).  The trend and spread
        F-tests are then one-way analyses of variance across the levels (Fisher 1925), which
        do not depend on the order or coding of the levels.
        """
        codes = np.asarray(codes)
        w = np.ones(len(codes)) if weights is None else np.asarray(weights, float)
        keep = (codes >= 0) & (w > 0)
        codes, w = codes[keep].astype(np.intp), w[keep]
        nbins = int(codes.max()) + 1 if len(codes) else 1
        count = np.bincount(codes, w, nbins)
        used = count > 0
        present = np.flatnonzero(used)
        dummies = (codes[None, :] == present[1:, None]).astype(float)
        terms = dummies - (dummies @ w / w.sum())[:, None] if len(codes) else np.zeros((0, 0))
        return cls(None if keep.all() else keep, None if weights is None else w, codes, count[used],
                   present.astype(float), used, terms, _dot("ij,kj->ik", terms * w, terms), float(w.sum()))

    def means(self, residuals, *, level=0.95) -> pd.DataFrame:
        """Binned means of row-averaged residuals (see :func:`binned_means`)."""
        r = _columns(residuals)
        r = self._kept(r[:, 0] if r.shape[1] == 1 else r.mean(axis=1))
        nb = len(self.used)
        sum_r = np.bincount(self.codes, self._weighted(r), nb)[self.used]
        sum_rr = np.bincount(self.codes, self._weighted(r * r), nb)[self.used]
        mean = sum_r / self.count
        with np.errstate(invalid="ignore", divide="ignore"):
            var = np.maximum(sum_rr - self.count * mean**2, 0.0) / (self.count - 1)
            half = -special.ndtri((1 - level) / 2) * np.sqrt(var / self.count)
        return pd.DataFrame({"center": self.center, "mean": mean, "lower": mean - half,
                             "upper": mean + half, "count": self.count})

    def f_test(self, target):
        """F-test that ``terms`` explain nothing of ``target`` (weighted least squares)."""
        if not len(self.terms):
            return np.nan, np.nan
        y = self._kept(np.asarray(target, float))
        y = y - self._weighted(y).sum() / self.total
        wy = self._weighted(y)
        rhs = _dot("ij,j->i", self.terms, wy)
        explained = float(rhs @ np.linalg.solve(self.gram, rhs))
        total = float(_dot("i,i", wy, y))
        q, dof = len(self.terms), self.total - len(self.terms) - 1
        if dof <= 0 or not total > explained:
            return np.nan, np.nan
        f = (explained / q) / ((total - explained) / dof)
        return float(f), float(special.fdtrc(q, dof, f))

    def _kept(self, a):
        return a if self.keep is None else a[self.keep]

    def _weighted(self, a):
        return a if self.weights is None else a * self.weights


def binned_means(x, residuals, *, bins=20, level=0.95, weights=None) -> pd.DataFrame:
    """Means of residuals in bins of ``x`` with normal-theory intervals.

    Bins hold about equal numbers of rows (quantile edges); a variable with at most
    ``bins`` distinct values gets one bin per value.  With several draws the row means over
    draws are binned, and the interval uses their spread, so it reflects rows, not draws.

    Parameters
    ----------
    x : array_like, shape (n,)
        The variable on the horizontal axis (rows with missing ``x`` are left out).
    residuals : array_like, shape (n,) or (n, draws)
    bins : int
    level : float
        Coverage of the interval ``mean +- z * sd / sqrt(count)``.
    weights : array_like, optional
        Frequency weights.

    Returns
    -------
    DataFrame
        Columns ``center`` (mean ``x`` in the bin), ``mean``, ``lower``, ``upper`` and
        ``count`` (weighted rows), one row per non-empty bin in increasing ``x``.
    """
    return Axis.of(x, bins=bins, weights=weights).means(residuals, level=level)


def trend_test(x, v, *, weights=None):
    """F-test of centred probability-transformed residuals ``v`` on ``x`` and ``x**2``.

    ``x`` is standardised; the square is dropped for two-valued ``x``.  Frequency weights
    count as rows in the degrees of freedom.

    Returns
    -------
    statistic, p_value : float
        ``nan`` when ``x`` is constant.
    """
    return Axis.of(x, bins=1, weights=weights).f_test(v)


def level_test(codes, v, *, weights=None):
    """One-way analysis of variance of ``v`` across the levels ``codes`` (F statistic, p-value)."""
    return Axis.of_levels(codes, weights=weights).f_test(v)


def spread_test(x, v, *, weights=None):
    """F-test of ``|v|`` on ``x`` and ``x**2`` (a Glejser-type heteroscedasticity test)."""
    return Axis.of(x, bins=1, weights=weights).f_test(np.abs(v))


def _bin_codes(x, bins):
    """Bin of each row: quantile edges from at most ~8,000 evenly spaced rows."""
    if len(x) == 0:
        return np.zeros(0, dtype=np.intp), 1
    sub = x[:: max(1, len(x) // 8192)]
    edges = np.quantile(sub, np.linspace(0.0, 1.0, bins + 1))
    if len(np.unique(edges)) <= bins:
        values = np.unique(x)
        if len(values) <= bins:
            return np.searchsorted(values, x), len(values)
    inner = np.unique(edges[1:-1])
    return np.searchsorted(inner, x, side="right"), len(inner) + 1


def _poly_terms(x, w):
    """Centred, standardised ``z`` and ``z**2`` rows (``z`` only for two-valued ``x``)."""
    if len(x) == 0:
        return np.zeros((0, 0))
    z = x - _dot('i,i', w, x) / w.sum()
    scale = np.sqrt(_dot('i,i', w, z * z) / w.sum())
    if not scale > 0:
        return np.zeros((0, len(x)))
    z = z / scale
    if np.all((z == z.min()) | (z == z.max())):
        return z[None, :]
    sq = z * z
    return np.vstack([z, sq - _dot('i,i', w, sq) / w.sum()])


# ---- summaries and display -----------------------------------------------------------------
def moment_table(residuals, reference) -> pd.DataFrame:
    """Observed centre and spread of all draws next to the reference values.

    Returns
    -------
    DataFrame
        Index ``["center", "spread"]``; columns ``summary`` (``"mean"`` / ``"variance"``, or
        ``"median"`` / ``"IQR"`` where moments do not exist, e.g. cauchit), ``observed`` and
        ``expected``.
    """
    center, spread = reference.summarise(residuals)
    return pd.DataFrame(
        {"summary": [reference.center_label, reference.spread_label], "observed": [center, spread],
         "expected": [reference.center, reference.spread]}, index=["center", "spread"])


def display_rows(n, *, max_points=5000, seed=0) -> np.ndarray:
    """Increasing row positions of a reproducible random subset of at most ``max_points``."""
    if n <= max_points:
        return np.arange(n)
    return np.sort(np.random.default_rng(seed).choice(n, size=max_points, replace=False))


def _dot(spec, *arrays):
    """Products over rows without BLAS: multithreaded BLAS dot products stall by orders of
    magnitude on a loaded machine (measured: 15 ms instead of 0.1 ms at n = 100,000)."""
    return np.einsum(spec, *arrays)


def _columns(residuals):
    r = np.asarray(residuals, float)
    return r[:, None] if r.ndim == 1 else r

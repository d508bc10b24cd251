"""The sorted-segment design: the engine's design for every in-memory model.

Rows are sorted by response category, so each category is a contiguous block; the sums of
the log-likelihood, gradient and Hessian are accumulated over *segments* (a run of rows of
one category, at most ``chunk`` rows long).  Inside a segment every row uses the same two
cuts, so the effect block of the Hessian is one weighted Gram product ``X'WX`` per segment
and the rest a few thin products.  Every quantity is additive over rows, which is what lets
the same design run per partition on Dask.  Per-row terms come from
:func:`ordwidgets.core.objective.row_terms`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .links import get_link
from .objective import row_logp, row_terms

__all__ = ["SortedDesign", "layout_sorted_design", "weighted_gram", "DEFAULT_CHUNK"]

DEFAULT_CHUNK = 131_072
#: Rows from which a parallel design offers sampled Hessians (every ``HESSIAN_SAMPLE``-th
#: row), and the sampling step: with fewer rows the sample's own error would cost steps.
SAMPLED_HESSIAN_ROWS = 50_000
HESSIAN_SAMPLE = 4


def layout_sorted_design(layout, Xs, bounds, weights, mean, sd):
    """A :class:`SortedDesign` for ``layout`` from all design columns standardised and sorted.

    ``Xs = (D - mean) / sd`` in sorted order: location columns (parallel and per-threshold)
    stay centred and scaled, scale columns are only scaled (``D / sd``), which keeps the map
    back to the user's scale linear.
    """
    X, W, Z = layout.arrays(Xs)
    if layout.scale:
        Z = Z + (np.asarray(mean) / np.asarray(sd))[list(layout.scale)]
    return SortedDesign(np.asfortranarray(X), bounds, weights, W=W, Z=Z)


def _segments(bounds, chunk):
    for k in range(len(bounds) - 1):
        for s in range(int(bounds[k]), int(bounds[k + 1]), chunk):
            yield k, s, min(s + chunk, int(bounds[k + 1]))


def _wsum(w, v):
    return float(v.sum()) if w is None else float(w @ v)


@dataclass(eq=False)
class SortedDesign:
    """Rows sorted by response category: the engine's design for every in-memory model.

    Implements the design protocol of :mod:`ordwidgets.core.engine` for
    ``P(Y <= j | x) = F((theta_j - x'beta - w'gamma_j) / exp(z'zeta))`` (McCullagh 1980;
    partial proportional odds, Peterson & Harrell 1990): parameters
    ``[theta (m), beta (p), gamma (q blocks of m), zeta (r)]``.  A plain fit has no ``W``
    and no ``Z``.  Within one category all rows use the same two cuts, so each segment
    needs one weighted Gram product of ``X`` and one product of ``X'`` with a few columns
    (threshold, per-threshold and scale parts); the blocks of ``W`` and ``Z`` are small.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Parallel location columns (no intercept), rows sorted by category.
    bounds : ndarray, shape (J + 1,)
        Block bounds of the categories in ``X``.
    weights : ndarray or None
        Frequency weights in the same row order (``None`` for all ones).
    chunk : int
        Maximum rows per segment (bounds temporary memory).
    W : ndarray, shape (n, q), optional
        Columns with a separate effect at each threshold.
    Z : ndarray, shape (n, r), optional
        Columns of the latent scale ``exp(z'zeta)``.
    moments : CategoryMoments, optional
        Per-category count, sums and Gram matrix of ``X`` (with the same weights;
        :func:`~ordwidgets.core.objective.category_moments`).  With them, the sums at a
        point where every effect is zero (the engine's start) take no pass over the rows.
    """

    X: np.ndarray
    bounds: np.ndarray
    weights: np.ndarray | None = None
    chunk: int = DEFAULT_CHUNK
    W: np.ndarray | None = None
    Z: np.ndarray | None = None
    moments: object = None

    def __post_init__(self):
        n = len(self.X)
        if self.W is None:
            self.W = np.empty((n, 0))
        if self.Z is None:
            self.Z = np.empty((n, 0))
        # [1, W, Z]: the thin columns of the threshold, per-threshold and scale parts
        self._S = None if not (self.W.shape[1] or self.Z.shape[1]) else np.asfortranarray(
            np.column_stack([np.ones(n), self.W, self.Z]))

    @property
    def n_levels(self) -> int:
        return len(self.bounds) - 1

    @property
    def n_params(self) -> int:
        m = self.n_levels - 1
        return m + self.X.shape[1] + self.W.shape[1] * m + self.Z.shape[1]

    @property
    def rows_used(self) -> int:
        """Rows with positive weight."""
        return len(self.X) if self.weights is None else int(np.count_nonzero(self.weights))

    @property
    def hessian_sample(self) -> int:
        """Step of the row sample the engine may ask a Hessian from far from the maximum
        (:data:`HESSIAN_SAMPLE` for parallel designs of at least
        :data:`SAMPLED_HESSIAN_ROWS` rows, else 1: exact Hessians only)."""
        plain = not (self.W.shape[1] or self.Z.shape[1])
        return HESSIAN_SAMPLE if plain and len(self.X) >= SAMPLED_HESSIAN_ROWS else 1

    @property
    def y(self) -> np.ndarray:
        """Category code of each (sorted) row."""
        return np.repeat(np.arange(self.n_levels), np.diff(self.bounds))

    def counts(self):
        """Weighted number of rows in each category."""
        if self.weights is None:
            return np.diff(self.bounds).astype(float)
        b = self.bounds
        return np.array([self.weights[b[k]:b[k + 1]].sum() for k in range(len(b) - 1)])

    def split(self, params):
        """``theta (m,), beta (p,), gamma (q, m), zeta (r,)``."""
        m, p, q = self.n_levels - 1, self.X.shape[1], self.W.shape[1]
        b, g = m + p, m + p + q * m
        return params[:m], params[m:b], params[b:g].reshape(q, m), params[g:]

    def gaps(self, params):
        """Gaps between adjacent cuts ``theta_j - w'gamma_j`` per row, ``(n, m - 1)``."""
        theta, _, gamma, _ = self.split(np.asarray(params, float))
        gaps = np.broadcast_to(np.diff(theta)[None, :], (len(self.X), len(theta) - 1))
        if gamma.size:
            gaps = gaps - _combine(self.W, np.diff(gamma, axis=1))
        return gaps

    def feasible(self, params):
        """Finite parameters and strictly increasing cuts for every row."""
        params = np.asarray(params, float)
        if not np.all(np.isfinite(params)):
            return False
        theta, _, gamma, _ = self.split(params)
        if not gamma.size:
            return bool(np.all(np.diff(theta) > 0))
        return bool(np.all(self.gaps(params) > 0))

    def loglik(self, link, params):
        """Log-likelihood at ``params`` alone (the engine's line-search trial points).

        Per-row log-probabilities only (:func:`~ordwidgets.core.objective.row_logp`): no
        derivatives and no accumulation; equal to ``sums(link, params, order=0)[0]``.
        """
        link = get_link(link)
        parts = self.split(np.asarray(params, float))
        ll = 0.0
        for k, s, e in _segments(self.bounds, self.chunk):
            ends, _ = self._ends(parts, k, s, e)
            logp = row_logp(link, upper=ends[0], lower=ends[1])
            w = None if self.weights is None else self.weights[s:e]
            if w is not None and np.any(w == 0):
                logp = np.where(w > 0, logp, 0.0)
            ll += _wsum(w, logp)
            if not np.isfinite(ll):
                return -np.inf
        return ll

    def sums(self, link, params, *, order=2, hessian_sample=1):
        """Log-likelihood and, for ``order`` 1 or 2, gradient and Hessian.

        Parameters
        ----------
        link : Link or str
        params : ndarray, shape (n_params,)
        order : {0, 1, 2}
            Highest derivative to compute.
        hessian_sample : int
            With ``K > 1`` (parallel designs only), the blocks of the Hessian that involve
            the effects come from every ``K``-th row of each segment counted ``K`` times;
            the log-likelihood, the gradient and the threshold block stay exact.

        Returns
        -------
        (loglik, grad or None, hess or None)
        """
        link = get_link(link)
        params = np.asarray(params, float)
        parts = self.split(params)
        if order == 2 and self._at_zero(parts):
            return _sums_at_zero(link, parts[0], self.moments)
        k_all = len(params)
        if hessian_sample > 1 and self.hessian_sample == 1:
            raise ValueError("this design computes exact Hessians only")
        acc = _Accumulator(self, np.zeros(k_all) if order >= 1 else None,
                           np.zeros((k_all, k_all)) if order >= 2 else None, sample=int(hessian_sample))
        ll = 0.0
        for k, s, e in _segments(self.bounds, self.chunk):
            ll += self._segment(link, parts, k, s, e, order, acc)
            if not np.isfinite(ll):
                return -np.inf, None, None
        if acc.H is not None:
            acc.H += acc.C + acc.C.T
        return ll, acc.g, acc.H

    def _at_zero(self, parts):
        """Whether the per-category moments give the sums at ``parts`` (all effects zero)."""
        mo = self.moments
        return (mo is not None and not (self.W.shape[1] or self.Z.shape[1]) and not np.any(parts[1])
                and bool(np.all(mo.counts > 0)) and bool(np.all(np.diff(parts[0]) > 0)))

    def _ends(self, parts, k, s, e):
        """Interval ends ``(upper, lower)`` of the rows ``s:e`` of category ``k`` (``None``
        for a missing end) and the inverse scale ``1 / exp(z'zeta)`` (``None`` without one)."""
        theta, beta, gamma, zeta = parts
        m = self.n_levels - 1
        X, W, Z = self.X[s:e], self.W[s:e], self.Z[s:e]
        eta = X @ beta if beta.size else np.zeros(e - s)
        inv = None
        if zeta.size:
            with np.errstate(over="ignore"):
                inv = np.exp(-_combine(Z, zeta[:, None])[:, 0])
        ends = []
        for j in (k, k - 1):
            if 0 <= j < m:
                a = theta[j] - eta
                if gamma.size:
                    a = a - _combine(W, gamma[:, j:j + 1])[:, 0]
                ends.append(a if inv is None else a * inv)
            else:
                ends.append(None)
        return ends, inv

    def _segment(self, link, parts, k, s, e, order, acc):
        m = self.n_levels - 1
        w = None if self.weights is None else self.weights[s:e]
        ends, inv = self._ends(parts, k, s, e)
        t = row_terms(link, upper=ends[0], lower=ends[1], hessian=order >= 2)
        if w is not None and np.any(w == 0):
            t = {key: (None if v is None else np.where(w > 0, v, 0.0)) for key, v in t.items()}
        ll = _wsum(w, t["logp"])
        if order >= 1 and np.isfinite(ll):
            acc.add(k, m, self.X[s:e], None if self._S is None else self._S[s:e], w, inv, ends, t)
        return ll


def _sums_at_zero(link, theta, moments):
    """Log-likelihood, gradient and Hessian of a parallel design where ``beta = 0``.

    Every row of category ``k`` then has the ends ``(theta_k, theta_{k-1})``, so its terms
    are those of one row: the sums are the category's weighted count, column sums and
    Gram matrix times them (the same chain rule as :class:`_Accumulator`).
    """
    m = len(theta)
    J, p = moments.sums.shape
    upper = np.append(theta, 0.0)[:, None]  # row k: theta_k (last category: no upper end)
    lower = np.insert(theta, 0, 0.0)[:, None]
    t = [row_terms(link, upper=upper[k] if k < m else None, lower=lower[k] if k > 0 else None)
         for k in range(J)]
    g, H, C = np.zeros(m + p), np.zeros((m + p, m + p)), np.zeros((m + p, m + p))
    ll, b = 0.0, slice(m, m + p)
    for k, tk in enumerate(t):
        n, s, G = moments.counts[k], moments.sums[k], moments.grams[k]
        gu, gl, huu, hll, hul = (0.0 if tk[key] is None else float(tk[key][0])
                                 for key in ("gu", "gl", "huu", "hll", "hul"))
        ll += n * float(tk["logp"][0])
        if k < m:
            g[k] += n * gu
            H[k, k] += n * huu
            C[k, b] -= (huu + hul) * s
        if k > 0:
            g[k - 1] += n * gl
            H[k - 1, k - 1] += n * hll
            C[k - 1, b] -= (hll + hul) * s
        if 0 < k < m:
            C[k, k - 1] += n * hul
        g[b] -= (gu + gl) * s
        H[b, b] += (huu + hll + 2.0 * hul) * G
    H += C + C.T
    return ll, g, H


def _combine(A, B):
    """``A @ B`` for a thin ``A`` (a few columns) without BLAS, whose threads can stall on a
    busy machine for such small products."""
    out = np.multiply.outer(A[:, 0], B[0]) if A.shape[1] else np.zeros((len(A), B.shape[1]))
    for c in range(1, A.shape[1]):
        out += np.multiply.outer(A[:, c], B[c])
    return out


def _columns(S, parts):
    """An ``(n, k)`` Fortran array of weighted columns: ``(None, v)`` gives ``v``, ``(cols, v)``
    gives ``S[:, cols] * v`` column by column (no broadcast temporaries)."""
    width = sum(1 if cols is None else cols.stop - cols.start for cols, _ in parts)
    out = np.empty((len(S), width), order="F")
    c = 0
    for cols, v in parts:
        if cols is None:
            out[:, c] = v
            c += 1
            continue
        for i in range(cols.start, cols.stop):
            np.multiply(S[:, i], v, out=out[:, c])
            c += 1
    return out


def _identity(v):
    return v


def _nz(v, n):
    return np.zeros(n) if v is None else v


def _plus(a, b):
    """``a + b`` where ``None`` stands for zeros."""
    if a is None:
        return b
    return a if b is None else a + b


class _Accumulator:
    """Adds one segment's gradient and Hessian terms (chain rule through the cuts).

    With ``u = (theta_k - x'beta - w'gamma_k) / sigma`` (upper end) and ``l`` the same at
    ``k - 1``: ``du/dtheta_k = 1/sigma``, ``du/dbeta = -x/sigma``, ``du/dgamma_k = -w/sigma``,
    ``du/dzeta = -u z`` and ``d2u/(dpsi dzeta') = -(du/dpsi) z'``.  Per segment the effect
    block is one weighted Gram product of ``X``, the blocks between effects and the other
    parameters one product of ``X'`` with a few columns, and all blocks among thresholds,
    per-threshold and scale parameters one product of the small matrix ``[1, W, Z]'`` with
    a few columns (few BLAS calls: on a busy machine each call may wait for a thread).
    Blocks between two different groups of parameters are added once to ``C``; the
    Hessian is ``H + C + C'``.
    """

    def __init__(self, design, g, H, sample=1):
        self.g, self.H, self.sample = g, H, sample
        self.C = None if H is None else np.zeros_like(H)
        m = design.n_levels - 1
        self.m, self.p, self.q, self.r = m, design.X.shape[1], design.W.shape[1], design.Z.shape[1]
        self.beta = slice(m, m + self.p)
        self.zeta = slice(m + self.p + self.q * m, m + self.p + self.q * m + self.r)
        self.sign = np.array([1.0] + [-1.0] * self.q)  # du/d(theta, gamma) = sign * [1, w] / sigma

    def _dest(self, j):
        """Parameter indices of the threshold-like columns ``[1, w]`` at cut ``j``."""
        base = self.m + self.p
        return np.array([j] + [base + c * self.m + j for c in range(self.q)])

    def add(self, k, m, X, S, w, inv, ends, t):
        dests = [self._dest(k) if ends[0] is not None else None, self._dest(k - 1) if ends[1] is not None else None]
        if self.q == 0 and self.r == 0:
            self._add_plain(k, X, w, t, dests)
            return
        n = len(X)
        weigh = (lambda v: _nz(v, n)) if w is None else (lambda v: _nz(v, n) * w)  # noqa: E731
        self._add_extended(X, S, weigh, t, inv, ends, dests)

    def _add_plain(self, k, X, w, t, dests):
        """Parallel model: the threshold parts are plain sums; missing ends cost nothing."""
        g, H, C, b = self.g, self.H, self.C, self.beta
        # the per-row arrays are this segment's own (row_terms makes them): sums are taken
        # first, then the arrays are combined in place (no fresh temporaries)
        weigh = (lambda v: v) if w is None else (lambda v: None if v is None else v * w)  # noqa: E731
        gu, gl = weigh(t["gu"]), weigh(t["gl"])
        if gu is not None:
            g[k] += gu.sum()
        if gl is not None:
            g[k - 1] += gl.sum()
        gsum = gl if gu is None else gu if gl is None else np.add(gu, gl, out=gu)
        if H is None:
            if self.p:
                g[b] -= X.T @ gsum
            return
        huu, hll, hul = weigh(t["huu"]), weigh(t["hll"]), weigh(t["hul"])
        if huu is not None:
            H[k, k] += huu.sum()
        if hll is not None:
            H[k - 1, k - 1] += hll.sum()
        if hul is not None:
            C[k, k - 1] += hul.sum()
            huu, hll = np.add(huu, hul, out=huu), np.add(hll, hul, out=hll)
        cu, cl = huu, hll  # d2 logP / (du d.) and (dl d.): the weights of x in each cut's row
        if self.p:
            # one matrix-vector product each (a product with a few columns waits for BLAS
            # threads on a busy machine)
            g[b] -= X.T @ gsum
            c = _plus(cu, cl) if hul is None else np.add(cu, cl, out=hul)
            K = self.sample
            if K > 1:  # the effect blocks from every K-th row, counted K times
                X, cu, cl, c = X[::K], cu if cu is None else cu[::K], cl if cl is None else cl[::K], c[::K]
            if cu is not None:
                C[k, b] -= K * (X.T @ cu)
            if cl is not None:
                C[k - 1, b] -= K * (X.T @ cl)
            H[b, b] += K * weighted_gram(X, c)

    def _add_extended(self, X, S, weigh, t, inv, ends, dests):
        """Non-parallel and scale parts; without a scale (``inv`` is ``None``) the factors
        ``1 / sigma`` are left out and no scale column is formed."""
        n, nq, r = len(X), 1 + self.q, self.r
        gu, gl = weigh(t["gu"]), weigh(t["gl"])
        sc = _identity if inv is None else (lambda v: v * inv)  # noqa: E731
        vu, vl = (np.zeros(n) if e is None else e for e in ends) if r else (None, None)
        first = [(None, sc(gu)), (None, sc(gl))] + ([(None, gu * vu + gl * vl)] if r else [])
        if self.H is None:
            R = _thin_product(S, _columns(S, first))
            self._gradient(R, dests, nq)
            if self.p:
                self.g[self.beta] -= X.T @ sc(gu + gl)
            return
        huu, hll, hul = (weigh(t[key]) for key in ("huu", "hll", "hul"))
        inv2 = None if inv is None else inv * inv
        sc2 = _identity if inv2 is None else (lambda v: v * inv2)  # noqa: E731
        q, z = slice(0, nq), slice(nq, nq + r)
        scale = [] if not r else [
            (z, sc(huu * vu + hul * vl + gu)), (z, sc(hll * vl + hul * vu + gl)),
            (z, huu * vu * vu + hll * vl * vl + 2.0 * hul * vu * vl + gu * vu + gl * vl)]
        R = _thin_product(S, _columns(S, first + [(q, sc2(huu)), (q, sc2(hll)), (q, sc2(hul))] + scale))
        self._gradient(R, dests, nq)
        self._small_blocks(R, dests, nq, len(first))
        if self.p:
            cz = [] if not r else [(z, sc(huu * vu + hll * vl + hul * (vu + vl) + gu + gl))]
            G = _thin_product(X, _columns(S, [(None, sc(gu + gl)), (q, sc2(huu + hul)),
                                              (q, sc2(hll + hul))] + cz))
            self._effect_blocks(G, dests, nq)
            self.H[self.beta, self.beta] += weighted_gram(X, sc2(huu + hll + 2.0 * hul))

    def _gradient(self, R, dests, nq):
        g, z = self.g, self.zeta
        for col, dest in enumerate(dests):
            if dest is not None:
                g[dest] += self.sign * R[:nq, col]
        if self.r:
            g[z] -= R[nq:, 2]

    def _small_blocks(self, R, dests, nq, col):
        """Threshold / per-threshold / scale blocks from ``R = [1, W, Z]' T`` (their columns
        of ``T`` start at ``col``)."""
        H, C, z, s = self.H, self.C, self.zeta, self.sign
        du, dl = dests
        ss = np.outer(s, s)
        quu, qll, qul = (R[:nq, col + i * nq: col + (i + 1) * nq] for i in range(3))
        col += 3 * nq
        r = self.r
        if du is not None:
            H[np.ix_(du, du)] += ss * quu
        if dl is not None:
            H[np.ix_(dl, dl)] += ss * qll
        if du is not None and dl is not None:
            C[np.ix_(du, dl)] += ss * qul  # rows: cut k, columns: cut k-1
        if r:
            zi = np.arange(z.start, z.stop)
            for dest, block in zip(dests, (R[:nq, col:col + r], R[:nq, col + r:col + 2 * r])):
                if dest is not None:
                    C[np.ix_(dest, zi)] -= s[:, None] * block
            H[z, z] += R[nq:, col + 2 * r:col + 3 * r]

    def _effect_blocks(self, G, dests, nq):
        """Blocks between the parallel effects and the other parameters from ``G = X' T``."""
        g, C, b, z = self.g, self.C, self.beta, self.zeta
        g[b] -= G[:, 0]
        bi = np.arange(b.start, b.stop)
        for i, dest in enumerate(dests):
            if dest is not None:
                C[dest[:, None], bi[None, :]] -= self.sign[:, None] * G[:, 1 + i * nq:1 + (i + 1) * nq].T
        if self.r:
            C[b, z] += G[:, 1 + 2 * nq:]


#: Rows per block of a product ``A' B`` with a thin ``B``.
THIN_BLOCK = 4096


def _thin_product(A, B):
    """``A' B`` for a ``B`` of a few columns, a block of rows at a time.

    Products this small gain nothing from BLAS threads, and on a busy machine a threaded
    call waits for a thread that is not running (medians ten times the minimum were seen);
    blocks of a few thousand rows stay below the size at which BLAS starts threads, and in
    cache.
    """
    n = len(A)
    if n <= THIN_BLOCK:
        return A.T @ B
    out = A[:THIN_BLOCK].T @ B[:THIN_BLOCK]
    for s in range(THIN_BLOCK, n, THIN_BLOCK):
        out += A[s:s + THIN_BLOCK].T @ B[s:s + THIN_BLOCK]
    return out


#: Rows per block of the weighted Gram product (a block of 10 columns stays in cache).
GRAM_BLOCK = 8192


def weighted_gram(Xs, c):
    """``Xs' diag(c) Xs``; as ``-(A'A)`` with ``A = Xs sqrt(-c)`` when ``c <= 0`` (log-concave
    links), which lets BLAS use the symmetric rank-k update at half the cost.

    ``A`` is formed and multiplied a block of rows at a time in one reused buffer, which
    stays in cache and spares a full-size temporary.
    """
    n, p = Xs.shape
    out = np.zeros((p, p))
    if p == 0 or n == 0:
        return out
    root = np.negative(c)
    concave = bool(root.min() >= 0)  # False with a nan, as the general product then shows
    if concave:
        np.sqrt(root, out=root)
    buf = np.empty((min(n, GRAM_BLOCK), p), order="F")
    for s in range(0, n, GRAM_BLOCK):
        e = min(s + GRAM_BLOCK, n)
        A = buf[:e - s]
        np.multiply(Xs[s:e], (root if concave else c)[s:e, None], out=A)
        out += A.T @ A if concave else Xs[s:e].T @ A
    return -out if concave else out

"""Profile-likelihood intervals of the SDs of a random-intercept fit.

The interval of an SD ``s`` holds the values whose profile log-likelihood (the marginal
log-likelihood maximised over all other parameters at that ``s``) is within half the
chi-squared(1) quantile of the maximum; equivalently, where the signed root
``r(s) = sign(s - s_hat) sqrt(2 (loglik_max - loglik_profile(s)))`` stays within
``-+ z`` (Venzon & Moolgavkar 1988, Appl. Statist. 37:87-94).  ``r`` is nearly linear in
``s``, and its slope is known from the envelope theorem (``d loglik_profile / ds`` is the
gradient entry of the SD at the conditional maximum), so Newton's method on ``r`` finds an
end in a few profile fits; each fit is warm-started on the line through the two nearest
solved points.  Steps that leave the bracket known so far are replaced by bisection.  The
likelihood is even in the SD, so the lower end is 0 when ``r(0) >= -z``.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from .optimize import newton_maximize

__all__ = ["sd_profile_intervals"]

_MAX_STEPS = 60
_FAR = 2.0 ** 10  # an end beyond this many Wald half-widths is reported infinite


class _SDProfile:
    """Profile log-likelihood of one SD, with the solved points kept for warm starts."""

    def __init__(self, res, column):
        self.design, self.link, self.top = res.likelihood, res.link, float(res.loglik)
        self.j = len(res.params) + column
        self.free = np.flatnonzero(np.arange(len(res.internal_params)) != self.j)
        start = np.array(res.internal_params, float)
        start[len(res.params):] = np.abs(start[len(res.params):])
        self.est = float(res.sds[column])
        self.solved = [(self.est, start)]
        self.fits = 0

    def _full(self, s, rest):
        x = np.empty(len(self.free) + 1)
        x[self.free], x[self.j] = rest, s
        return x

    def _start(self, s):
        near = sorted(self.solved, key=lambda p: abs(p[0] - s))
        if len(near) >= 2 and near[0][0] != near[1][0]:
            (s0, x0), (s1, x1) = near[:2]
            guess = x0 + (x1 - x0) * (s - s0) / (s1 - s0)
            if self.design.feasible(self._full(s, guess[self.free])):
                return guess[self.free]
        return near[0][1][self.free]

    def solve(self, s):
        """Profile log-likelihood at ``s`` and its slope ``d loglik_profile / ds``."""
        last = {}

        def evaluate(v, order):
            ll, g, H = self.design.sums(self.link, self._full(s, v), order=order)
            if g is not None:
                last["at"], last["slope"] = v.copy(), float(g[self.j])
            return ll, None if g is None else g[self.free], None if H is None else H[np.ix_(self.free, self.free)]

        out = newton_maximize(evaluate, self._start(s), feasible=lambda v: self.design.feasible(self._full(s, v)),
                              max_iter=100, tol=1e-10)
        self.fits += 1
        full = self._full(s, out.params)
        self.solved.append((s, full))
        if "at" not in last or not np.array_equal(last["at"], out.params):
            last["slope"] = float(self.design.sums(self.link, full, order=1)[1][self.j])
        return out.loglik, last["slope"]

    def signed_root(self, s):
        """``r(s)`` and ``dr/ds`` (``nan`` at the estimate)."""
        ll, slope = self.solve(s)
        r = np.sign(s - self.est) * np.sqrt(2.0 * max(self.top - ll, 0.0))
        return r, (-slope / r if r != 0 else np.nan)


def _end(prof, sign, z, t, xtol, far):
    """The end on side ``sign`` by safeguarded Newton steps on ``r(s) - sign z`` from ``t``.

    ``inner`` is the point nearest the end known to be inside the interval, ``outer`` one
    known outside (``None`` until found).  Steps that leave that bracket are replaced by
    bisection (or, without ``outer``, by doubling the distance from the estimate).  The
    lower end never goes below 0: a step there evaluates ``r(0)``, and if 0 is inside, the
    end is 0.
    """
    inner, outer = prof.est, None
    for _ in range(_MAX_STEPS):
        r, slope = prof.signed_root(t)
        f = r - sign * z
        if abs(f) < 1e-8 or (t == 0.0 and sign * f < 0):
            return t
        if sign * f < 0:
            inner = t
        else:
            outer = t
        if outer is not None and abs(outer - inner) < xtol:
            return 0.5 * (inner + outer)
        step = -f / slope if np.isfinite(slope) and slope > 0 else np.nan
        t_new = t + step
        between = outer is None or min(inner, outer) < t_new < max(inner, outer)
        if abs(step) < xtol and between:
            return t_new  # Newton on the nearly linear r: the next fit would move less than xtol
        if not (np.isfinite(t_new) and sign * (t_new - inner) > 0 and between):
            t_new = 0.5 * (inner + outer) if outer is not None else inner + 2.0 * (inner - prof.est)
        if sign < 0 and t_new <= 0.0:
            t_new = 0.0 if outer is None else 0.5 * (inner + outer)
        if abs(t_new - prof.est) > far:
            return sign * np.inf
        t = t_new
    return 0.5 * (inner + outer) if outer is not None else sign * np.inf


def _one_interval(res, column, z):
    prof = _SDProfile(res, column)
    sd = prof.est
    if sd == 0.0:
        return 0.0, _end(prof, 1.0, z, z * 0.5, 1e-8, _FAR * z)
    var = res.full_cov[prof.j, prof.j]
    se = float(np.sqrt(var)) if np.isfinite(var) and var > 0 else max(0.5 * sd, 0.05)
    xtol = 1e-6 * max(sd, 1e-2)
    lower = _end(prof, -1.0, z, max(sd - z * se, 0.0), xtol, np.inf)
    upper = _end(prof, 1.0, z, sd + z * se, xtol, _FAR * z * se)
    return lower, upper


def sd_profile_intervals(res, level=0.95):
    """Profile-likelihood intervals ``(lower, upper)`` of each grouping column's SD.

    Arrays over the grouping columns; ``nan`` without the fit's likelihood, ``inf`` for an
    upper end the likelihood does not reach.
    """
    C = len(res.groups)
    if res.likelihood is None:
        return np.full(C, np.nan), np.full(C, np.nan)
    z = float(np.sqrt(stats.chi2.isf(1 - level, 1)))
    ends = [_one_interval(res, c, z) for c in range(C)]
    return np.array([e[0] for e in ends]), np.array([e[1] for e in ends])

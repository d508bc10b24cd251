"""Confidence intervals (Wald and profile likelihood) and likelihood-ratio comparisons.

Profile intervals follow the usual construction (e.g. Venzon & Moolgavkar 1988, Appl.
Statist. 37:87-94): the end points are where the signed root
``r(t) = sign(t - est) * sqrt(2 (loglik_max - loglik_profile(t)))`` reaches ``-+ z``.  The
profile log-likelihood maximises over all other parameters with the safeguarded Newton
iteration, warm-started from the nearest point already solved and shifted along the
regression of the other estimates on the profiled one.  The root is found by Newton's
method on ``r`` (its slope is known from the envelope theorem), falling back to bracketing
and Brent's method.  An end that is not reached within ``2**10`` Wald half-widths is
reported as infinite, never invented.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy import optimize, stats

from .effects import check_level, wald_bounds
from .exceptions import ComparisonError, ConvergenceWarning
from .extended_fit import layout_design
from .layout import all_training_rows, layout_of
from .objective import SortedColumns, sort_by_category
from .optimize import newton_maximize
from .row_digest import rows_digest
from .sandwich import refuse_likelihood_tests

__all__ = ["intervals", "wald_intervals", "profile_intervals", "compare"]

_MAX_DOUBLINGS = 10


def wald_intervals(res, level=0.95):
    """``estimate -+ z * SE`` for every parameter (rows aligned with ``res.std_errors``)."""
    low, high = wald_bounds(pd.Series(res.params, index=res.names), res.std_errors, level)
    return pd.DataFrame({"lower": low, "upper": high})


class _Profile:
    """Profile log-likelihood of one parameter, with a cache of solved points."""

    def __init__(self, res, k, design):
        self.res, self.k, self.design = res, k, design
        self.free = np.flatnonzero(np.arange(res.n_params) != k)
        cov = res.cov
        self.slope = cov[self.free, k] / cov[k, k] if cov[k, k] > 0 else np.zeros(len(self.free))
        self.solved = [(float(res.params[k]), np.array(res.params, float))]

    def _full(self, t, rest):
        x = np.empty(self.res.n_params)
        x[self.k], x[self.free] = t, rest
        return x

    def _start(self, t):
        t0, x0 = min(self.solved, key=lambda s: abs(s[0] - t))
        shifted = x0[self.free] + self.slope * (t - t0)
        for rest in (shifted, x0[self.free]):
            if self.design.feasible(self._full(t, rest)):
                return rest
        return None

    def solve(self, t):
        """Profile log-likelihood at ``t`` and its slope (None if no feasible start).

        The slope is ``d loglik_profile / dt = d loglik / d param_k`` at the conditional
        maximum (envelope theorem), so it costs one gradient evaluation.
        """
        rest = self._start(t)
        if rest is None:
            return None
        link = self.res.link

        last = {}

        def evaluate_keeping(v, order):  # keeps d loglik / d param_k of the last full evaluation
            ll, g, H = self.design.sums(link, self._full(t, v), order=order)
            if g is not None:
                last["slope"] = (v.copy(), float(g[self.k]))
            return ll, None if g is None else g[self.free], None if H is None else H[np.ix_(self.free, self.free)]

        out = newton_maximize(evaluate_keeping, rest, feasible=lambda v: self.design.feasible(self._full(t, v)),
                              max_iter=200, tol=1e-12)
        full = self._full(t, out.params)
        self.solved.append((t, full))
        at, slope = last.get("slope", (None, None))
        if at is None or not np.array_equal(at, out.params):
            g = self.design.sums(link, full, order=1)[1]
            slope = np.nan if g is None else float(g[self.k])  # nan: not finite there
        return out.loglik, slope

    def signed_root(self, t):
        """``sign(t - est) sqrt(2 (loglik_max - loglik_profile(t)))`` and its slope in ``t``."""
        got = self.solve(t)
        if got is None:
            raise RuntimeError(f"profile of {self.res.names[self.k]!r}: no feasible start at {t}")
        r = np.sign(t - self.res.params[self.k]) * np.sqrt(2.0 * max(self.res.loglik - got[0], 0.0))
        return r, (-got[1] / r if r != 0 else np.nan)


def _newton_end(prof, sign, z, se):
    """Newton's method on the signed root from the Wald end; None when it is not safe."""
    est = float(prof.res.params[prof.k])
    t = est + sign * z * se
    for _ in range(20):
        if prof._start(t) is None:
            return None
        r, slope = prof.signed_root(t)
        if abs(r - sign * z) < 1e-9:
            return t
        if not slope > 0:
            return None
        t_new = t - (r - sign * z) / slope
        t = t_new if sign * (t_new - est) > 0 else 0.5 * (t + est)
        if abs(t - est) > 2.0**_MAX_DOUBLINGS * z * se:
            return None
    return None


def _profile_end(prof, sign, z, se):
    """One end of the profile interval.

    Newton's method on the signed root (nearly linear in ``t``) usually needs three or four
    profile fits; where it is not safe (flat or irregular profile) the end is bracketed by
    doubling steps and found by Brent's method, or reported infinite.
    """
    found = _newton_end(prof, sign, z, se)
    if found is not None:
        return found
    est = float(prof.res.params[prof.k])
    t_prev, step = est, z * se
    for _ in range(4 * _MAX_DOUBLINGS):
        if abs(t_prev - est) > 2.0**_MAX_DOUBLINGS * z * se:
            break
        t = t_prev + sign * step
        got = prof.solve(t)
        if got is None:
            step /= 2
            continue
        if np.sqrt(2.0 * max(prof.res.loglik - got[0], 0.0)) >= z:
            lo, hi = sorted((t_prev, t))
            return optimize.brentq(lambda s: prof.signed_root(s)[0] - sign * z, lo, hi,
                                   xtol=1e-10 * (1 + abs(t)), rtol=1e-12)
        t_prev, step = t, 2 * step
    return sign * np.inf


def user_scale_design(res):
    """The engine's sorted design of the training rows on the user's scale (no standardising),
    so that profiling one parameter fixes one coordinate."""
    tr = res.training_rows()
    layout = layout_of(res)
    order, bounds = sort_by_category(tr.y, layout.m + 1)
    Xs = np.asfortranarray(tr.X[order])
    d = Xs.shape[1]
    cols = SortedColumns(Xs, np.zeros(d), np.ones(d), np.eye(d), None, None)
    return layout_design(layout, tr.X, tr.y, tr.weights, columns=cols)[0]


def profile_intervals(res, level=0.95, *, which=None):
    """Profile-likelihood intervals (rows aligned with ``res.std_errors``).

    Parameters
    ----------
    which : list of str, optional
        Parameter names to profile (default: all); the others are ``nan``.

    Raises
    ------
    OrdinalDataError
        For a fit with a cluster-robust covariance (``cluster=``) or sampling weights: the
        profile likelihood assumes independent rows and would ignore that covariance; the
        Wald intervals use it.
    """
    check_level(level)
    refuse_likelihood_tests("profile-likelihood intervals", res)
    tr = all_training_rows(res, "a profile interval")
    design = user_scale_design(res)
    z = float(wald_bounds(0.0, 1.0, level)[1])  # the normal quantile of the Wald interval
    se = res.std_errors.to_numpy()
    out = np.full((res.n_params, 2), np.nan)
    wanted = res.names if which is None else list(which)
    for k, name in enumerate(res.names):
        if name not in wanted or not np.isfinite(se[k]) or se[k] <= 0:
            continue
        prof = _Profile(res, k, design)
        out[k] = [_profile_end(prof, -1.0, z, se[k]), _profile_end(prof, 1.0, z, se[k])]
    return pd.DataFrame(out, index=res.names, columns=["lower", "upper"])


def intervals(res, level=0.95, *, method="wald"):
    """Confidence intervals for all parameters.

    Parameters
    ----------
    level : float
        Coverage, strictly between 0 and 1.
    method : {"wald", "profile"}
        ``"profile"`` is refused for fits with a cluster-robust covariance or sampling
        weights (see :func:`profile_intervals`); ``"wald"`` uses the fit's covariance.

    Returns
    -------
    pandas.DataFrame
        Columns ``lower``, ``upper``; rows aligned with ``res.std_errors``.  Profile ends
        that the likelihood does not reach are ``-inf`` / ``inf``.
    """
    if method == "wald":
        return wald_intervals(res, level)
    if method == "profile":
        return profile_intervals(res, level)
    raise ValueError(f"method must be 'wald' or 'profile', got {method!r}")


# ---- likelihood-ratio comparison ---------------------------------------------------------
_RANK = {None: 0, "parallel": 1, "nonparallel": 2}


def _structure(res):
    """Design column -> (location kind, in scale) of a fit."""
    layout = layout_of(res)
    kinds = {}
    for i, c in enumerate(layout.columns):
        loc = "parallel" if i in layout.location else "nonparallel" if i in layout.nonparallel else None
        kinds[c] = (loc, i in layout.scale)
    return kinds


def _describe(res):
    extra = [f"{k}={v}" for k in ("nonparallel", "scale_by") if res.options.get(k) for v in [res.options[k]]]
    return " ".join([res.formula, f"[{res.link.name}]"] + extra)


def _check_same_rows(a, b):
    if a.link.name != b.link.name or tuple(a.levels) != tuple(b.levels) or a.response != b.response:
        raise ComparisonError("fits use different links, responses or levels: not nested")
    if a.n_rows != b.n_rows or not np.isclose(a.n_obs, b.n_obs):
        raise ComparisonError(f"fits use different rows ({a.n_rows} and {b.n_rows} rows): refit on the same rows")
    if a.training is None or b.training is None:
        _check_digests(a, b)
        return
    ta, tb = a.training, b.training
    same_w = (ta.weights is None and tb.weights is None) or (
        ta.weights is not None and tb.weights is not None and np.array_equal(ta.weights, tb.weights))
    if not (ta.index.equals(tb.index) and np.array_equal(ta.y, tb.y) and same_w):
        raise ComparisonError("fits use different rows, responses or weights: refit on the same rows")


def _check_digests(a, b):
    """Same-row check of fits that did not keep their training rows (``keep_data=False``)."""
    da, db = _digest_of(a), _digest_of(b)
    if da is not None and db is not None:
        if da != db:
            raise ComparisonError("fits use different rows, responses or weights (their row digests differ): "
                                  "refit on the same rows")
        return
    warnings.warn("cannot check that the two fits use the same rows (a fit keeps neither its training rows nor "
                  "a digest of them): only the row counts agree; make sure both were fitted on the same rows",
                  UserWarning, stacklevel=4)


def _digest_of(res):
    """The fit's row digest, from its training rows when it kept all of them."""
    digest = getattr(res, "row_digest", None)
    tr = res.training
    if digest is None and tr is not None and len(tr.y) == res.n_rows:
        digest = rows_digest(tr.index, tr.y, tr.weights)
    return digest


def _check_nested(small, large):
    s, big = _structure(small), _structure(large)
    missing = [c for c in s if c not in big]
    looser = [c for c, (loc, sc) in s.items() if c in big and (_RANK[loc] > _RANK[big[c][0]] or sc > big[c][1])]
    if missing or looser:
        raise ComparisonError(
            "the smaller fit is not nested in the larger one: "
            + "; ".join(filter(None, [missing and f"not in the larger fit: {', '.join(missing)}",
                                      looser and f"freer in the smaller fit: {', '.join(looser)}"]))
        )
    if small.training is not None and large.training is not None:
        ls, ll = layout_of(small), layout_of(large)
        differ = [c for i, c in enumerate(ls.columns)
                  if not np.allclose(small.training.X[:, i], large.training.X[:, ll.columns.index(c)])]
        if differ:
            raise ComparisonError(f"columns with the same name hold different values: {', '.join(differ)}")


def compare(smaller, larger):
    """Likelihood-ratio test of a fit against a larger fit it is nested in.

    ``statistic = 2 (loglik_larger - loglik_smaller)`` is referred to a chi-squared
    distribution with ``df`` = the difference in the number of parameters (Wilks 1938).
    A plain fit against a random-intercept fit tests ``sigma = 0`` with the boundary
    mixture (:meth:`RandomInterceptFit.random_part_test`).

    Raises
    ------
    ComparisonError
        If the fits are not nested (a predictor or a freer effect in the smaller fit that
        the larger lacks; different link or levels) or were fitted on different rows; and
        if either fit has a cluster-robust covariance (``cluster=``) or sampling weights:
        the statistic assumes independent rows, so it would ignore that covariance
        (:func:`~ordwidgets.core.sandwich.likelihood_caveat`).

    Returns
    -------
    pandas.DataFrame
        Rows ``"smaller"``, ``"larger"``; columns ``model``, ``n_params``, ``loglik``,
        ``statistic``, ``df``, ``p_value`` (the last three on the ``"larger"`` row).
    """
    refuse_likelihood_tests("likelihood-ratio comparison", smaller, larger, error=ComparisonError)
    if getattr(larger, "groups", ()) and not getattr(smaller, "groups", ()):
        return larger.random_part_test(smaller)  # sigma = 0 on its boundary (RandomInterceptFit)
    _check_same_rows(smaller, larger)
    _check_nested(smaller, larger)
    df = larger.n_params - smaller.n_params
    if df <= 0:
        raise ComparisonError(f"the larger fit has no extra parameters ({larger.n_params} vs {smaller.n_params})")
    stat = 2.0 * (larger.loglik - smaller.loglik)
    if stat < -1e-6 * (1 + abs(larger.loglik)):
        warnings.warn(f"the larger fit has the lower log-likelihood ({larger.loglik:.6f} < {smaller.loglik:.6f}): "
                      "it is not at its maximum; no p-value", ConvergenceWarning, stacklevel=2)
    else:
        stat = max(stat, 0.0)
    return pd.DataFrame(
        {"model": [_describe(smaller), _describe(larger)], "n_params": [smaller.n_params, larger.n_params],
         "loglik": [smaller.loglik, larger.loglik], "statistic": [np.nan, stat], "df": [np.nan, df],
         "p_value": [np.nan, float(stats.chi2.sf(stat, df)) if stat >= 0 else np.nan]},
        index=["smaller", "larger"],
    )

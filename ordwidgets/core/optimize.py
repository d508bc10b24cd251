"""Safeguarded Newton-Raphson and the one place that interprets convergence.

:func:`newton_maximize` is generic: it needs a function returning ``(loglik, grad, hess)``
and a feasibility test (for the cumulative link model: strictly increasing thresholds).
Each step solves ``-H d = g`` by Cholesky; where ``-H`` is not positive definite (the
cauchit likelihood is not concave, and far from the optimum neither need any be) a
Levenberg-style shift ``-H + mu I`` is used instead, which always gives an ascent
direction.  Steps are halved until they stay feasible and do not decrease the
log-likelihood.  Convergence is declared on the Newton decrement ``g' (-H)^{-1} g / 2``,
the predicted distance to the maximum in log-likelihood units (Boyd & Vandenberghe 2004,
Convex Optimization, sec. 9.5.1).

:func:`check_convergence` is the only function that decides whether a fit is trusted; it
warns with :class:`~ordwidgets.core.exceptions.ConvergenceWarning` and never lets a bad
fit pass silently.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from .exceptions import ConvergenceWarning

__all__ = ["NewtonOutcome", "newton_maximize", "check_convergence", "ascent_direction"]


@dataclass(frozen=True, eq=False)
class NewtonOutcome:
    """Raw outcome of :func:`newton_maximize` (before interpretation)."""

    params: np.ndarray
    loglik: float
    grad: np.ndarray
    hess: np.ndarray
    iterations: int
    decrement: float
    status: str  # "converged", "max_iter", "line_search", "not_finite"


def ascent_direction(grad, hess):
    """Solve ``(-H + mu I) d = g`` with the smallest ``mu >= 0`` that is positive definite.

    Returns
    -------
    d : ndarray
        The (possibly shifted) Newton direction.
    shifted : bool
        Whether a shift was needed (``-H`` not positive definite).
    """
    A = -np.asarray(hess, float)
    scale = max(float(np.max(np.abs(np.diag(A)))), 1e-12)
    mu = 0.0
    for _ in range(60):
        try:
            c = linalg.cho_factor(A + mu * np.eye(len(A)), check_finite=False)
            d = linalg.cho_solve(c, grad, check_finite=False)
            if np.all(np.isfinite(d)):
                return d, mu > 0
        except linalg.LinAlgError:
            pass
        mu = scale * 1e-8 if mu == 0 else mu * 10.0
    return grad / scale, True


def newton_maximize(evaluate, start, *, feasible, max_iter=100, tol=1e-12, callback=None, rough_above=None):
    """Maximise a smooth function with safeguarded Newton steps.

    Parameters
    ----------
    evaluate : callable
        ``evaluate(params, order)`` returns ``(value, grad, hess)``; with ``order=0`` only
        the value is needed (the others may be ``None``).  With ``rough_above`` it is also
        called as ``evaluate(params, 2, rough=True)``, which may return a Hessian estimated
        from a sample of the rows (the value and gradient stay exact).
    start : ndarray
        Feasible starting point.
    feasible : callable
        ``feasible(params) -> bool``.
    max_iter : int
        Maximum number of Newton steps.
    tol : float
        Stop when the Newton decrement (half of ``g' (-H)^{-1} g``) is below ``tol``.
    callback : callable, optional
        Called as ``callback(iteration, params, loglik, grad)`` after each accepted step;
        may raise ``KeyboardInterrupt`` to stop (the caller sees the exception).
    rough_above : float, optional
        Points reached by a step whose decrement exceeded this are evaluated with a rough
        Hessian: far from the maximum the error of the step is dominated by the curvature
        of the function, not by that of the Hessian, so the path needs no more steps.  The
        outcome always carries an exact Hessian: convergence is only declared on one, and
        a rough point where the test would pass is evaluated again exactly.

    Returns
    -------
    NewtonOutcome
    """
    x = np.array(start, dtype=float)
    ll, g, H = evaluate(x, 2)
    if not np.isfinite(ll):
        return NewtonOutcome(x, ll, g, H, 0, np.inf, "not_finite")
    rough = False
    dec = np.inf
    for it in range(max_iter + 1):
        d, _ = ascent_direction(g, H)
        dec = 0.5 * float(g @ d)
        if dec < tol and rough:  # never stop on a rough Hessian: look again, exactly
            ll, g, H = evaluate(x, 2)
            rough = False
            d, _ = ascent_direction(g, H)
            dec = 0.5 * float(g @ d)
        if dec < tol:
            return NewtonOutcome(x, ll, g, H, it, dec, "converged")
        if it == max_iter:
            break
        take_rough = rough_above is not None and dec > rough_above
        step = _line_search(evaluate, feasible, x, ll, d, rough=take_rough)
        if step is None:
            return _exact_outcome(evaluate, x, ll, g, H, rough, it, dec, "line_search")
        x, ll, g, H = step
        rough = take_rough
        if callback is not None:
            callback(it + 1, x, ll, g)
    return _exact_outcome(evaluate, x, ll, g, H, rough, max_iter, dec, "max_iter")


def _exact_outcome(evaluate, x, ll, g, H, rough, iterations, dec, status):
    """An outcome of a stopped run, with the exact Hessian at ``x``."""
    if rough:
        ll, g, H = evaluate(x, 2)
    return NewtonOutcome(x, ll, g, H, iterations, dec, status)


def _line_search(evaluate, feasible, x, ll, d, max_halvings=50, rough=False):
    """Halve the step until feasible and not worse; return ``(x, ll, g, H)`` or None
    (``H`` rough if ``rough``)."""
    slack = 1e-12 * max(1.0, abs(ll))
    full = (lambda z: evaluate(z, 2, rough=True)) if rough else (lambda z: evaluate(z, 2))  # noqa: E731
    alpha = 1.0
    for i in range(max_halvings):
        xn = x + alpha * d
        if feasible(xn):
            if i == 0:
                lln, gn, Hn = full(xn)
                if np.isfinite(lln) and lln >= ll - slack:
                    return xn, lln, gn, Hn
            else:
                lln = evaluate(xn, 0)[0]
                if np.isfinite(lln) and lln >= ll - slack:
                    return (xn, *full(xn))
        alpha *= 0.5
    return None


def check_convergence(outcome, *, what="fit", warn=True):
    """Decide whether a Newton outcome is a verified maximum; warn if it is not.

    A fit counts as converged only when the optimiser stopped on its decrement test, the
    log-likelihood and gradient are finite, and ``-H`` is positive definite (a strict local
    maximum).  Following scipy.stats' fitting, a non-finite objective marks the fit failed
    whatever the optimiser said.

    Returns
    -------
    converged : bool
    message : str
        Plain-language description used in results and warnings.
    condition : float
        Condition number of ``-H`` (``inf`` if singular).
    """
    H = np.asarray(outcome.hess, float)
    finite = np.isfinite(outcome.loglik) and np.all(np.isfinite(outcome.grad))
    eig = np.linalg.eigvalsh(-H) if np.all(np.isfinite(H)) else np.array([np.nan])
    definite = bool(np.all(eig > 0))
    condition = float(eig.max() / eig.min()) if definite else float("inf")
    if not finite:
        converged, message = False, "the log-likelihood or its gradient is not finite"
    elif outcome.status == "max_iter":
        converged, message = False, f"no convergence after {outcome.iterations} Newton steps"
    elif outcome.status == "line_search":
        converged, message = False, "the line search could not improve the log-likelihood"
    elif not definite:
        converged, message = False, "the Hessian is not negative definite (not a strict maximum)"
    else:
        converged = True
        message = f"converged in {outcome.iterations} Newton steps"
    if warn and not converged:
        warnings.warn(f"{what}: {message}", ConvergenceWarning, stacklevel=3)
    return converged, message, condition

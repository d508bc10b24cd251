"""The fitting engine: one ``maximise(design, link)`` for every cumulative link model.

Plain, extended (per-threshold and scale effects) and partitioned (Dask) fits differ only in
the *design* object they hand to :func:`maximise`; start values, the Newton iteration,
the cauchit restart, the separation check, the map back to the user's scale and the
covariance are done here, once.  This module sits below :mod:`ordwidgets.core.results`
and never imports it: it returns an :class:`EngineFit` (plain numbers) from which
:func:`ordwidgets.core.fitting.fit` builds the ``FitResult``.

Design protocol
---------------
A design is any object with

``n_params`` : int
    Number of parameters, thresholds first: ``params[:J-1]`` are the thresholds.
``counts()`` -> ndarray, shape (J,)
    Weighted number of rows in each response category (``J >= 2``).
``sums(link, params, *, order=2)`` -> ``(loglik, grad or None, hess or None)``
    Log-likelihood and, for ``order`` 1 or 2, its gradient and Hessian at ``params`` on the
    design's internal scale (usually standardised columns).  Sums over rows, so they can
    be added up over partitions.  ``order=0`` (log-likelihood only) must not build the
    gradient or the Hessian.

and optionally

``loglik(link, params)`` -> float
    The log-likelihood alone, equal to ``sums(link, params, order=0)[0]`` (``-inf`` where
    it is not finite), by a leaner path: the engine calls it at line-search trial points
    after a rejected full step, where nothing else is needed.  Designs without it are
    asked for ``sums(..., order=0)`` there instead.

``feasible(params)`` -> bool
    Whether ``params`` define valid probabilities for every row (default: finite with
    strictly increasing thresholds, :func:`thresholds_increasing`).
``rows_used`` : float
    Number of rows with positive weight (default: ``counts().sum()``); with
    ``counts().sum()`` it gives the weight unit that makes the convergence test
    independent of a constant rescaling of frequency weights.
``start(link)`` -> ndarray
    Starting point (default: the closed-form thresholds-only maximum and zero effects).
``hessian_sample`` : int
    With a value ``K > 1``, ``sums(..., hessian_sample=K)`` must accept a Hessian from
    every ``K``-th row counted ``K`` times (value and gradient exact); the engine asks for
    one only far from the maximum and never stops on one (default 1: always exact).

The map to the user's scale is a matrix ``A`` passed as ``to_user=`` (``params_user =
A @ params_internal``; built by :func:`user_scale_matrix` for standardised columns);
covariances map as ``A C A'``.  :class:`ordwidgets.core.sorted_design.SortedDesign`
(rows sorted by category, sums per segment, one Gram product per segment) serves plain
and extended in-memory fits; :class:`ordwidgets.core.dask_fit.PartitionedDesign` adds the
sums of partitions.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from .exceptions import OrdinalDataError, SeparationWarning
from .links import get_link
from .optimize import NewtonOutcome, check_convergence, newton_maximize

__all__ = ["Design", "EngineFit", "PreparedFit", "maximise", "check_enough_rows", "closed_form_thresholds", "thresholds_increasing",
           "shifted_moments", "standardise", "safe_sd", "user_scale_matrix", "covariance_on_user_scale",
           "separated_columns", "SEPARATION_CUTOFF"]

#: A standardised effect beyond this (latent error units per SD) with |z| < 2 is read as an
#: estimate running away (common practice, no source for the exact cut-offs).
SEPARATION_CUTOFF = 8.0

#: Condition number of ``-H`` beyond which its inverse is not trusted (about 1e-4 of the
#: reciprocal of double precision's epsilon: common practice, no source).
ILL_CONDITIONED = 1e12


class Design:
    """Documentation of the design protocol (see the module docstring); not a base class."""

    n_params: int

    def counts(self):  # pragma: no cover - protocol only
        raise NotImplementedError

    def sums(self, link, params, *, order=2):  # pragma: no cover - protocol only
        raise NotImplementedError


@dataclass(frozen=True, eq=False)
class EngineFit:
    """Outcome of :func:`maximise` on the user's scale (no result object yet).

    Attributes
    ----------
    params, cov : ndarray
        Estimates and their covariance (inverse observed information) on the user's scale.
    loglik : float
    converged : bool
    message : str
    curvature_condition : float
        Condition number of the negative Hessian (``inf`` if not positive definite).
    largest_score : float
        Largest absolute gradient entry on the user's scale.
    iterations : int
    n_obs : float
        Weighted number of rows.
    internal : NewtonOutcome
        The raw Newton outcome on the design's internal scale.
    """

    params: np.ndarray
    cov: np.ndarray
    loglik: float
    converged: bool
    message: str
    curvature_condition: float
    largest_score: float
    iterations: int
    n_obs: float
    internal: NewtonOutcome


@dataclass(eq=False)
class PreparedFit:
    """Everything a fit needs besides the link and the iteration settings.

    Built by the preparation of each kind of fit (plain and extended in memory, Dask) and
    consumed by :func:`ordwidgets.core.fitting.fit`, which calls :func:`maximise` and
    builds the result.

    Attributes
    ----------
    design : object following the design protocol
    layout : ModelLayout
        Which columns enter where (a plain fit: every column parallel, no scale).
    to_user : ndarray
        Internal -> user scale map of the parameters.
    prep : PreparedData or None
        The prepared in-memory rows (levels, response, spec, notes and the training rows).
    meta : object, optional
        For fits without ``prep`` (Dask): an object with ``levels``, ``response``,
        ``model_spec`` and ``notes``.
    training : TrainingData or None
        Rows kept in the result when there is no ``prep`` (the sample of a Dask fit).
    n_rows : int
        Rows fitted (when there is no ``prep``).
    separated : tuple of str
        Columns found separated in the data (:func:`separated_columns`).
    options : dict
        Recorded in ``FitResult.options``.
    explain_failure : callable or None
        See :func:`maximise`.
    after : callable or None
        ``after(engine_fit) -> dict`` of options added once the fit is known.
    """

    design: object
    layout: object
    to_user: np.ndarray
    prep: object = None
    meta: object = None
    training: object = None
    n_rows: int = 0
    separated: tuple = ()
    options: dict = None
    explain_failure: object = None
    after: object = None


def check_enough_rows(used, n_params):
    """Refuse fewer rows (with positive weight) than parameters."""
    if used < n_params:
        raise OrdinalDataError(f"{used} rows for {n_params} parameters: fewer rows than parameters")


# ---- start values and scaling ---------------------------------------------------------------
def closed_form_thresholds(link, counts):
    """Thresholds-only MLE: ``theta_j = F^{-1}(sum_{k<=j} n_k / n)`` (exact, no iteration)."""
    cum = np.cumsum(counts)[:-1] / np.sum(counts)
    return get_link(link).ppf(cum)


def thresholds_increasing(params, m):
    """Feasibility rule of the model: finite, strictly increasing thresholds."""
    theta = params[:m]
    return bool(np.all(np.isfinite(params)) and np.all(np.diff(theta) > 0))


def shifted_moments(Xs, weights=None):
    """Weighted mean and population covariance of columns already shifted near their centre.

    Shifting (by any one row) first keeps ``E[x x'] - E[x] E[x]'`` from cancelling for columns
    far from zero, such as calendar years or money amounts.
    """
    if weights is None:
        total, first, gram = float(len(Xs)), Xs.sum(axis=0), Xs.T @ Xs
    else:
        total, first, gram = float(weights.sum()), weights @ Xs, Xs.T @ (Xs * weights[:, None])
    centre = first / total
    return centre, gram / total - np.outer(centre, centre)


def safe_sd(cov):
    """Standard deviations from a covariance, with 1 where a column is constant."""
    sd = np.sqrt(np.maximum(np.diag(cov), 0.0))
    return np.where(sd > 0, sd, 1.0)


def standardise(X, weights=None):
    """Weighted column means and standard deviations used to scale the design internally."""
    if X.shape[1] == 0 or len(X) == 0:
        return np.zeros(X.shape[1]), np.ones(X.shape[1])
    shift = X[0]
    centre, cov = shifted_moments(X - shift, weights)
    return shift + centre, safe_sd(cov)


def user_scale_matrix(layout, mean, sd):
    """``A`` with ``params_user = A @ params_internal``.

    Location columns (parallel and per-threshold) are centred and scaled internally, scale
    columns only scaled, so the map is linear: an internal effect ``b`` of a column with mean
    ``c`` and spread ``s`` is ``b / s`` on the user's scale, and each threshold it acts on
    gains ``c b / s``.

    Parameters
    ----------
    layout : ModelLayout
    mean, sd : ndarray, shape (len(layout.columns),)
    """
    m = layout.m
    A = np.eye(layout.n_params)
    _, bb, gb, zb = layout.blocks()
    for k, i in enumerate(layout.location):
        A[bb.start + k, bb.start + k] = 1.0 / sd[i]
        A[:m, bb.start + k] = mean[i] / sd[i]
    for q, i in enumerate(layout.nonparallel):
        for j in range(m):
            c = gb.start + q * m + j
            A[c, c] = 1.0 / sd[i]
            A[j, c] = mean[i] / sd[i]
    for k, i in enumerate(layout.scale):
        A[zb.start + k, zb.start + k] = 1.0 / sd[i]
    return A


def covariance_on_user_scale(hess, A):
    """``A (-H)^{-1} A'``; all ``nan`` when ``-H`` is singular."""
    try:
        cov_s = np.linalg.inv(-hess)
    except np.linalg.LinAlgError:
        return np.full_like(hess, np.nan)
    return A @ cov_s @ A.T


# ---- separation -------------------------------------------------------------------------------
def separated_columns(low, high, names):
    """Columns whose MLE does not exist because their non-zero rows sit in one end category.

    If a column is never negative and its positive rows (with positive weight) are all in the
    lowest or all in the highest category, moving its effect towards minus or plus infinity
    raises the likelihood of those rows and leaves every other row unchanged, so the
    likelihood has no maximum (complete separation of that column; e.g. a factor level
    observed only in an end category, even on a single row).  The same holds for a column
    that is never positive.

    Parameters
    ----------
    low, high : ndarray, shape (J, p)
        Per category, the smallest and largest value of each column over its rows with
        positive weight (``+inf`` / ``-inf`` for a category without such rows).
    names : sequence of str
        Column names.

    Returns
    -------
    list of str
        ``"<column> (all its rows are in the lowest category)"`` style descriptions.
    """
    out = []
    J = len(low)
    if J < 2:
        return out
    for c, name in enumerate(names):
        for sign, lo, hi in ((1.0, low[:, c], high[:, c]), (-1.0, -high[:, c], -low[:, c])):
            if not np.all(lo >= 0):  # the column takes both signs (after flipping)
                continue
            nonzero = hi > 0
            if nonzero.any() and (nonzero.sum() == 1) and (nonzero[0] or nonzero[-1]):
                end = "lowest" if nonzero[0] else "highest"
                out.append(f"{name} (its non-zero rows are all in the {end} category)")
                break
    return out


def _runaway(params, hess, m, names, condition):
    """Estimates huge on the internal (standardised) scale and not determined (|z| < 2).

    Where ``-H`` is numerically singular (its ``condition`` number beyond :data:`ILL_CONDITIONED`)
    its inverse says nothing about the standard errors, so every huge estimate is flagged:
    a scale effect running to minus infinity (rows of one category fitted with a vanishing
    spread) leaves such a Hessian with a tiny apparent standard error.
    """
    singular = not condition < ILL_CONDITIONED  # ``inf`` when -H is not positive definite
    with np.errstate(invalid="ignore"):
        se = np.sqrt(np.diag(np.linalg.pinv(-hess)))
    return [n for n, v, s in zip(names[m:], params[m:], se[m:])
            if abs(v) > SEPARATION_CUTOFF and (singular or not abs(v) > 2 * s)]


def separation_message(flagged):
    """Warning text for estimates that run away (``None`` when nothing is flagged).

    ``flagged`` lists columns known from the data to be separated (see
    :func:`separated_columns`, which works on the user's scale, where a rare factor level is
    caught even when its standardised estimate stays small) and estimates beyond
    :data:`SEPARATION_CUTOFF` on the internal scale with ``|z| < 2`` (the sign of
    quasi-complete separation of a combination of columns).
    """
    if not flagged:
        return None
    return (f"estimates for {', '.join(flagged)} run towards infinity (complete or quasi-complete "
            "separation): the data do not bound them")


# ---- the one maximiser ---------------------------------------------------------------------------
def _start(design, link, m):
    if hasattr(design, "start"):
        return np.asarray(design.start(link), float)
    return np.concatenate([closed_form_thresholds(link, design.counts()), np.zeros(design.n_params - m)])


def _feasibility(design, m):
    if hasattr(design, "feasible"):
        return design.feasible
    return lambda x: thresholds_increasing(x, m)


def _weight_unit(design, counts):
    """Mean weight of the rows used (1 without weights): the objective is divided by it."""
    rows = float(getattr(design, "rows_used", counts.sum()))
    total = float(counts.sum())
    return total / rows if rows > 0 and total > 0 else 1.0


def _unscaled(outcome, unit):
    return NewtonOutcome(outcome.params, outcome.loglik * unit, None if outcome.grad is None else outcome.grad * unit,
                         None if outcome.hess is None else outcome.hess * unit, outcome.iterations,
                         outcome.decrement, outcome.status)


#: Decrement above which the next point's Hessian may come from a sample of the rows (see
#: ``rough_above`` of :func:`~ordwidgets.core.optimize.newton_maximize`): the point after it
#: is then still far enough from the maximum for two exact steps to follow.
ROUGH_ABOVE = 10.0


def _newton(design, link, start, feasible, unit, max_iter, tol, callback):
    """Newton on ``loglik / unit``: the decrement test then does not depend on the weight scale.

    Designs with a ``hessian_sample`` above 1 are asked for sampled Hessians far from the
    maximum (every such row's terms counted ``hessian_sample`` times).
    """

    loglik = getattr(design, "loglik", None)
    sample = int(getattr(design, "hessian_sample", 1))

    def evaluate(x, order, rough=False):
        if order == 0 and loglik is not None:
            return loglik(link, x) / unit, None, None
        extra = {"hessian_sample": sample} if rough and sample > 1 else {}
        ll, g, H = design.sums(link, x, order=order, **extra)
        return ll / unit, None if g is None else g / unit, None if H is None else H / unit

    report = None if callback is None else (lambda it, x, ll, g: callback(it, x, ll * unit, g * unit))
    return newton_maximize(evaluate, start, feasible=feasible, max_iter=max_iter, tol=tol, callback=report,
                           rough_above=ROUGH_ABOVE if sample > 1 else None)


def _restart_from_probit(first, design, link, feasible, m, unit, max_iter, tol):
    """Cauchit guard: restart from the probit optimum and keep the higher maximum."""
    probit = get_link("probit")
    start = _start(design, probit, m)
    pre = _newton(design, probit, start, feasible, unit, max_iter, tol, None)
    second = _newton(design, link, pre.params, feasible, unit, max_iter, tol, None)
    best = second if second.loglik > first.loglik + 1e-9 else first
    if abs(second.loglik - first.loglik) > 1e-6 * max(1.0, abs(first.loglik)):
        warnings.warn(
            "cauchit: two starting points reached different maxima "
            f"({first.loglik * unit:.6f} and {second.loglik * unit:.6f}); the higher one is reported",
            UserWarning, stacklevel=4,
        )
    return best


def maximise(design, link, *, to_user=None, names=None, separated=(), max_iter=100, tol=1e-12,
             callback=None, what="fit", warn=True, explain_failure=None):
    """Maximise the likelihood of ``design`` and describe the answer on the user's scale.

    Parameters
    ----------
    design : object following the design protocol (module docstring)
    link : Link or str
    to_user : ndarray, shape (n_params, n_params), optional
        ``params_user = to_user @ params_internal`` (identity by default).
    names : sequence of str, optional
        Parameter names (thresholds first) for messages.
    separated : sequence of str
        Columns known from the data to be separated (:func:`separated_columns`).
    max_iter, tol, callback
        As in :func:`ordwidgets.core.fitting.fit`; ``tol`` applies to the Newton decrement
        of the log-likelihood divided by the mean weight of the rows used.
    what : str
        What is fitted, for messages (the formula).
    warn : bool
        Warn (``SeparationWarning``, ``ConvergenceWarning``) when the fit is not trusted.
    explain_failure : callable, optional
        ``explain_failure(outcome)`` is called before the convergence warning of a failed
        fit and may raise a more specific error (e.g. crossing cumulative probabilities).

    Returns
    -------
    EngineFit
    """
    lk = get_link(link)
    counts = np.asarray(design.counts(), float)
    m = len(counts) - 1
    names = list(names) if names is not None else [f"parameter {i + 1}" for i in range(design.n_params)]
    feasible = _feasibility(design, m)
    unit = _weight_unit(design, counts)
    outcome = _newton(design, lk, _start(design, lk, m), feasible, unit, max_iter, tol, callback)
    if lk.name == "cauchit" and design.n_params > m:
        outcome = _restart_from_probit(outcome, design, lk, feasible, m, unit, max_iter, tol)
    converged, message, condition = check_convergence(outcome, what=what, warn=False)
    outcome = _unscaled(outcome, unit)
    runaway = _runaway(outcome.params, outcome.hess, m, names, condition) if np.all(np.isfinite(outcome.hess)) else []
    if not converged and explain_failure is not None and (not warn or not runaway):
        explain_failure(outcome)  # e.g. crossing cuts: a more specific refusal than separation
    sep_message = separation_message(list(separated) + [n for n in runaway if n not in " ".join(separated)])
    if sep_message:
        converged, message = False, sep_message
        if warn:
            warnings.warn(sep_message, SeparationWarning, stacklevel=3)
    elif not converged and warn:
        check_convergence(outcome, what=what, warn=True)
    A = np.eye(design.n_params) if to_user is None else to_user
    grad_user = np.linalg.solve(A.T, outcome.grad) if outcome.grad is not None else np.full(design.n_params, np.nan)
    return EngineFit(params=A @ outcome.params, cov=covariance_on_user_scale(outcome.hess, A),
                     loglik=float(outcome.loglik), converged=converged, message=message,
                     curvature_condition=condition, largest_score=float(np.max(np.abs(grad_user), initial=0.0)),
                     iterations=outcome.iterations, n_obs=float(counts.sum()), internal=outcome)

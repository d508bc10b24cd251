"""``fit``: validate, start, iterate, unpack.

The public entry point only prepares the data, builds the closed-form start (the
thresholds-only maximum-likelihood solution ``theta_j = F^{-1}(cumulative proportion)``),
runs the safeguarded Newton iteration of :mod:`ordwidgets.core.optimize` on standardised
columns and maps the answer back to the user's scale.
"""
from __future__ import annotations

import warnings

import numpy as np

from .dask_fit import is_dask_frame
from .design import check_collinear_moments, prepare, threshold_labels
from .exceptions import OrdinalDataError, SeparationWarning
from .links import get_link
from .objective import SortedDesign, sort_by_category
from .optimize import check_convergence, newton_maximize
from .results import FitResult, TrainingData

__all__ = ["fit", "closed_form_thresholds", "standardise", "thresholds_increasing"]


def closed_form_thresholds(link, counts):
    """Thresholds-only MLE: ``theta_j = F^{-1}(sum_{k<=j} n_k / n)`` (exact, no iteration)."""
    cum = np.cumsum(counts)[:-1] / np.sum(counts)
    return get_link(link).ppf(cum)


def thresholds_increasing(params, m):
    """Feasibility rule of the model: finite, strictly increasing thresholds."""
    theta = params[:m]
    return bool(np.all(np.isfinite(params)) and np.all(np.diff(theta) > 0))


def _shifted_moments(Xs, weights=None):
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


def _safe_sd(cov):
    sd = np.sqrt(np.maximum(np.diag(cov), 0.0))
    return np.where(sd > 0, sd, 1.0)


def standardise(X, weights=None):
    """Weighted column means and standard deviations used to scale the design internally."""
    if X.shape[1] == 0 or len(X) == 0:
        return np.zeros(X.shape[1]), np.ones(X.shape[1])
    shift = X[0]
    centre, cov = _shifted_moments(X - shift, weights)
    return shift + centre, _safe_sd(cov)


def sorted_standardised(X, order, weights=None):
    """Rows of ``X`` in ``order``, centred and scaled, with the weighted moments.

    One gather into a column-major copy and one Gram product give the means, the covariance
    (for the collinearity check) and the scaling; columns are first shifted by their first
    value so that the moments do not cancel for columns far from zero.

    Returns
    -------
    Xs : ndarray, shape (n, p), Fortran order
    mean, sd : ndarray, shape (p,)
    cov : ndarray, shape (p, p)
        Weighted population covariance of the columns.
    """
    n, p = X.shape
    Xs = np.empty((n, p), order="F")
    for j in range(p):
        np.take(X[:, j], order, out=Xs[:, j])
    if p == 0 or n == 0:
        return Xs, np.zeros(p), np.ones(p), np.zeros((p, p))
    shift = Xs[0].copy()
    Xs -= shift
    centre, cov = _shifted_moments(Xs, weights)
    sd = _safe_sd(cov)
    Xs -= centre
    Xs /= sd
    return Xs, shift + centre, sd, cov


def _to_user_scale(m, mean, sd):
    """Matrix ``A`` with ``params_user = A @ params_internal`` for centred, scaled columns."""
    p = len(mean)
    A = np.eye(m + p)
    A[m:, m:] = np.diag(1.0 / sd)
    A[:m, m:] = (mean / sd)[None, :]
    return A


def fit(formula, data, *, link="logit", weights=None, levels=None, max_iter=100, tol=1e-10,
        keep_data=True, callback=None, nonparallel=None, scale_by=None):
    """Fit a cumulative link model by maximum likelihood.

    ``P(Y <= j | x) = F(theta_j - x'beta)``, ``j = 1..J-1``, with strictly increasing
    thresholds and latent form ``y* = x'beta + epsilon`` (McCullagh 1980).  A positive
    effect moves probability towards higher categories.

    Parameters
    ----------
    formula : str
        ``"response ~ predictors"`` in Wilkinson notation (formulaic); no intercept is fitted
        (the thresholds play its role).
    data : pandas.DataFrame or dask.dataframe.DataFrame
        A Dask frame is fitted partition by partition (needs ``pip install 'ordwidgets[dask]'``).
    link : {"logit", "probit", "cloglog", "loglog", "cauchit"}
    weights : str or array_like, optional
        Non-negative frequency weights (column name or array).
    levels : sequence, optional
        Order of the response levels when the column is not an ordered Categorical.
    max_iter : int
        Maximum Newton steps.
    tol : float
        Convergence tolerance on the Newton decrement (log-likelihood units).
    keep_data : bool
        Keep the design in the result (needed for residuals, widgets and ``loglik_at``).
    callback : callable, optional
        ``callback(iteration, params, loglik, grad)`` after each Newton step.
    nonparallel : list of str, optional
        Predictors (variables, terms or design columns) that get a separate effect at each
        threshold, ``P(Y <= j) = F(theta_j - x'beta - w'gamma_j)`` (partial proportional
        odds, Peterson & Harrell 1990); named ``"<column> @ <threshold>"``.
    scale_by : list of str, optional
        Predictors of the latent scale, ``P(Y <= j) = F((theta_j - x'beta) / exp(z'zeta))``
        (location-scale model, McCullagh 1980); named ``"scale: <column>"``.  Data columns
        that are not in the formula enter the scale only.  See
        :mod:`ordwidgets.core.extfit`.

    Returns
    -------
    FitResult
        For a Dask DataFrame see :func:`ordwidgets.core.dask_fit.fit_dask` (same model,
        sums reduced over partitions; the result keeps a sample of rows for display).
    """
    if is_dask_frame(data):
        from .dask_fit import fit_dask

        return fit_dask(formula, data, link=link, weights=weights, levels=levels, max_iter=max_iter, tol=tol,
                        keep_data=keep_data, callback=callback, nonparallel=nonparallel, scale_by=scale_by)
    if nonparallel or scale_by:
        from .extfit import fit_extended

        return fit_extended(formula, data, link=link, weights=weights, levels=levels, max_iter=max_iter,
                            tol=tol, keep_data=keep_data, callback=callback, nonparallel=nonparallel,
                            scale_by=scale_by)
    lk = get_link(link)
    prep = prepare(formula, data, weights=weights, levels=levels)
    J, p = len(prep.levels), prep.X.shape[1]
    m = J - 1
    check_enough_rows(prep.y.shape[0] if prep.weights is None else int(np.count_nonzero(prep.weights)), m + p)
    order, bounds = sort_by_category(prep.y, J)
    w_sorted = None if prep.weights is None else prep.weights[order]
    Xs, mean, sd, cov = sorted_standardised(prep.X, order, w_sorted)
    check_collinear_moments(prep.columns, mean, cov)
    design = SortedDesign(Xs, bounds, w_sorted)
    fitted = _maximise(design, lk, m, max_iter, tol, callback, formula)
    training = TrainingData(prep.X, prep.y, prep.weights, prep.index, frame=prep.frame) if keep_data else None
    return _result(prep, lk, fitted, mean, sd, formula=formula, n_obs=float(design.counts().sum()),
                   n_rows=int(len(prep.y)), training=training, options={"weights": weights, "levels": levels})


def check_enough_rows(used, n_params):
    """Refuse fewer rows (with positive weight) than parameters."""
    if used < n_params:
        raise OrdinalDataError(f"{used} rows for {n_params} parameters: fewer rows than parameters")


def _result(prep, lk, fitted, mean, sd, *, formula, n_obs, n_rows, training, options):
    """Map a Newton outcome on standardised columns back to the user's scale."""
    outcome, converged, message, condition = fitted
    m = len(prep.levels) - 1
    A = _to_user_scale(m, mean, sd)
    params = A @ outcome.params
    cov = _covariance(outcome.hess, A)
    if converged:
        converged, message = _separation_check(outcome.params, outcome.hess, m, prep.columns, message)
    grad_user = np.linalg.solve(A.T, outcome.grad)
    return FitResult(
        link=lk, levels=prep.levels, threshold_names=tuple(threshold_labels(prep.levels)),
        coef_names=prep.columns, params=params, cov=cov, loglik=float(outcome.loglik),
        n_obs=n_obs, n_rows=n_rows, iterations=outcome.iterations,
        converged=converged, message=message, largest_score=float(np.max(np.abs(grad_user), initial=0.0)),
        curvature_condition=condition, formula=formula, response=prep.response, model_spec=prep.model_spec,
        notes=tuple(prep.notes), training=training, options=options,
    )


def _maximise(design, lk, m, max_iter, tol, callback, what):
    start = np.concatenate([closed_form_thresholds(lk, design.counts()), np.zeros(design.n_params - m)])

    def evaluate(x, order):
        return design.sums(lk, x, order=order)

    def feasible(x):
        return thresholds_increasing(x, m)

    outcome = newton_maximize(evaluate, start, feasible=feasible, max_iter=max_iter, tol=tol, callback=callback)
    if lk.name == "cauchit" and design.n_params > m:
        outcome = _second_start(outcome, design, evaluate, feasible, m, max_iter, tol)
    converged, message, condition = check_convergence(outcome, what=what)
    return outcome, converged, message, condition


def _second_start(first, design, evaluate, feasible, m, max_iter, tol):
    """Cauchit guard: restart from the probit optimum and keep the higher maximum."""
    probit = get_link("probit")
    start = np.concatenate([closed_form_thresholds(probit, design.counts()), np.zeros(design.n_params - m)])
    pre = newton_maximize(lambda x, o: design.sums(probit, x, order=o), start, feasible=feasible, max_iter=max_iter, tol=tol)
    second = newton_maximize(evaluate, pre.params, feasible=feasible, max_iter=max_iter, tol=tol)
    best = second if second.loglik > first.loglik + 1e-9 else first
    if abs(second.loglik - first.loglik) > 1e-6 * max(1.0, abs(first.loglik)):
        warnings.warn(
            "cauchit: two starting points reached different maxima "
            f"({first.loglik:.6f} and {second.loglik:.6f}); the higher one is reported",
            UserWarning, stacklevel=4,
        )
    return best


def _covariance(hess, A):
    try:
        cov_s = np.linalg.inv(-hess)
    except np.linalg.LinAlgError:
        return np.full_like(hess, np.nan)
    return A @ cov_s @ A.T


def _separation_check(params_s, hess, m, columns, message):
    """Flag estimates that ran away: huge on the standardised scale and not determined.

    Complete or quasi-complete separation drives an estimate to infinity while its standard
    error grows even faster; a standardised effect beyond 8 (a one-SD change moving the
    latent scale by eight error units) with |z| < 2 is taken as that sign (common practice,
    no source for the exact cut-offs).
    """
    with np.errstate(invalid="ignore"):
        se = np.sqrt(np.diag(np.linalg.pinv(-hess)))
    names = [f"threshold {i + 1}" for i in range(m)] + list(columns)
    flagged = [n for n, v, s in zip(names, params_s, se) if abs(v) > 8 and not abs(v) > 2 * s]
    if not flagged:
        return True, message
    msg = (f"estimates for {', '.join(flagged)} run towards infinity (complete or quasi-complete "
           "separation): the data do not bound them")
    warnings.warn(msg, SeparationWarning, stacklevel=3)
    return False, msg

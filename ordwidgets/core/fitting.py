"""``fit``: the one place a :class:`~ordwidgets.core.results.FitResult` is built.

Every model goes the same way: the data are prepared into a design object (in memory:
:class:`~ordwidgets.core.sorted_design.SortedDesign`, rows sorted by category on standardised
columns; on Dask frames: :class:`~ordwidgets.core.dask_fit.PartitionedDesign`), handed to
the engine's :func:`~ordwidgets.core.engine.maximise` and the answer is unpacked into a
result.  Plain, extended (``nonparallel=``, ``scale_by=``) and partitioned fits differ only
in the design they build.
"""
from __future__ import annotations

import numpy as np

from .arguments import FIT_RULES, check_arguments
from .dask_fit import DEFAULT_SAMPLE_ROWS, is_dask_frame, partitioned_problem
from .design import check_collinear_moments, prepare, threshold_labels
from .engine import PreparedFit, check_enough_rows, maximise, user_scale_matrix
from .extended_fit import extended_problem
from .layout import parallel_layout
from .links import get_link
from .objective import sort_by_category, sorted_standardised
from .sorted_design import SortedDesign
from .results import FitResult, TrainingData
from .row_digest import rows_digest

__all__ = ["fit", "fit_dask"]


def fit(formula, data, *, link="logit", weights=None, levels=None, max_iter=100, tol=1e-12,
        keep_data=True, callback=None, nonparallel=None, scale_by=None, random_intercepts=None,
        quadrature=None, cluster=None, weight_kind="frequency"):
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
        Convergence tolerance on the Newton decrement of the log-likelihood divided by the
        mean weight (so multiplying all weights by a constant changes nothing).
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
        :mod:`ordwidgets.core.extended_fit`.

    random_intercepts, quadrature
        Grouping columns with a normal random intercept each, and the quadrature points;
        see :func:`ordwidgets.core.random_intercepts.fit_random_intercepts`.
    cluster : str or array_like, optional
        Cluster column: cluster-robust (sandwich) covariance, see
        :mod:`ordwidgets.core.sandwich`.  Likelihood-ratio tests and profile intervals
        assume independent rows and would ignore it: ``compare`` and profile intervals
        refuse such fits, term tests give Wald tests only, proportional-odds tests warn.
    weight_kind : {"frequency", "sampling"}
        What ``weights`` are: counts of identical rows (model-based covariance) or survey
        weights (same estimates, sandwich covariance that ignores the weights' scale; the
        likelihood-ratio tests and profile intervals are treated as with ``cluster``).

    Returns
    -------
    FitResult
        For a Dask DataFrame see :func:`fit_dask` (same model,
        sums reduced over partitions; the result keeps a sample of rows for display).
    """
    check_arguments("fit", FIT_RULES, locals())
    if random_intercepts is not None or quadrature is not None or cluster is not None or weight_kind != "frequency":
        from .random_intercepts import fit_with_options

        return fit_with_options(fit, formula, data, link=link, weights=weights, levels=levels, max_iter=max_iter,
                                tol=tol, keep_data=keep_data, callback=callback, nonparallel=nonparallel,
                                scale_by=scale_by, random_intercepts=random_intercepts, quadrature=quadrature,
                                cluster=cluster, weight_kind=weight_kind)
    if is_dask_frame(data):
        return fit_dask(formula, data, link=link, weights=weights, levels=levels, max_iter=max_iter, tol=tol,
                        keep_data=keep_data, callback=callback, nonparallel=nonparallel, scale_by=scale_by)
    if nonparallel or scale_by:
        problem = extended_problem(formula, data, weights=weights, levels=levels, nonparallel=nonparallel,
                                   scale_by=scale_by)
    else:
        problem = plain_problem(formula, data, weights=weights, levels=levels)
    return _fit_problem(problem, link, formula=formula, max_iter=max_iter, tol=tol, callback=callback,
                        keep_data=keep_data)


def fit_dask(formula, data, *, link="logit", weights=None, levels=None, max_iter=100, tol=1e-12,
             keep_data=True, callback=None, sample_rows=DEFAULT_SAMPLE_ROWS, seed=0, progress="auto",
             cache=False, nonparallel=None, scale_by=None):
    """Fit a cumulative link model to a Dask DataFrame (same model and result as :func:`fit`).

    Parameters
    ----------
    formula, link, weights, levels, max_iter, tol, callback, nonparallel, scale_by
        As in :func:`fit`; ``weights`` must name a column.
    data : dask.dataframe.DataFrame
    keep_data : bool
        Keep a sample of rows in ``result.training`` (for residuals and display).
    sample_rows : int
        Size of that sample: uniform without replacement, reproducible for the same data,
        partitioning and ``seed``.  ``predict()``, ``error_bounds()`` and ``loglik_at()``
        without new data refer to the sample; ``loglik``, estimates and standard errors to
        all rows.
    seed : int
        Seed of the sample.
    progress : {"auto", True, False} or callable
        Status line with the stage and each Newton step (log-likelihood, largest score):
        ``"auto"`` in notebooks only; see :func:`ordwidgets.core.progress.progress_for`.
    cache : bool
        Keep every partition's prepared design (standardised float columns sorted by
        category, 8 bytes per row and column) in memory, on the workers with
        ``dask.distributed``, instead of reading and encoding the rows again at every Newton
        step: several times faster, but memory then grows with the number of rows.

    Returns
    -------
    FitResult
        ``options`` records ``engine="dask"``, the partition count and the sample settings;
        ``training.sampled_from`` the number of rows the sample was drawn from.

    Raises
    ------
    KeyboardInterrupt
        Passed on unchanged (running cluster tasks are cancelled; nothing is left half-built).
    """
    problem, show = partitioned_problem(formula, data, weights=weights, levels=levels, callback=callback,
                                        sample_rows=sample_rows if keep_data else 0, seed=seed,
                                        progress=progress, cache=cache, nonparallel=nonparallel,
                                        scale_by=scale_by)
    try:
        result = _fit_problem(problem, link, formula=formula, max_iter=max_iter, tol=tol, callback=show,
                              keep_data=keep_data)
    except KeyboardInterrupt:
        show.show("interrupted; no result was made")
        raise
    show.show(f"done: {result.message}, log-likelihood {result.loglik:.8g}")
    return result


def plain_problem(formula, data, *, weights=None, levels=None):
    """Prepare a parallel fit: rows sorted by category on standardised columns."""
    prep = prepare(formula, data, weights=weights, levels=levels)
    layout = parallel_layout(prep.columns, threshold_labels(prep.levels))
    check_enough_rows(prep.y.shape[0] if prep.weights is None else int(np.count_nonzero(prep.weights)),
                      layout.n_params)
    order, bounds = sort_by_category(prep.y, len(prep.levels))
    w_sorted = None if prep.weights is None else prep.weights[order]
    sorted_cols = sorted_standardised(prep.X, order, bounds, w_sorted)
    check_collinear_moments(prep.columns, sorted_cols.mean, sorted_cols.cov)
    design = SortedDesign(sorted_cols.X, bounds, w_sorted, moments=sorted_cols.moments)
    return PreparedFit(design=design, layout=layout, to_user=user_scale_matrix(layout, sorted_cols.mean, sorted_cols.sd),
                       prep=prep, separated=tuple(sorted_cols.separated(prep.columns)),
                       options={"weights": weights, "levels": levels})


def _fit_problem(problem, link, *, formula, max_iter, tol, callback, keep_data):
    """Maximise a prepared problem and build its result (the one place a FitResult is made)."""
    lk = get_link(link)
    layout = problem.layout
    fitted = maximise(problem.design, lk, to_user=problem.to_user, names=layout.param_names(),
                      separated=problem.separated, max_iter=max_iter, tol=tol, callback=callback, what=formula,
                      explain_failure=problem.explain_failure)
    options = dict(problem.options)
    if problem.after is not None:
        options.update(problem.after(fitted))
    prep = problem.prep
    training = problem.training
    if prep is not None and keep_data:
        training = TrainingData(prep.X, prep.y, prep.weights, prep.index, frame=prep.frame)
    meta = prep if prep is not None else problem.meta
    return FitResult(
        link=lk, levels=meta.levels, threshold_names=layout.thresholds,
        coef_names=tuple(layout.param_names()[layout.m:]), params=fitted.params, cov=fitted.cov,
        loglik=fitted.loglik, n_obs=fitted.n_obs, n_rows=int(problem.n_rows if prep is None else len(prep.y)),
        iterations=fitted.iterations, converged=fitted.converged, message=fitted.message,
        largest_score=fitted.largest_score, curvature_condition=fitted.curvature_condition, formula=formula,
        response=meta.response, model_spec=meta.model_spec, notes=tuple(meta.notes),
        training=training if keep_data else None, options=options, layout=layout,
        row_digest=rows_digest(prep.index, prep.y, prep.weights) if prep is not None and not keep_data else None,
    )

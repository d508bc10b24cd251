"""Fitting cumulative link models with a random intercept per group, and the fit options
that change the covariance (clusters, sampling weights).

``P(Y <= j | x, u) = F(theta_j - x'beta - u_g)``, ``u_g ~ N(0, sigma^2)`` (Hedeker &
Gibbons 1994).  The marginal likelihood is integrated by adaptive Gauss-Hermite quadrature
(Pinheiro & Bates 1995; :mod:`ordwidgets.core.grouped_likelihood`).  The model is handed to
the one engine (:func:`ordwidgets.core.engine.maximise`) as a *design* with the same
protocol as the plain and extended models (``n_params``, ``counts()``, ``sums(link, params,
order)``, ``feasible``, ``start``), on standardised columns.  The Newton steps use an
approximate Hessian (see each design).  The covariance is the inverse of the negative
observed Hessian at the optimum: for one grouping column with at least 3 points one
analytic fixed-node Hessian with enough points (:meth:`RandomInterceptDesign.observed_hessian`),
otherwise the exact gradient differenced; the fit counts as converged only when that
Hessian is negative definite too.  The one-column fit starts from the plain model on the
same rows (:meth:`RandomInterceptDesign.start`) and, by default, chooses its number of
quadrature points per data set (:func:`~ordwidgets.core.grouped_choices.choose_points`).
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from scipy import linalg

from .design import check_response_not_used, prepare, split_formula, threshold_labels
from .engine import (check_enough_rows, closed_form_thresholds, covariance_on_user_scale, maximise, standardise,
                     user_scale_matrix)
from .exceptions import DataWarning, OrdinalDataError
from .crossed_likelihood import MAX_GROUPS, CrossedRows, laplace_sums
from .grouped_choices import attenuation, choose_covariance_points, choose_points, sd_start
from .grouped_likelihood import GroupedRows, differenced_hessian, marginal_sums, quadrature_rule
from .links import get_link
from .layout import parallel_layout
from .optimize import NewtonOutcome, check_convergence, newton_maximize
from .sandwich import check_weight_kind, with_robust_covariance
from .sorted_design import SortedDesign

__all__ = ["RandomInterceptDesign", "LaplaceDesign", "fit_with_options", "fit_random_intercepts", "grouping_columns"]


class _GroupedDesign:
    """What the one-column and several-column designs share (protocol parts)."""

    rows = None

    @property
    def n_params(self) -> int:
        return self.rows.n_params

    def counts(self):
        return self.rows.counts()

    def feasible(self, params):
        m = self.rows.n_levels - 1
        return bool(np.all(np.isfinite(params)) and np.all(np.diff(params[:m]) > 0))

    def hessian(self, link, params):
        """Observed information's negative: central differences of the exact gradient."""
        return differenced_hessian(lambda x: self.evaluate(link, x, order=1).grad, params)

    def observed_hessian(self, link, params, last=None):
        """Hessian for the covariance at the optimum: :meth:`hessian` (the Newton metric is
        not the Hessian of this approximation)."""
        return self.hessian(link, params)

    def start(self, link, sigma=1.0):
        """Thresholds and effects maximised at every ``sigma_c = 1``, then those SDs.

        ``sigma = 0`` is a stationary point (the likelihood is even in each SD), so the
        search starts away from it; maximising the rest first (from the closed-form
        thresholds and zero effects) keeps the first full Newton step from jumping there.
        """
        m, C = self.rows.n_levels - 1, self.n_sds
        rest = np.concatenate([closed_form_thresholds(link, self.counts()), np.zeros(self.n_params - m - C)])
        k, sds = len(rest), np.full(C, sigma)

        def evaluate(v, order):
            ll, g, H = self.sums(link, np.append(v, sds), order=order)
            return ll, None if g is None else g[:k], None if H is None else H[:k, :k]

        out = newton_maximize(evaluate, rest, feasible=lambda v: self.feasible(np.append(v, sds)), max_iter=50,
                              tol=1e-6)
        return np.append(out.params if np.all(np.isfinite(out.params)) else rest, sds)


class RandomInterceptDesign(_GroupedDesign):
    """Design protocol object of the one-grouping-column random-intercept model.

    Parameters are ``[theta (J-1), beta (p), sigma]`` on standardised columns.  The modes
    of the last evaluation are kept to warm-start the next one (they change the work, not
    the result: each evaluation iterates its modes to 1e-10).  With ``points=None`` the
    number of quadrature points is chosen at the start values
    (:func:`~ordwidgets.core.grouped_choices.choose_points`) and checked again at the
    optimum by :func:`fit_random_intercepts`.
    """

    n_sds = 1

    def __init__(self, rows: GroupedRows, points: int | None):
        self.rows, self.points, self.auto = rows, points, points is None
        self._modes, self._warm, self._last = None, None, None

    def start(self, link):
        """Start values from the plain model on the same rows.

        The plain fit (the one engine on the rows without the random intercept) estimates
        the population-averaged effects; the SD starts from the spread of the groups'
        one-step effects (:func:`~ordwidgets.core.grouped_choices.sd_start`), and
        thresholds and effects are scaled up by the attenuation factor of that SD
        (:func:`~ordwidgets.core.grouped_choices.attenuation`).  After a change of the
        number of points, the previous optimum is the start.
        """
        link = get_link(link)
        if self._warm is not None and self._warm[0] == link.name:
            return self._warm[1].copy()
        rows = self.rows
        plain = maximise(SortedDesign(np.asfortranarray(rows.X), rows.bounds, rows.weights), link, warn=False,
                         tol=1e-6, what="plain start of the random-intercept fit")  # a start: loose tolerance
        if not np.all(np.isfinite(plain.params)):
            return super().start(link)
        sigma = sd_start(rows, link, plain.params)
        params = np.append(plain.params * attenuation(link, sigma), sigma)
        if self.points is None:
            self.points = choose_points(rows, link, params).points
        return params

    def evaluate(self, link, params, *, order=2):
        """The full :class:`~ordwidgets.core.grouped_likelihood.MarginalSums`."""
        out = marginal_sums(self.rows, link, params, points=self.points, order=order, start_modes=self._modes)
        if np.all(np.isfinite(out.modes)):
            self._modes = out.modes
            self._last = (get_link(link).name, np.array(params, float), out)
        return out

    def sums(self, link, params, *, order=2):
        """Log-likelihood, exact gradient and the Newton steps' Hessian.

        With fewer than 3 points (the Laplace approximation) the fixed-node Hessian misses
        the curvature's own dependence on the parameters and makes Newton crawl; the steps
        then use the 5-point fixed-node Hessian (a metric only: value and gradient stay
        those of the requested approximation).
        """
        out = self.evaluate(link, params, order=min(order, 1) if self.points < 3 else order)
        hess = out.hess
        if order >= 2 and self.points < 3:
            hess = marginal_sums(self.rows, link, params, points=5, order=2, start_modes=out.modes).hess
        return out.loglik, out.grad, hess

    def observed_hessian(self, link, params, last=None):
        """Hessian for the covariance at the optimum ``params``: at most one analytic evaluation.

        From 3 points on, the fixed-node Hessian (module docstring of
        :mod:`~ordwidgets.core.grouped_likelihood`) with the points of
        :func:`~ordwidgets.core.grouped_choices.choose_covariance_points`; when that is the
        fit's own number, ``last`` (the last Newton step's Hessian, at ``params``) is used.
        Below 3 points the exact gradient is differenced.
        """
        if self.points < 3:
            return self.hessian(link, params)
        q = choose_covariance_points(self.rows, link, params, self.points)
        if q == self.points and last is not None:
            return last
        return marginal_sums(self.rows, link, params, points=q, order=2, start_modes=self._modes).hess

    def conditional_effects(self, link, params):
        """Per grouping column: conditional modes of ``z`` and their (Laplace) SDs (from the
        last evaluation when it was at ``params``)."""
        last = getattr(self, "_last", None)
        if last is not None and last[0] == get_link(link).name and np.array_equal(last[1], params):
            out = last[2]
        else:
            out = self.evaluate(link, params, order=0)
        return [(out.modes, 1.0 / np.sqrt(out.curvature))]


class LaplaceDesign(_GroupedDesign):
    """Design protocol object for several grouping columns (Laplace approximation).

    Parameters are ``[theta, beta, sigma_1..sigma_C]``; the Newton steps' Hessian is the
    Schur-complement metric of :func:`~ordwidgets.core.crossed_likelihood.laplace_sums`.
    """

    points = 1

    def __init__(self, rows: CrossedRows):
        self.rows = rows
        self.n_sds = rows.n_columns
        self._modes = None

    def evaluate(self, link, params, *, order=1):
        out = laplace_sums(self.rows, link, params, order=order, start_modes=self._modes)
        if np.all(np.isfinite(out.modes)):
            self._modes = out.modes
        return out

    def sums(self, link, params, *, order=2):
        out = self.evaluate(link, params, order=order)
        return out.loglik, out.grad, out.hess

    def conditional_effects(self, link, params):
        out = self.evaluate(link, params, order=1)
        sd = np.sqrt(np.diag(out.inverse))
        offsets, sizes = self.rows.offsets, self.rows.sizes
        return [(out.modes[o:o + k], sd[o:o + k]) for o, k in zip(offsets, sizes)]


def grouping_columns(random_intercepts):
    """Normalise ``random_intercepts=`` to a list of column names."""
    cols = [random_intercepts] if isinstance(random_intercepts, str) else list(random_intercepts)
    if not cols or not all(isinstance(c, str) for c in cols):
        raise OrdinalDataError(f"random_intercepts must name one or more grouping columns, got {random_intercepts!r}")
    if len(set(cols)) != len(cols):
        raise OrdinalDataError(f"random_intercepts names a column twice: {cols}")
    return cols


def _check_points(quadrature):
    """``None`` (choose per data set) or a valid number of points."""
    if quadrature is None:
        return None
    try:
        quadrature_rule(quadrature)
    except ValueError as exc:
        raise OrdinalDataError(str(exc)) from None
    return int(quadrature)


def _is_dask(data):
    return type(data).__module__.split(".")[0] == "dask"


def fit_with_options(plain_fit, formula, data, *, random_intercepts=None, quadrature=None, cluster=None,
                     weight_kind="frequency", keep_data=True, **options):
    """``fit`` with random intercepts, a cluster column or sampling weights.

    ``plain_fit`` is :func:`ordwidgets.core.fitting.fit` (passed in, so this module does
    not import it); ``options`` are its remaining arguments.
    """
    check_weight_kind(weight_kind)
    if random_intercepts is None:
        if quadrature is not None:
            raise OrdinalDataError("quadrature= applies only to fits with random_intercepts=")
        if _is_dask(data):
            raise OrdinalDataError("cluster= and weight_kind='sampling' are not supported for Dask frames yet")
        if weight_kind == "sampling" and options.get("weights") is None:
            raise OrdinalDataError("weight_kind='sampling' needs weights=")
        res = plain_fit(formula, data, keep_data=True, **options)
        res = with_robust_covariance(res, data, cluster=cluster, weight_kind=weight_kind)
        return res if keep_data else _without_training(res)
    for name, value, why in (("cluster", cluster, "cluster-robust"), ("nonparallel", options.get("nonparallel"), ""),
                             ("scale_by", options.get("scale_by"), "")):
        if value:
            raise OrdinalDataError(f"random_intercepts= cannot be combined with {name}= yet")
    if weight_kind == "sampling":
        raise OrdinalDataError("random_intercepts= cannot be combined with weight_kind='sampling' yet")
    if _is_dask(data):
        raise OrdinalDataError("random_intercepts= is not supported for Dask frames yet; fit a pandas frame")
    options.pop("nonparallel", None), options.pop("scale_by", None)
    return fit_random_intercepts(formula, data, groups=grouping_columns(random_intercepts),
                                 quadrature=quadrature, keep_data=keep_data, **options)


def _without_training(res):
    import dataclasses

    return dataclasses.replace(res, training=None)


def _drop_missing_groups(data, cols):
    if not isinstance(data, pd.DataFrame):
        raise OrdinalDataError(f"data must be a pandas DataFrame, got {type(data).__name__}")
    for col in cols:
        if col not in data.columns:
            raise OrdinalDataError(f"grouping column {col!r} is not in the data")
    missing = data[cols].isna().any(axis=1)
    if missing.any():
        warnings.warn(f"{int(missing.sum())} rows dropped: missing value in grouping column(s) "
                      f"{', '.join(repr(c) for c in cols)}", DataWarning, stacklevel=4)
        data = data.loc[~missing]
    return data


#: Fewest groups that identify the SD of a random intercept: one group's intercept is
#: indistinguishable from the thresholds.
MIN_GROUPS = 2
#: Below this many groups the SD is estimated from very few values and a warning says so
#: (five or six levels at least, as recalled from memory of Bolker et al. 2009, Trends Ecol.
#: Evol. 24:127-135).
FEW_GROUPS = 5


def check_group_counts(groups, codes, weights=None):
    """Refuse a grouping column with fewer than :data:`MIN_GROUPS` groups among the fitted
    rows (groups whose rows all have weight zero do not count); warn below :data:`FEW_GROUPS`.

    Parameters
    ----------
    groups : list of str
        Grouping columns.
    codes : list of ndarray
        Group code (``0..k-1``) of each fitted row, one array per column.
    weights : ndarray, optional
        Row weights.

    Raises
    ------
    OrdinalDataError
        Naming the column and its number of groups.
    """
    for col, code in zip(groups, codes):
        mass = np.bincount(code, weights=weights)
        k = int(np.count_nonzero(mass > 0))
        if k < MIN_GROUPS:
            raise OrdinalDataError(f"grouping column {col!r} has {k} group(s) in the rows fitted; the SD of a "
                                   f"random intercept needs at least {MIN_GROUPS} groups (with one group it "
                                   "cannot be told apart from the thresholds): drop it from random_intercepts=")
        if k < FEW_GROUPS:
            warnings.warn(f"grouping column {col!r} has only {k} groups: the SD of its random intercept is "
                          f"estimated from {k} values and is very uncertain; consider it as a fixed factor "
                          f"(C({col})) instead", DataWarning, stacklevel=4)


def _user_matrix(columns, thresholds, mean, sd, n_sds):
    """``A`` with ``params_user = A @ params_internal``: the plain map, SDs not rescaled."""
    return linalg.block_diag(user_scale_matrix(parallel_layout(columns, thresholds), mean, sd), np.eye(n_sds))


def fit_random_intercepts(formula, data, *, groups, link="logit", weights=None, levels=None, quadrature=None,
                          max_iter=100, tol=1e-10, keep_data=True, callback=None):
    """Fit ``P(Y <= j | x, u) = F(theta_j - x'beta - u_g)`` with ``u_g ~ N(0, sigma^2)``.

    Parameters
    ----------
    groups : list of str
        Grouping columns.  One column: adaptive Gauss-Hermite quadrature
        (:mod:`~ordwidgets.core.grouped_likelihood`); several (nested or crossed): the
        Laplace approximation (:mod:`~ordwidgets.core.crossed_likelihood`).
    quadrature : int, optional
        Points per group (1 = Laplace approximation).  Default: the fewest of 3, 5, 7, ...
        whose log-likelihood matches a 50-point rule to 1e-4, estimated on a sample of the
        groups at the start values and checked again at the optimum
        (:func:`~ordwidgets.core.grouped_choices.choose_points`); the number used is in
        ``options["quadrature"]``.
    Other parameters as :func:`ordwidgets.core.fitting.fit`.

    Returns
    -------
    RandomInterceptFit
    """
    from .mixed_results import build_result

    lk = get_link(link)
    check_response_not_used(split_formula(formula)[0], groups, "in random_intercepts=")
    data = _drop_missing_groups(data, groups)
    prep = prepare(formula, data, weights=weights, levels=levels)
    coded = [pd.factorize(prep.frame.loc[prep.index, col], sort=True) for col in groups]
    m, p, C = len(prep.levels) - 1, prep.X.shape[1], len(groups)
    check_enough_rows(len(prep.y) if prep.weights is None else int(np.count_nonzero(prep.weights)), m + p + C)
    mean, sd = standardise(prep.X, prep.weights)
    design = _design_for(groups, coded, (prep.X - mean) / sd, prep, quadrature, lk)  # refuses bad quadrature first
    check_group_counts(groups, [codes for codes, _ in coded], prep.weights)
    names = threshold_labels(prep.levels) + list(prep.columns) + [f"sd({g})" for g in groups]
    A = _user_matrix(prep.columns, threshold_labels(prep.levels), mean, sd, C)
    fitted = _maximise_checking_points(design, lk, to_user=A, names=names, max_iter=max_iter, tol=tol,
                                       callback=callback, what=f"random-intercept fit {formula!r}")
    outcome, cov, converged, message, condition = _observed_information(design, lk, fitted, A, formula)
    return build_result(prep, lk, design, outcome, A @ outcome.params, cov, converged=converged, message=message,
                        condition=condition, largest_score=fitted.largest_score, formula=formula,
                        groups=tuple(groups), group_codes=[c for c, _ in coded],
                        group_labels=[lab for _, lab in coded], keep_data=keep_data,
                        options={"weights": weights, "levels": levels, "quadrature": design.points})


def _maximise_checking_points(design, link, **options):
    """:func:`maximise`; with points chosen per data set, the choice is checked again at the
    optimum and, if more points are needed there, the fit continues from it with them."""
    fitted = maximise(design, link, **options)
    for _ in range(3):
        params = fitted.internal.params
        if not getattr(design, "auto", False) or not np.all(np.isfinite(params)):
            break
        points = choose_points(design.rows, link, params).points
        if points <= design.points:
            break
        design.points, design._warm = points, (link.name, np.array(params, float))
        fitted = maximise(design, link, **options)
    return fitted


def _observed_information(design, link, fitted, A, formula):
    """Covariance from the design's observed Hessian; the fit is trusted only if it is definite."""
    outcome = fitted.internal
    if not np.all(np.isfinite(outcome.params)):
        return outcome, fitted.cov, fitted.converged, fitted.message, fitted.curvature_condition
    H = design.observed_hessian(link, outcome.params, outcome.hess)
    outcome = NewtonOutcome(outcome.params, outcome.loglik, outcome.grad, H, outcome.iterations,
                            outcome.decrement, outcome.status)
    converged, message, condition = fitted.converged, fitted.message, fitted.curvature_condition
    if converged:
        converged, message, condition = check_convergence(outcome, what=f"random-intercept fit {formula!r}")
    return outcome, covariance_on_user_scale(H, A), converged, message, condition


def _design_for(groups, coded, Xs, prep, quadrature, link):
    """One column: adaptive quadrature; several: the Laplace approximation."""
    J = len(prep.levels)
    if len(groups) == 1:
        rows, _ = GroupedRows.from_rows(Xs, prep.y, coded[0][0], J, prep.weights)
        return RandomInterceptDesign(rows, _check_points(quadrature))
    if quadrature not in (None, 1):
        raise OrdinalDataError(f"several grouping columns ({', '.join(groups)}) use the Laplace approximation: "
                               f"leave quadrature= out or set it to 1, got {quadrature!r}")
    total = sum(len(lab) for _, lab in coded)
    if total > MAX_GROUPS:
        raise OrdinalDataError(f"{total:,} groups over {', '.join(groups)}: at most {MAX_GROUPS:,} in all are "
                               "supported with several grouping columns")
    rows, _ = CrossedRows.from_rows(Xs, prep.y, np.column_stack([c for c, _ in coded]), J, prep.weights)
    return LaplaceDesign(rows)

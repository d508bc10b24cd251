"""The immutable result of a cumulative link fit."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from .arguments import PREDICT_RULES, check_arguments
from .effects import most_likely_levels, prediction_intervals, probabilities_at, wald_bounds
from .layout import error_bounds_of, latent_predictor, location_predictor
from .links import Link
from .newdata import new_design
from .probabilities import interval_logprob
from .summary import render_html, render_text, summary_facts, weighting_text

__all__ = ["FitResult", "TrainingData", "SIGN_CONVENTION"]

SIGN_CONVENTION = (
    "Sign convention: P(Y <= j | x) = F(theta_j - x'beta); a positive effect moves "
    "probability towards higher categories."
)


@dataclass(frozen=True, eq=False)
class TrainingData:
    """The rows a result was fitted on (original order, after cleaning).

    For a fit on a Dask frame these are a reproducible sample of the rows fitted:
    ``sampled_from`` is then the number of rows the sample was drawn from (``None`` when
    the rows are all the rows fitted), and everything computed from them without new data
    (``predict()``, ``error_bounds()``, ``loglik_at()``, residuals) refers to the sample.
    ``frame`` is the data frame of those rows (for an in-memory fit the caller's own frame,
    not a copy, when no row was dropped), which lets ``FitState.from_fit(res)`` work without
    ``data=``.
    """

    X: np.ndarray
    y: np.ndarray
    weights: np.ndarray | None
    index: pd.Index
    frame: pd.DataFrame | None = None
    sampled_from: int | None = None

    @property
    def is_sample(self) -> bool:
        return self.sampled_from is not None

    def describe(self) -> str:
        """``"all 1,000 rows"`` or ``"a sample of 20,000 of 5,000,000 rows"`` (for display)."""
        if self.sampled_from is None:
            return f"all {len(self.y):,} rows"
        return f"a sample of {len(self.y):,} of {self.sampled_from:,} rows"


@dataclass(frozen=True, eq=False)
class FitResult:
    """Maximum-likelihood fit of a cumulative link model.

    ``P(Y <= j | x) = F(theta_j - x'beta)`` (McCullagh 1980): positive effects shift
    probability to higher categories.  Instances are immutable; derived quantities are
    methods or properties.  ``eq=False`` keeps identity comparison, so a new fit always
    notifies observers in the widgets.
    """

    link: Link
    levels: tuple
    threshold_names: tuple
    coef_names: tuple
    params: np.ndarray
    cov: np.ndarray
    loglik: float
    n_obs: float
    n_rows: int
    iterations: int
    converged: bool
    message: str
    largest_score: float
    curvature_condition: float
    formula: str
    response: str
    model_spec: object = None
    notes: tuple = ()
    training: TrainingData | None = field(default=None, repr=False)
    options: dict = field(default_factory=dict)
    #: Column layout (:class:`~ordwidgets.core.layout.ModelLayout`): which design columns
    #: are parallel, per-threshold or scale effects (a plain fit: all parallel, no scale).
    layout: object = field(default=None, repr=False)
    #: Digest of the rows used (index, response codes, weights) when ``training`` is not
    #: kept (``keep_data=False``), so that :func:`~ordwidgets.core.inference.compare` can
    #: still check that two fits saw the same rows; ``None`` otherwise.
    row_digest: str | None = field(default=None, repr=False)

    # ---- parameters ------------------------------------------------------------------------
    @property
    def n_thresholds(self) -> int:
        return len(self.threshold_names)

    @property
    def n_params(self) -> int:
        return len(self.params)

    @property
    def n_training(self) -> int:
        """Rows held in ``training``: ``n_rows``, or the display sample of a Dask fit."""
        return self.n_rows if self.training is None else len(self.training.y)

    @property
    def names(self) -> list:
        """Names of all parameters: thresholds first, then effects."""
        return list(self.threshold_names) + list(self.coef_names)

    @property
    def thresholds(self) -> pd.Series:
        """Fitted thresholds ``theta`` (increasing), labelled ``"lower->upper"``."""
        return pd.Series(self.params[: self.n_thresholds], index=list(self.threshold_names), name="threshold")

    @property
    def coefficients(self) -> pd.Series:
        """Fitted effects ``beta``; positive values move mass to higher categories."""
        return pd.Series(self.params[self.n_thresholds :], index=list(self.coef_names), name="effect", dtype=float)

    @property
    def std_errors(self) -> pd.Series:
        """Standard errors from the observed information (inverse negative Hessian)."""
        with np.errstate(invalid="ignore"):
            se = np.sqrt(np.diag(self.cov))
        return pd.Series(se, index=self.names, name="std_error")

    @property
    def covariance_type(self) -> str:
        """``"model"`` (inverse observed information), ``"cluster"`` (cluster-robust sandwich)
        or ``"sampling"`` (sandwich for sampling weights); see :mod:`ordwidgets.core.sandwich`.
        Standard errors, Wald tests and intervals use this covariance."""
        return self.options.get("covariance_type", "model")

    @property
    def covariance(self) -> pd.DataFrame:
        """Estimated covariance matrix of all parameters."""
        return pd.DataFrame(self.cov, index=self.names, columns=self.names)

    @property
    def aic(self) -> float:
        return -2.0 * self.loglik + 2.0 * self.n_params

    @property
    def bic(self) -> float:
        return -2.0 * self.loglik + np.log(self.n_obs) * self.n_params

    def table(self, level=0.95) -> pd.DataFrame:
        """Estimates with standard errors, Wald z, two-sided p and Wald interval.

        Columns ``estimate``, ``std_error``, ``z``, ``p_value``, ``wald_low``, ``wald_high``
        (the Wald interval ``estimate -+ z_{(1+level)/2} * std_error`` of coverage ``level``).
        """
        est = pd.Series(self.params, index=self.names)
        se = self.std_errors
        z = est / se
        low, high = wald_bounds(est, se, level)
        return pd.DataFrame(
            {"estimate": est, "std_error": se, "z": z, "p_value": 2 * stats.norm.sf(np.abs(z)),
             "wald_low": low, "wald_high": high}
        )

    # ---- prediction ------------------------------------------------------------------------
    def design(self, data=None) -> np.ndarray:
        """Design matrix (no intercept) for ``data`` (default: the training rows)."""
        if data is None:
            return self.training_rows().X
        return new_design(self, data, self.layout.columns)

    def linear_predictor(self, data=None) -> np.ndarray:
        """``eta = x'beta`` for each row (parallel location effects only)."""
        return self._eta(self.design(data))

    def _eta(self, X):
        return location_predictor(self.layout, self.params, X)

    def predict(self, data=None, kind="probabilities", *, level=None) -> pd.DataFrame | pd.Series:
        """Predictions for ``data`` (default: the training rows).

        Parameters
        ----------
        kind : {"probabilities", "cumulative", "latent", "most_likely"}
            Category probabilities (one column per level), cumulative probabilities
            ``P(Y <= j)`` (one column per level), the linear predictor ``x'beta`` or the most
            likely level.  ``"latent"`` holds the parallel location effects only (per-threshold
            and scale effects have no place on one latent scale) and is refused for a fit
            without any; ``"most_likely"`` is missing (``nan``) for a row whose probabilities
            are (a missing or infinite predictor, cuts that cross).
        level : float, optional
            With ``kind`` "probabilities" or "cumulative": add delta-method intervals of this
            coverage, computed on the logit scale so they stay in ``[0, 1]``.  The frame then
            has a column MultiIndex ``(part, level)``, ``part`` in "estimate", "lower",
            "upper" (see :func:`ordwidgets.core.effects.prediction_intervals`).
        """
        check_arguments("predict", PREDICT_RULES, {"data": data, "kind": kind, "level": level})
        if level is not None:
            return prediction_intervals(self, data, kind=kind, level=level)
        X = self.design(data)  # built once: formula encoding is the costly part
        index = self._index(data, len(X))
        if kind == "latent":
            return pd.Series(latent_predictor(self.layout, self.params, X), index=index, name="latent")
        probs = probabilities_at(self, X)
        cols = [str(v) for v in self.levels]
        if kind == "probabilities":
            return pd.DataFrame(probs, index=index, columns=cols)
        if kind == "cumulative":
            return pd.DataFrame(np.cumsum(probs, axis=1).clip(0, 1), index=index, columns=cols)
        if kind == "most_likely":
            return pd.Series(most_likely_levels(probs, self.levels), index=index, name="most_likely")
        raise ValueError(f"kind must be 'probabilities', 'cumulative', 'latent' or 'most_likely', got {kind!r}")

    def error_bounds(self, thresholds=None, coefficients=None):
        """Interval of the (standardised) latent error implied by each training row's category.

        Row ``i`` in category ``k`` has ``P(Y = k) = F(upper_i) - F(lower_i)`` with
        ``upper_i = theta_k - eta_i`` and ``lower_i = theta_{k-1} - eta_i`` (``-inf`` / ``inf``
        at the ends).  This is the one place that maps parameters to per-row intervals;
        log-likelihoods at edited thresholds and surrogate residuals are built on it.

        Parameters
        ----------
        thresholds, coefficients : array_like, optional
            Values to use instead of the fitted ones (for example edited thresholds).

        Returns
        -------
        lower, upper : ndarray, shape (n_rows,)
        """
        return error_bounds_of(self, thresholds, coefficients)

    def loglik_at(self, thresholds=None, coefficients=None) -> float:
        """Log-likelihood of the training rows at other parameter values (cheap, no refit).

        For a Dask fit the training rows are the kept sample (``training.sampled_from``):
        the value is the sample's log-likelihood, not comparable with ``loglik``.
        """
        tr = self.training_rows()
        logp = interval_logprob(self.link, *self.error_bounds(thresholds, coefficients))
        return float(logp.sum() if tr.weights is None else tr.weights @ logp)

    # ---- residuals (see ordwidgets.core.residuals and .residual_report) ---------------------
    def surrogate_residuals(self, *, draws=1, seed=None, thresholds=None) -> np.ndarray:
        """Surrogate residuals (Liu & Zhang 2018), shape (n_rows,) or (n_rows, draws).

        See :func:`ordwidgets.core.residuals.surrogate_residuals`.
        """
        from .residuals import surrogate_residuals

        return surrogate_residuals(self, draws=draws, seed=seed, thresholds=thresholds)

    def probability_scale_residuals(self, *, thresholds=None) -> np.ndarray:
        """Probability-scale residuals ``P(Y < y) - P(Y > y)`` (Li & Shepherd 2012)."""
        from .residuals import probability_scale_residuals

        return probability_scale_residuals(self, thresholds=thresholds)

    def residual_diagnostics(self, **options):
        """QQ points, binned trends, tests and display rows of the surrogate residuals.

        See :func:`ordwidgets.core.residual_report.residual_diagnostics` for the options.
        """
        from .residual_report import residual_diagnostics

        return residual_diagnostics(self, **options)

    # ---- inference (see ordwidgets.core.inference, .potest, .effects) ----------------------
    @property
    def crossing(self) -> tuple:
        """Threshold pairs whose fitted cumulative probabilities cross inside the data range.

        Empty (false) for parallel fits and when nothing crosses.
        """
        return tuple(self.options.get("crossing", ()))

    def intervals(self, level=0.95, *, method="wald") -> pd.DataFrame:
        """Confidence intervals (``"wald"`` or ``"profile"``) for every parameter."""
        from .inference import intervals

        return intervals(self, level=level, method=method)

    def proportional_odds_test(self, *, detail=False) -> pd.DataFrame:
        """Likelihood-ratio and Brant tests of parallel effects, per formula term and overall.

        A factor's dummies are tested jointly; ``detail=True`` adds one row per dummy.  With
        many rows trivial departures become significant: judge a small p-value by the
        ``max_prob_change`` / ``mean_prob_change`` columns (see
        :mod:`ordwidgets.core.potest`).
        """
        from .potest import proportional_odds_test

        return proportional_odds_test(self, detail=detail)

    def term_tests(self, *, likelihood_ratio=True) -> pd.DataFrame:
        """Likelihood-ratio and Wald tests of each formula term (a factor's dummies jointly).

        See :func:`ordwidgets.core.termtests.term_tests`.
        """
        from .termtests import term_tests

        return term_tests(self, likelihood_ratio=likelihood_ratio)

    def contrasts(self, term, *, level=0.95):
        """Pairwise level differences of a factor (Holm-adjusted) and its averaged probabilities.

        See :func:`ordwidgets.core.contrasts.contrasts`.
        """
        from .contrasts import contrasts

        return contrasts(self, term, level=level)

    def probability_difference(self, scenario, baseline, *, level=0.95) -> pd.DataFrame:
        """Scenario minus baseline probabilities with delta-method intervals.

        See :func:`ordwidgets.core.contrasts.probability_difference`.
        """
        from .contrasts import probability_difference

        return probability_difference(self, scenario, baseline, level=level)

    def odds_scale(self, *, level=0.95) -> pd.DataFrame:
        """``exp(beta)`` with intervals (logit link only; see :mod:`ordwidgets.core.oddsscale`)."""
        from .oddsscale import odds_scale

        return odds_scale(self, level=level)

    def average_marginal_effects(self) -> pd.DataFrame:
        """Average marginal effects on each category probability, with delta-method SEs."""
        from .marginal_effects import average_marginal_effects

        return average_marginal_effects(self)

    def training_rows(self) -> TrainingData:
        """The rows held in the result; refused when it was fitted with ``keep_data=False``."""
        if self.training is None:
            raise ValueError("this result does not hold its training data (fit with keep_data=True)")
        return self.training

    _training = training_rows  # the former private spelling, kept while other modules move over

    def _index(self, data, n):
        if data is not None and hasattr(data, "index"):
            return data.index
        if data is None and self.training is not None:
            return self.training.index
        return pd.RangeIndex(n)

    # ---- display (see ordwidgets.core.summary) ----------------------------------------------
    @property
    def weighting(self) -> str:
        """``"unweighted"`` or which weights the fit used (``"weighted by column 'count'"``)."""
        return weighting_text(self)

    def facts(self) -> dict:
        """The summary's labelled lines: link, data (rows, weighting, level counts), fit, solver."""
        return summary_facts(self)

    def __str__(self) -> str:
        return render_text(self, SIGN_CONVENTION)

    def __repr__(self) -> str:
        state = "converged" if self.converged else "NOT converged"
        return f"<FitResult {self.formula!r} link={self.link.name} n={self.n_rows} loglik={self.loglik:.4f} {state}>"

    def _repr_html_(self) -> str:
        return render_html(self, SIGN_CONVENTION)


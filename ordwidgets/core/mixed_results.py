"""The result of a random-intercept fit: variance components, group effects, predictions.

A :class:`RandomInterceptFit` is a :class:`~ordwidgets.core.results.FitResult` whose
``params``/``cov`` hold the thresholds and effects (the fixed part) and which adds the SD of
each grouping column's random intercept, the conditional modes of the group effects and the
marginal log-likelihood (``loglik``, integrated over the random intercepts).

Three kinds of probability answer three different questions (``predict(groups=...)``):

* ``"population"`` -- population-averaged: ``int P(Y = j | x, u) phi(u / sigma) du / sigma``,
  the share of all groups' rows with these predictors;
* ``"typical"`` -- a typical group, ``u = 0`` (its probabilities are more extreme than the
  population average: averaging over groups flattens them);
* ``"conditional"`` -- each row's own group, at its estimated effect (conditional mode).
"""
from __future__ import annotations

import html
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd
from numpy.polynomial.hermite_e import hermegauss
from scipy import special, stats

from .design import threshold_labels
from .effects import most_likely_levels
from .exceptions import ComparisonError, OrdinalDataError
from .html_table import html_table
from .layout import parallel_layout
from .probabilities import category_probabilities
from .results import FitResult, TrainingData
from .sandwich import refuse_likelihood_tests
from .sd_profile import sd_profile_intervals

__all__ = ["RandomInterceptFit", "build_result", "compare_random_part", "GROUP_KINDS"]

GROUP_KINDS = ("population", "typical", "conditional")
_POPULATION_POINTS = 40


@dataclass(frozen=True, eq=False)
class RandomInterceptFit(FitResult):
    """Cumulative link fit with a normal random intercept per group (Hedeker & Gibbons 1994).

    ``P(Y <= j | x, u) = F(theta_j - x'beta - u_g)``, ``u_g ~ N(0, sigma^2)``; a positive
    group effect, like a positive effect, moves probability towards higher categories.
    ``loglik`` is the marginal log-likelihood (adaptive Gauss-Hermite quadrature, Pinheiro &
    Bates 1995, ``options["quadrature"]`` points; 1 = Laplace).
    """

    groups: tuple = ()
    sds: np.ndarray = field(default=None, repr=False)
    full_cov: np.ndarray = field(default=None, repr=False)
    group_labels: tuple = field(default=(), repr=False)
    group_codes: tuple = field(default=(), repr=False)
    group_modes: tuple = field(default=(), repr=False)
    group_mode_se: tuple = field(default=(), repr=False)
    likelihood: object = field(default=None, repr=False)
    internal_params: np.ndarray = field(default=None, repr=False)

    # ---- parameters ------------------------------------------------------------------------
    @property
    def n_params(self) -> int:
        """Thresholds, effects and one SD per grouping column."""
        return len(self.params) + len(self.groups)

    @property
    def group_sd(self) -> pd.Series:
        """SD of the random intercept of each grouping column (latent scale)."""
        return pd.Series(self.sds, index=list(self.groups), name="sd")

    @cached_property
    def variance_components(self) -> pd.DataFrame:
        """One row per grouping column: ``sd``, 95% profile-likelihood ``lower``/``upper``, ``n_groups``.

        The interval is where ``2 (loglik_max - loglik_profile(sd))`` reaches the 0.95 quantile
        of chi-squared with 1 degree of freedom; ``lower`` is 0 when ``sd = 0`` is inside.
        """
        return self.sd_intervals(0.95)

    @cached_property
    def _solved_intervals(self) -> dict:
        return {}

    def sd_intervals(self, level=0.95) -> pd.DataFrame:
        """Variance components with a profile-likelihood interval of the SD at ``level``
        (each level is computed once per result)."""
        if level not in self._solved_intervals:
            self._solved_intervals[level] = sd_profile_intervals(self, level)
        lo, hi = self._solved_intervals[level]
        return pd.DataFrame({"sd": self.sds, "lower": lo, "upper": hi,
                             "n_groups": [len(lab) for lab in self.group_labels]}, index=list(self.groups))

    def group_effects(self, column=None) -> pd.DataFrame:
        """Conditional modes of one grouping column's intercepts, indexed by group.

        Columns ``estimate`` (mode of ``u_g`` given the group's rows, latent scale; positive =
        towards higher categories), ``std_error`` (``sigma / sqrt(c_g)``, the SD of the
        Laplace approximation to the conditional distribution) and ``n_rows``.
        """
        k = self._group_position(column)
        codes = self.group_codes[k]
        return pd.DataFrame({"estimate": self.group_modes[k], "std_error": self.group_mode_se[k],
                             "n_rows": np.bincount(codes, minlength=len(self.group_labels[k]))},
                            index=pd.Index(self.group_labels[k], name=self.groups[k]))

    def _group_position(self, column):
        if column is None:
            return 0
        if column not in self.groups:
            raise OrdinalDataError(f"{column!r} is not a grouping column of this fit (grouping: {', '.join(self.groups)})")
        return self.groups.index(column)

    def table(self, level=0.95) -> pd.DataFrame:
        """Fixed part as for plain fits, then one ``sd(<column>)`` row per grouping column.

        The SD rows carry the estimate and its standard error only: ``z``, ``p_value`` and
        the Wald interval are left empty (a Wald test or interval of an SD near its boundary
        at 0 is not valid); the test is ``compare(plain, mixed)`` and the interval the
        profile-likelihood one of :attr:`variance_components`.
        """
        tab = super().table(level)
        k = len(self.params)
        se = np.sqrt(np.maximum(np.diag(self.full_cov)[k:], 0.0))
        extra = pd.DataFrame(np.nan, index=[f"sd({g})" for g in self.groups], columns=tab.columns)
        extra["estimate"], extra["std_error"] = self.sds, se
        return pd.concat([tab, extra])

    def intervals(self, level=0.95, *, method="wald") -> pd.DataFrame:
        """Wald intervals of the fixed part (profile intervals are given for the SDs only)."""
        if method != "wald":
            raise OrdinalDataError("random-intercept fits give profile intervals for the SDs only "
                                   "(variance_components); use method='wald' for the fixed part")
        return super().intervals(level, method="wald")

    def random_part_test(self, plain) -> pd.DataFrame:
        """Likelihood-ratio test of ``sigma = 0`` against ``plain`` (see :func:`compare_random_part`)."""
        return compare_random_part(plain, self)

    def proportional_odds_test(self):
        raise OrdinalDataError("proportional-odds tests are not available for random-intercept fits yet")

    def average_marginal_effects(self):
        raise OrdinalDataError("average marginal effects are not available for random-intercept fits yet")

    # ---- rows and predictions ----------------------------------------------------------------
    def _training_offsets(self):
        return sum(self.group_modes[k][self.group_codes[k]] for k in range(len(self.groups)))

    def error_bounds(self, thresholds=None, coefficients=None):
        """Latent intervals of the training rows *given the estimated group effects*.

        ``(theta_{k-1} - x'beta - u_g, theta_k - x'beta - u_g]`` with ``u_g`` the conditional
        mode.  Surrogate residuals (Liu & Zhang 2018) built on these are conditional
        residuals: the group effects are plugged in as if known.  Under a correct model they
        follow the link distribution only approximately -- the modes are shrunk towards 0
        (most in small groups), so the residuals keep part of each group's effect and are a
        little wider than the link distribution; with many rows per group the
        approximation is close.  ``loglik_at`` is likewise the conditional log-likelihood.
        """
        lower, upper = super().error_bounds(thresholds, coefficients)
        u = self._training_offsets()
        return lower - u, upper - u

    def predict(self, data=None, kind="probabilities", *, groups="population", level=None):
        """Predictions for ``data`` (default: the training rows).

        Parameters
        ----------
        kind : {"probabilities", "cumulative", "latent", "most_likely"}
        groups : {"population", "typical", "conditional"}
            Population-averaged (integrated over the random intercept), a typical group
            (``u = 0``) or each row's own group at its conditional mode (``data`` must then
            hold the grouping column; a group not seen in the fit is refused).
        level : float, optional
            Add delta-method intervals (logit scale, numerical derivatives in thresholds,
            effects and SD; for ``"conditional"`` the group effects are taken as known).
        """
        if groups not in GROUP_KINDS:
            raise OrdinalDataError(f"groups must be 'population', 'typical' or 'conditional', got {groups!r}")
        X = self.design(data)
        offset = self._offsets(data) if groups == "conditional" else np.zeros(len(X))
        index = self._index(data, len(X))
        full = np.concatenate([self.params, self.sds])
        if kind == "latent":
            return pd.Series(self._eta(X) + offset, index=index, name="latent")
        cols = [str(v) for v in self.levels]
        probs = self._probabilities(full, X, offset, groups)
        if kind == "most_likely":
            return pd.Series(most_likely_levels(probs, self.levels), index=index, name=kind)
        if kind not in ("probabilities", "cumulative"):
            raise ValueError(f"kind must be 'probabilities', 'cumulative', 'latent' or 'most_likely', got {kind!r}")
        cum = kind == "cumulative"
        est = np.cumsum(probs, axis=1).clip(0, 1) if cum else probs
        if level is None:
            return pd.DataFrame(est, index=index, columns=cols)
        lower, upper = self._delta_interval(full, X, offset, groups, est, cum, level)
        parts = pd.MultiIndex.from_product([["estimate", "lower", "upper"], cols], names=["part", "level"])
        return pd.DataFrame(np.hstack([est, lower, upper]), index=index, columns=parts)

    def probabilities_of(self, X, *, thresholds=None, groups="population", offset=None) -> np.ndarray:
        """Category probabilities ``(n, J)`` of design rows ``X`` (the columns of :meth:`design`).

        The computation behind :meth:`predict`, for callers that hold the design already
        (the widget state caches it).  ``thresholds`` replace the fitted ones (an edit);
        ``offset`` is each row's group effect on the latent scale (``groups="conditional"``:
        for example an estimate from :meth:`group_effects`; default 0).
        """
        if groups not in GROUP_KINDS:
            raise OrdinalDataError(f"groups must be 'population', 'typical' or 'conditional', got {groups!r}")
        X = np.asarray(X, float)
        full = np.concatenate([self.params, self.sds])
        if thresholds is not None:
            full[: self.n_thresholds] = np.asarray(thresholds, float)
        shift = np.zeros(len(X)) if offset is None or groups != "conditional" else np.broadcast_to(offset, len(X))
        return self._probabilities(full, X, np.asarray(shift, float), groups)

    def marginal_loglik_at(self, thresholds) -> float:
        """Marginal log-likelihood (integrated over the random intercepts) at other thresholds.

        Effects and SDs stay at the fit.  The fit's likelihood works on standardised columns,
        where the thresholds differ from the user's by the same constant (``mean' beta``),
        so an edit moves them by the same amounts.  ``loglik_at`` is the conditional one.
        """
        theta = np.asarray(thresholds, float)
        if theta.shape != (self.n_thresholds,):
            raise OrdinalDataError(f"{self.n_thresholds} thresholds expected, got {theta.size}")
        if self.likelihood is None:
            raise OrdinalDataError("this result does not hold its likelihood (fit with keep_data=True)")
        internal = np.array(self.internal_params, float)
        internal[: self.n_thresholds] += theta - self.params[: self.n_thresholds]
        return float(self.likelihood.sums(self.link, internal, order=0)[0])

    def latent_density(self, t, eta, *, groups="population", offset=0.0) -> np.ndarray:
        """Density at ``t`` of the latent ``y* = x'beta + u + error`` of a row with ``x'beta = eta``.

        ``"typical"``: the link density at ``t - eta``; ``"conditional"``: shifted by the
        group effect ``offset``; ``"population"``: averaged over ``u ~ N(0, sigma^2)`` with
        the quadrature :meth:`predict` uses, so its areas between the thresholds are the
        population-averaged probabilities.
        """
        t = np.asarray(t, float)
        if groups != "population":
            return self.link.pdf(t - eta - (offset if groups == "conditional" else 0.0))
        nodes, w = hermegauss(_POPULATION_POINTS)
        total = float(np.sqrt(np.sum(self.sds ** 2)))
        return sum(wk * self.link.pdf(t - eta - total * tk) for tk, wk in zip(nodes, w / w.sum()))

    def _probabilities(self, full, X, offset, groups):
        m = self.n_thresholds
        theta, beta, sd = full[:m], full[m:len(self.params)], full[len(self.params):]
        eta = (X @ beta if X.shape[1] else np.zeros(len(X))) + offset
        if groups != "population":
            return category_probabilities(self.link, theta, eta)
        t, w = hermegauss(_POPULATION_POINTS)
        w = w / w.sum()
        total = float(np.sqrt(np.sum(sd ** 2)))  # independent normal intercepts add their variances
        return sum(wk * category_probabilities(self.link, theta, eta + total * tk) for tk, wk in zip(t, w))

    def _delta_interval(self, full, X, offset, groups, est, cum, level):
        """Delta method on the logit scale with a central-difference Jacobian."""
        J = np.empty(est.shape + (len(full),))
        for j in range(len(full)):
            h = 1e-6 * max(1.0, abs(full[j]))
            e = np.zeros(len(full))
            e[j] = h
            hi, lo = (self._probabilities(full + s * e, X, offset, groups) for s in (1.0, -1.0))
            if cum:
                hi, lo = np.cumsum(hi, axis=1), np.cumsum(lo, axis=1)
            J[:, :, j] = (hi - lo) / (2 * h)
        var = np.einsum("njp,pq,njq->nj", J, self.full_cov, J)
        q = stats.norm.isf((1 - level) / 2)
        with np.errstate(divide="ignore", invalid="ignore"):
            half = q * np.sqrt(np.maximum(var, 0.0)) / (est * (1 - est))
            lower, upper = special.expit(special.logit(est) - half), special.expit(special.logit(est) + half)
        edge = (est <= 0) | (est >= 1)
        return np.where(edge, est, lower), np.where(edge, est, upper)

    def _offsets(self, data):
        if data is None:
            return self._training_offsets()
        total = np.zeros(len(data))
        for k, col in enumerate(self.groups):
            if col not in data.columns:
                raise OrdinalDataError(f"groups='conditional' needs the grouping column {col!r} in the data")
            pos = pd.Index(self.group_labels[k]).get_indexer(data[col])
            if (pos < 0).any():
                unseen = pd.unique(data[col].to_numpy()[pos < 0])[:5]
                raise OrdinalDataError(f"group(s) of {col!r} not seen in the fit: {', '.join(map(str, unseen))}; "
                                       "use groups='population' or 'typical' for them")
            total += self.group_modes[k][pos]
        return total

    # ---- display --------------------------------------------------------------------------
    def __str__(self) -> str:
        return super().__str__() + "\n\nVariance components (latent scale)\n" + self.variance_components.to_string()

    def __repr__(self) -> str:
        return super().__repr__().replace("<FitResult", "<RandomInterceptFit", 1)

    def _repr_html_(self) -> str:
        e = html.escape
        vc = self.variance_components
        rows = [[str(g)] + [f"{v:.4g}" for v in r[["sd", "lower", "upper"]]] + [f"{int(r['n_groups']):,}"]
                for g, r in vc.iterrows()]
        points = self.options.get("quadrature")
        method = "Laplace approximation" if points == 1 else f"adaptive Gauss-Hermite quadrature, {points} points"
        block = ("<div class='ow-variance-components' style='margin-top:6px'><b>Random intercepts</b> "
                 f"(SD on the latent scale; 95% profile-likelihood interval; marginal likelihood by {e(method)})"
                 + html_table(["grouping", "sd", "lower", "upper", "groups"], rows, labels=1) + "</div>")
        base = super()._repr_html_()
        return base[: -len("</div>")] + block + "</div>"


def build_result(prep, lk, design, outcome, user, cov, *, converged, message, condition, largest_score, formula,
                 groups, group_codes, group_labels, keep_data, options):
    """A :class:`RandomInterceptFit` from the engine's optimum (``user``: parameters on the
    user's scale, ``cov`` their covariance).

    The likelihood is even in each ``sigma_c``; negative values are folded to ``|sigma_c|``
    (with the sign of their covariances).
    """
    P, C = len(user), len(groups)
    k = P - C
    internal = np.array(outcome.params, float)
    sign = np.ones(P)
    sign[k:] = np.where(user[k:] < 0, -1.0, 1.0)
    cov = cov * np.outer(sign, sign)
    sds = np.abs(user[k:])
    effects = design.conditional_effects(lk, internal)
    modes = tuple(user[k + c] * z for c, (z, _) in enumerate(effects))
    mode_se = tuple(sds[c] * se for c, (_, se) in enumerate(effects))
    training = TrainingData(prep.X, prep.y, prep.weights, prep.index, frame=prep.frame) if keep_data else None
    return RandomInterceptFit(
        link=lk, levels=prep.levels, threshold_names=tuple(threshold_labels(prep.levels)), coef_names=prep.columns,
        params=user[:k], cov=cov[:k, :k], loglik=float(outcome.loglik), n_obs=float(design.counts().sum()),
        n_rows=int(len(prep.y)), iterations=outcome.iterations, converged=converged, message=message,
        largest_score=largest_score, curvature_condition=condition, formula=formula,
        response=prep.response, model_spec=prep.model_spec, notes=tuple(prep.notes), training=training,
        options={**options, "random_intercepts": list(groups), "covariance_type": "model"},
        groups=groups, sds=sds, full_cov=cov, group_labels=tuple(tuple(lab) for lab in group_labels),
        group_codes=tuple(np.asarray(c) for c in group_codes), group_modes=modes, group_mode_se=mode_se,
        likelihood=design, internal_params=internal, layout=parallel_layout(prep.columns, threshold_labels(prep.levels)),
    )


# ---- likelihood-ratio test of the random part ------------------------------------------------
def compare_random_part(plain, mixed):
    """Likelihood-ratio test of ``sigma = 0``: plain fit against the random-intercept fit.

    Under ``sigma = 0`` the SD is on the boundary of its range, and the statistic
    ``2 (loglik_mixed - loglik_plain)`` follows a 50:50 mixture of chi-squared with 0 and 1
    degrees of freedom (Self & Liang 1987, J. Amer. Statist. Assoc. 82:605-610), so the
    p-value is half the chi-squared(1) tail.  With ``C`` grouping columns the statistic tests
    all SDs at once and is referred to the mixture of chi-squared(0..C) with binomial
    weights ``binom(C, k) / 2^C`` (Self & Liang 1987, case of uncorrelated SD estimates).
    """
    if not isinstance(mixed, RandomInterceptFit) or isinstance(plain, RandomInterceptFit):
        raise ComparisonError("compare the plain fit first, then the random-intercept fit")
    refuse_likelihood_tests("likelihood-ratio test of the random part", plain, error=ComparisonError)
    if plain.options.get("nonparallel") or plain.options.get("scale_by"):
        raise ComparisonError("the plain fit has per-threshold or scale effects; the random-intercept fit has not")
    if (plain.link.name != mixed.link.name or tuple(plain.levels) != tuple(mixed.levels)
            or tuple(plain.coef_names) != tuple(mixed.coef_names)):
        raise ComparisonError("the fits differ in link, levels or predictors: refit with the same model")
    if plain.n_rows != mixed.n_rows or not np.isclose(plain.n_obs, mixed.n_obs):
        raise ComparisonError(f"fits use different rows ({plain.n_rows} and {mixed.n_rows}): refit on the same rows")
    stat = max(2.0 * (mixed.loglik - plain.loglik), 0.0)
    df = len(mixed.groups)
    p = float(sum(special.comb(df, k) / 2.0 ** df * stats.chi2.sf(stat, k) for k in range(1, df + 1))) \
        if stat > 0 else 1.0
    names = [f"{plain.formula} [{plain.link.name}]",
             f"{mixed.formula} [{mixed.link.name}] random_intercepts={list(mixed.groups)}"]
    return pd.DataFrame(
        {"model": names, "n_params": [plain.n_params, mixed.n_params], "loglik": [plain.loglik, mixed.loglik],
         "statistic": [np.nan, stat], "df": [np.nan, df], "p_value": [np.nan, p],
         "reference": ["", "50:50 mixture of chi2_0 and chi2_1 (SD on its boundary)" if df == 1 else
                       f"binomial mixture of chi2_0..chi2_{df} (SDs on their boundary)"]},
        index=["smaller", "larger"])

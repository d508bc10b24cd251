"""Surrogate and probability-scale residuals of a cumulative link fit.

An ordinal response has no natural residual.  The surrogate approach of Liu & Zhang (2018,
J. Amer. Statist. Assoc. 113:845-854) draws, for each row, the latent error from the fitted
error distribution truncated to the interval its category implies, and uses that draw as a
continuous residual: under a correctly specified model the draws are independent and follow
the link distribution exactly, so the usual continuous-residual plots and tests apply.

Three kinds of residual are produced here:

``"latent"``
    The surrogate residual ``S = e - c`` with ``e`` drawn from ``F`` truncated to
    ``(lower_i, upper_i]`` (:meth:`FitResult.error_bounds`) and ``c`` the centre of ``F``
    (its mean, or the median for cauchit, which has no mean).  For location-scale fits the
    bounds are already divided by the fitted scale, so the residuals are standardised and
    identically distributed under a correct model.
``"probability"``
    Non-parallel fits have no single latent variable; then the residual is the jitter on the
    probability scale, ``U - 1/2`` with ``U`` uniform between the two fitted cumulative
    probabilities (the variant Liu & Zhang 2018 discuss for general ordinal models).  Under a
    correct model it is uniform on ``(-1/2, 1/2)``.
probability-scale residual
    The deterministic residual of Li & Shepherd (2012, Biometrika 99:473-480),
    ``P(Y < y_i) - P(Y > y_i) = F(lower_i) - (1 - F(upper_i))``, in ``(-1, 1)`` with mean zero
    under a correct model.  It is twice the conditional mean of the probability-scale jitter.

Sampling is exact: ``e = F^{-1}(F(l) + V (F(u) - F(l)))`` for ``V`` uniform, evaluated as
``F^{-1}(F(l) + V P)`` below the median and ``S^{-1}(S(u) + (1 - V) P)`` above it, with the
interval probability ``P`` computed without cancellation.  Rows whose probabilities underflow
double precision are solved in log space by a safeguarded Newton iteration.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .arguments import check_thresholds
from .exceptions import OrdinalDataError
from .links import get_link
from .probabilities import interval_logprob, interval_probability

__all__ = [
    "SurrogateDraws", "draw_surrogate", "surrogate_residuals", "probability_scale_residuals",
    "surrogate_kind", "sample_truncated", "ReferenceDistribution", "reference_distribution",
    "unit_positions", "whole_counts", "MAX_UNITS",
]

_TINY = 1e-290          # below this, a probability is handled in log space
_NEWTON_STEPS = 60
MAX_UNITS = 2_000_000   # residuals per counted unit: above this, a random sample of units
_SYMMETRIC = ("logit", "probit", "cauchit")   # latent errors symmetric about zero


# ---- reference distributions ---------------------------------------------------------------
@dataclass(frozen=True)
class ReferenceDistribution:
    """The distribution surrogate residuals follow under a correctly specified model.

    Attributes
    ----------
    name : str
        For display, e.g. ``"logistic (centred)"``.
    link : Link or None
        The link whose error distribution it is (``None`` for the uniform reference).
    shift : float
        The centre subtracted from the latent draws (mean, or median for cauchit).
    center_label, spread_label : str
        ``"mean"`` / ``"variance"`` or, where moments do not exist, ``"median"`` / ``"IQR"``.
    center, spread : float
        The reference values of those two summaries.
    """

    name: str
    link: object
    shift: float
    center_label: str
    spread_label: str
    center: float
    spread: float

    def cdf(self, r):
        """Reference distribution function at residual values ``r``."""
        if self.link is None:
            return np.clip(np.asarray(r, float) + 0.5, 0.0, 1.0)
        return self.link.cdf(np.asarray(r, float) + self.shift)

    def ppf(self, p):
        """Reference quantiles at probabilities ``p``."""
        if self.link is None:
            return np.asarray(p, float) - 0.5
        return self.link.ppf(p) - self.shift

    def summarise(self, r):
        """Observed ``(center, spread)`` of residuals ``r`` in this reference's terms."""
        r = np.asarray(r, float).ravel()
        if self.spread_label == "IQR":
            q1, q2, q3 = np.quantile(r, [0.25, 0.5, 0.75])
            return float(q2), float(q3 - q1)
        return float(r.mean()), float(r.var())


def reference_distribution(link, kind="latent") -> ReferenceDistribution:
    """Reference distribution of surrogate residuals of ``kind`` for a link.

    Cauchit has no mean or variance: it is centred at its median (zero) and summarised by its
    median and interquartile range (``2`` for the standard Cauchy), as are all links for which
    the variance does not exist.
    """
    if kind == "probability":
        return ReferenceDistribution("uniform(-1/2, 1/2)", None, 0.0, "mean", "variance", 0.0, 1.0 / 12.0)
    link = get_link(link)
    if np.isfinite(link.var):
        shift = link.mean
        return ReferenceDistribution(f"{link.latent} (centred)", link, shift, "mean", "variance", 0.0, link.var)
    q1, q3 = link.ppf(np.array([0.25, 0.75]))
    return ReferenceDistribution(f"{link.latent} (centred at median)", link, link.median, "median", "IQR",
                                 0.0, float(q3 - q1))


# ---- exact truncated sampling ----------------------------------------------------------------
def sample_truncated(link, lower, upper, u):
    """Inverse-cdf draws of the link's error distribution truncated to ``(lower, upper]``.

    Parameters
    ----------
    link : str or Link
    lower, upper : array_like
        Interval ends (``-inf`` / ``inf`` allowed) with ``lower <= upper``, broadcast together.
    u : array_like
        Uniform numbers in ``[0, 1)``, of the bounds' shape or of that shape plus trailing
        axes (one per draw).  The draw is increasing in ``u``.

    Returns
    -------
    ndarray, shape of ``u``
        ``F^{-1}(F(lower) + u (F(upper) - F(lower)))`` computed exactly in both tails; finite
        wherever the interval has a finite end.
    """
    link = get_link(link)
    lower, upper = np.broadcast_arrays(np.atleast_1d(lower).astype(float), np.atleast_1d(upper).astype(float))
    u = np.atleast_1d(u).astype(float)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        below_l, above_u, mass = _interval_masses(link, lower, upper)
        lower, upper, below_l, above_u, mass = (
            np.broadcast_to(_trail(a, u.ndim), u.shape) for a in (lower, upper, below_l, above_u, mass))
        below = below_l + u * mass
        above = above_u + (1.0 - u) * mass
        out = _invert(link, below, above)
        hard = (np.minimum(below, above) < _TINY) | (mass < _TINY)
        if hard.any():
            out[hard] = _log_space_draw(link, lower[hard], upper[hard], u[hard])
    return np.clip(out, lower, upper)


def _interval_masses(link, lower, upper):
    """``F(lower)``, ``S(upper)`` and the interval probability (exact for small intervals)."""
    below, above = link.cdf(lower), link.sf(upper)
    mass = 1.0 - below - above
    small = mass < 1e-3  # cancellation costs accuracy only when the interval is small
    if small.any():
        mass[small] = interval_probability(link, lower[small], upper[small])
    return below, above, mass


def _trail(a, ndim):
    return a.reshape(a.shape + (1,) * (ndim - a.ndim))


def _invert(link, below, above):
    """``F^{-1}(below)`` where the point is below the median, else ``S^{-1}(above)``.

    Calls the link's private hooks on values clipped into ``(0, 1/2]``; the rows where a
    probability underflows are redone in log space by the caller.
    """
    pick = below <= above
    if link.name in _SYMMETRIC:  # S^{-1}(q) = -F^{-1}(q): one quantile call for all rows
        t = link._ppf(np.clip(np.where(pick, below, above), _TINY, 0.5))
        return np.where(pick, t, -t)
    lo = link._ppf(np.clip(below, _TINY, 0.5))
    hi = link._isf(np.clip(above, _TINY, 0.5))
    return np.where(pick, lo, hi)


def _log_space_draw(link, lower, upper, u):
    """The same draw for rows whose probabilities underflow: solved on ``log F`` or ``log S``."""
    with np.errstate(divide="ignore", invalid="ignore"):
        logmass = interval_logprob(link, lower, upper)
        log_below = np.logaddexp(link.logcdf(lower), np.log(u) + logmass)
        log_above = np.logaddexp(link.logsf(upper), np.log1p(-u) + logmass)
    use_cdf = log_below <= log_above
    target = np.where(use_cdf, log_below, log_above)
    start = np.where(np.isfinite(upper), upper, lower)
    start = np.where(use_cdf, start, np.where(np.isfinite(lower), lower, upper))
    return _newton_log_inverse(link, target, start, use_cdf, lower, upper)


def _newton_log_inverse(link, target, t, use_cdf, lower, upper):
    """Solve ``log F(t) = target`` (or ``log S(t) = target``) by Newton steps.

    ``log F`` and ``log S`` are concave for the log-concave links, so after the first step the
    iterates approach the root monotonically (common practice, no source); each step is kept
    inside the row's interval.
    """
    lo = np.where(np.isfinite(lower), lower, -np.finfo(float).max)
    hi = np.where(np.isfinite(upper), upper, np.finfo(float).max)
    t = np.clip(t, lo, hi)
    for _ in range(_NEWTON_STEPS):
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            g = np.where(use_cdf, link.logcdf(t), link.logsf(t))
            slope = np.exp(link.logpdf(t) - g) * np.where(use_cdf, 1.0, -1.0)
            step = np.where(slope != 0, (g - target) / slope, 0.0)
        new = np.clip(t - np.nan_to_num(step), lo, hi)
        if np.all(np.abs(new - t) <= 1e-14 * np.maximum(1.0, np.abs(t))):
            return new
        t = new
    return t


# ---- residuals of a fit --------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class SurrogateDraws:
    """Surrogate residuals of one fit with the facts needed to read them.

    Attributes
    ----------
    residuals : ndarray, shape (n_rows, draws)
        The residuals, one column per draw.
    kind : {"latent", "probability"}
        Which surrogate was used (see the module docstring).
    reference : ReferenceDistribution
        What the residuals follow under a correct model.
    description : str
        One plain-language sentence saying which residual this is.
    """

    residuals: np.ndarray
    kind: str
    reference: ReferenceDistribution
    description: str
    #: Fitted row of each residual (row ``units[k]`` for residual ``k``): ``arange(n_rows)``
    #: for one residual per row, repeated rows for one residual per counted unit.
    units: np.ndarray | None = None
    #: One phrase saying what a residual stands for (``"rows"`` or ``"counted units"``).
    counted: str = "rows"

    @property
    def draws(self) -> int:
        return self.residuals.shape[1]


def surrogate_kind(res) -> str:
    """``"probability"`` for fits with non-parallel effects, ``"latent"`` otherwise."""
    return "probability" if res.options.get("nonparallel") else "latent"


def whole_counts(weights) -> bool:
    """Whether frequency weights are whole numbers (counts of identical units)."""
    w = np.asarray(weights, float)
    return bool(np.all(np.isfinite(w)) and np.all(w >= 0) and np.all(w == np.round(w)))


def unit_positions(res, *, max_units=MAX_UNITS, seed=None):
    """Fitted row of every counted unit of a weighted fit (``None`` when unweighted).

    A row with whole-number weight ``w`` stands for ``w`` identical units, and the data
    expanded to one row per unit have the same likelihood; the residual of each unit is
    drawn on its own, so residual tests count units, as on the expanded data.  Above
    ``max_units`` units a simple random sample of ``max_units`` of them is taken (drawn
    without replacement with :meth:`numpy.random.Generator.multivariate_hypergeometric`).

    Raises
    ------
    OrdinalDataError
        When the weights are not whole numbers (there are no units to draw for).
    """
    weights = res.training.weights
    if weights is None:
        return None
    if not whole_counts(weights):
        raise OrdinalDataError("residuals per counted unit need whole-number frequency weights; "
                               f"the weights of this fit are not whole numbers (first: {weights[0]!r})")
    counts = np.asarray(weights, float).astype(np.int64)
    if counts.sum() > max_units:
        counts = np.random.default_rng(seed).multivariate_hypergeometric(counts, max_units, method="marginals")
    return np.repeat(np.arange(len(counts)), counts)


def draw_surrogate(res, *, draws=1, seed=None, thresholds=None, per_unit=False) -> SurrogateDraws:
    """Draw surrogate residuals of a fit (Liu & Zhang 2018).

    Parameters
    ----------
    res : FitResult
        A fit that kept its training data.
    draws : int
        Independent draws per row (``>= 1``).
    seed : int, numpy Generator or None
        Seed for reproducible draws; the draw of a row is increasing in its uniform number,
        so with a fixed seed residuals move smoothly as thresholds are edited.
    thresholds : array_like, optional
        Edited thresholds to use instead of the fitted ones.
    per_unit : bool
        For a fit with whole-number frequency weights: one residual per counted unit
        (:func:`unit_positions`), so that the residuals are those of the expanded data.
        Otherwise (default, and for unweighted fits) one residual per row.

    Returns
    -------
    SurrogateDraws
    """
    draws = _check_draws(draws)
    lower, upper = res.error_bounds(thresholds=_check_thresholds(res, thresholds))
    rng = np.random.default_rng(seed)
    units = unit_positions(res, seed=rng) if per_unit else None
    counted = "rows" if units is None else "counted units"
    if units is None:
        units = np.arange(len(lower))
    else:
        lower, upper = lower[units], upper[units]
    u = rng.random((len(lower), draws))
    kind = surrogate_kind(res)
    ref = reference_distribution(res.link, kind)
    if kind == "probability":
        values = _probability_jitter(res.link, lower[:, None], upper[:, None], u)
        text = ("probability-scale surrogate residuals (uniform between the fitted cumulative "
                "probabilities, minus 1/2), used because the fit has non-parallel effects")
    else:
        _check_ordered(lower, upper)
        values = sample_truncated(res.link, lower[:, None], upper[:, None], u) - ref.shift
        scaled = " standardised by the fitted scale," if res.options.get("scale_by") else ""
        text = f"latent surrogate residuals,{scaled} following the {ref.name} distribution under a correct model"
    if counted != "rows":
        total = float(np.sum(res.training.weights))
        some = f"a random sample of {len(units):,} of {total:,.0f}" if len(units) < total else f"{len(units):,}"
        text += f"; one residual per counted unit ({some} units from {res.n_training:,} weighted rows)"
    return SurrogateDraws(values, kind, ref, text, units, counted)


def surrogate_residuals(res, *, draws=1, seed=None, thresholds=None) -> np.ndarray:
    """Surrogate residuals (Liu & Zhang 2018) as an array.

    Returns
    -------
    ndarray, shape (n_rows,) when ``draws == 1``, else (n_rows, draws)
        See :func:`draw_surrogate` for the parameters and :func:`surrogate_kind` for which
        residual a fit gets.
    """
    values = draw_surrogate(res, draws=draws, seed=seed, thresholds=thresholds).residuals
    return values[:, 0] if values.shape[1] == 1 else values


def probability_scale_residuals(res, *, thresholds=None) -> np.ndarray:
    """Probability-scale residuals of Li & Shepherd (2012): ``P(Y < y) - P(Y > y)``.

    Returns
    -------
    ndarray, shape (n_rows,)
        Values in ``[-1, 1]`` (open interval for interior probabilities), mean zero under a
        correctly specified model.
    """
    lower, upper = res.error_bounds(thresholds=_check_thresholds(res, thresholds))
    return res.link.cdf(lower) - res.link.sf(upper)


def _probability_jitter(link, lower, upper, u):
    low, high = link.cdf(lower), link.cdf(upper)
    return low + u * (high - low) - 0.5


def _check_draws(draws) -> int:
    if isinstance(draws, (bool, np.bool_)) or not isinstance(draws, (int, np.integer)):
        raise TypeError(f"draws must be a whole number of draws per row, got {draws!r}")
    if draws < 1:
        raise ValueError(f"draws must be at least 1, got {draws}")
    return int(draws)


def _check_thresholds(res, thresholds):
    """Edited thresholds must be finite, strictly increasing and one per cut of the fit."""
    return None if thresholds is None else check_thresholds(thresholds, res.threshold_names)


def _check_ordered(lower, upper):
    if np.any(lower > upper):
        raise ValueError("some category intervals are empty: the latent bounds are not ordered")

"""Link functions as small distribution objects with tail-exact hooks.

A cumulative link model writes ``P(Y <= j | x) = F(theta_j - x'beta)`` where ``F`` is the
cumulative distribution function of the latent error ``epsilon`` in ``y* = x'beta + epsilon``
(McCullagh 1980, J. R. Statist. Soc. B 42:109-142).  Each :class:`Link` bundles the
functions of ``F`` the fitter, the residuals and the widgets need.  Private hooks (``_cdf``,
``_sf``, ``_logcdf``, ``_logsf``, ``_logpdf``, ``_dlogpdf``, ``_ppf``, ``_isf``) do the maths
with numerically stable special functions and assume finite float arrays; public methods
broadcast, accept ``+-inf`` and return arrays.

The upper tail is always computed through the survival function so that probabilities of
``1e-300`` stay exact instead of rounding ``1 - F`` to zero.
"""
from __future__ import annotations

import numpy as np
from scipy import special, stats

__all__ = ["Link", "LINKS", "get_link", "link_names"]

_LOG_SQRT_2PI = 0.5 * np.log(2.0 * np.pi)


def pick(flag, a, b):
    """``np.where(flag, a, b)`` for arrays ``a``, ``b`` of finite values (or ``nan`` in both).

    Computed as ``a * m + b * (1 - m)`` with ``m`` the flag as 0.0 or 1.0: multiplying by 0
    or 1 and adding a zero round nothing, so the values are those of ``np.where`` (up to the
    sign of a zero), at a third of its cost on large arrays.  An infinite value in the
    branch not taken would give ``nan``: callers pass bounded quantities only.
    """
    m = np.asarray(flag, dtype=float)
    out = np.multiply(a, m)
    rest = np.subtract(1.0, m, out=m)
    out += np.multiply(b, rest, out=rest)
    return out


class Link:
    """Base class of a latent error distribution used as a link.

    Subclasses implement the private hooks; everything else is derived here.

    Attributes
    ----------
    name : str
        Short name used in the public API (``"logit"``, ``"probit"`` ...).
    latent : str
        Name of the latent error distribution, for display.
    dist : scipy.stats frozen distribution
        The same distribution in scipy.stats, used for sampling and as an outside
        reference in tests.
    """

    name = "base"
    latent = ""
    dist = None

    # ---- public, broadcasting interface -------------------------------------------------
    def cdf(self, t):
        """``F(t)``; exact in the lower tail, ``F(-inf) = 0`` and ``F(inf) = 1``."""
        return self._with_limits(t, self._cdf, 0.0, 1.0)

    def sf(self, t):
        """``1 - F(t)`` computed without cancellation in the upper tail."""
        return self._with_limits(t, self._sf, 1.0, 0.0)

    def logcdf(self, t):
        """``log F(t)``."""
        return self._with_limits(t, self._logcdf, -np.inf, 0.0)

    def logsf(self, t):
        """``log(1 - F(t))``."""
        return self._with_limits(t, self._logsf, 0.0, -np.inf)

    def pdf(self, t):
        """Density ``f(t)``; zero at ``+-inf``."""
        return np.exp(self.logpdf(t))

    def logpdf(self, t):
        """``log f(t)``; ``-inf`` at ``+-inf``."""
        return self._with_limits(t, self._logpdf, -np.inf, -np.inf)

    def dlogpdf(self, t):
        """``f'(t) / f(t)``, the score of the density (zero contribution at ``+-inf``)."""
        return self._with_limits(t, self._dlogpdf, 0.0, 0.0)

    def ppf(self, p):
        """Quantile function ``F^{-1}(p)``; ``-inf`` at 0 and ``inf`` at 1."""
        p = np.asarray(p, dtype=float)
        out = np.full(p.shape, np.nan)
        inside = (p > 0) & (p < 1)
        out[inside] = self._ppf(p[inside])
        out[p == 0] = -np.inf
        out[p == 1] = np.inf
        return out

    def isf(self, q):
        """Inverse survival function ``F^{-1}(1 - q)``, exact for small ``q``."""
        q = np.asarray(q, dtype=float)
        out = np.full(q.shape, np.nan)
        inside = (q > 0) & (q < 1)
        out[inside] = self._isf(q[inside])
        out[q == 0] = np.inf
        out[q == 1] = -np.inf
        return out

    def kernel(self, t):
        """``(F, S, f, f'/f)`` at finite ``t`` in one pass (the fitter's hot path).

        Subclasses share intermediate results (one ``exp`` for logit) where they can; the
        default calls the private hooks.  The four arrays are new (none is ``t`` or shares
        memory with another), so callers may overwrite them.
        """
        return self._cdf(t), self._sf(t), np.exp(self._logpdf(t)), self._dlogpdf(t)

    def exact_interval(self, lower, upper):
        """``F(upper) - F(lower)`` from a closed form without cancellation, or ``None``.

        Links whose tails make the difference of two CDFs lose digits for narrow intervals
        far out override this; :func:`~ordwidgets.core.probabilities.interval_probability`
        and :func:`~ordwidgets.core.probabilities.interval_logprob` then use it.
        """
        return None

    def exact_log_interval(self, lower, upper):
        """``log(F(upper) - F(lower))`` from the same closed form, or ``None``."""
        return None

    # ---- moments (used by residual summaries) --------------------------------------------
    @property
    def mean(self) -> float:
        """Mean of the latent error (``nan`` where it does not exist)."""
        return float(self.dist.mean())

    @property
    def var(self) -> float:
        """Variance of the latent error (``nan`` where it does not exist)."""
        return float(self.dist.var())

    @property
    def median(self) -> float:
        """Median of the latent error."""
        return float(self._ppf(np.array([0.5]))[0])

    # ---- helpers -------------------------------------------------------------------------
    @staticmethod
    def _with_limits(t, hook, at_minus_inf, at_plus_inf):
        t = np.asarray(t, dtype=float)
        finite = np.isfinite(t)
        if finite.all():
            return hook(t)
        out = np.full(t.shape, np.nan)
        out[finite] = hook(t[finite])
        out[t == -np.inf] = at_minus_inf
        out[t == np.inf] = at_plus_inf
        return out

    def __repr__(self) -> str:
        return f"<Link {self.name}: latent {self.latent}>"

    def __reduce__(self):
        return (get_link, (self.name,))


class Logit(Link):
    """Logistic latent error: ``F(t) = 1 / (1 + exp(-t))`` (proportional odds)."""

    name = "logit"
    latent = "logistic"
    dist = stats.logistic()

    def _cdf(self, t):
        return special.expit(t)

    def _sf(self, t):
        return special.expit(-t)

    def _logcdf(self, t):
        return -np.logaddexp(0.0, -t)

    def _logsf(self, t):
        return -np.logaddexp(0.0, t)

    def _logpdf(self, t):
        return -t - 2.0 * np.logaddexp(0.0, -t)

    def _dlogpdf(self, t):
        return -np.tanh(0.5 * t)

    def _ppf(self, p):
        return special.logit(p)

    def kernel(self, t):
        # F = 1 / (1 + exp(-t)) and S = 1 / (1 + exp(t)) are exact relative to their own size
        # in both tails (an exp that overflows gives the limit 0), so no branch is needed;
        # the temporaries are reused in place (each fresh array of a large segment costs
        # page faults)
        with np.errstate(over="ignore"):
            F = np.exp(np.negative(t))
            S = np.exp(t)
        F += 1.0
        np.divide(1.0, F, out=F)
        S += 1.0
        np.divide(1.0, S, out=S)
        f = np.multiply(F, S)
        score = np.subtract(S, F)  # f'/f = S - F = -tanh(t / 2)
        return F, S, f, score

    def _isf(self, q):
        return -special.logit(q)


class Probit(Link):
    """Standard normal latent error: ``F = Phi``."""

    name = "probit"
    latent = "normal"
    dist = stats.norm()

    def _cdf(self, t):
        return special.ndtr(t)

    def _sf(self, t):
        return special.ndtr(-t)

    def _logcdf(self, t):
        return special.log_ndtr(t)

    def _logsf(self, t):
        return special.log_ndtr(-t)

    def _logpdf(self, t):
        return -0.5 * t * t - _LOG_SQRT_2PI

    def _dlogpdf(self, t):
        return -t

    def _ppf(self, p):
        return special.ndtri(p)

    def _isf(self, q):
        return -special.ndtri(q)


def log1mexp(x):
    """``log(1 - exp(x))`` for ``x <= 0`` without cancellation (Maechler's split)."""
    x = np.asarray(x, dtype=float)
    with np.errstate(divide="ignore"):
        return np.where(x > -np.log(2.0), np.log(-np.expm1(x)), np.log1p(-np.exp(x)))


class CLogLog(Link):
    """Minimum extreme-value (Gumbel-min) latent error: ``F(t) = 1 - exp(-exp(t))``."""

    name = "cloglog"
    latent = "Gumbel (minimum)"
    dist = stats.gumbel_l()

    def _cdf(self, t):
        with np.errstate(over="ignore"):
            return -np.expm1(-np.exp(t))

    def _sf(self, t):
        with np.errstate(over="ignore"):
            return np.exp(-np.exp(t))

    def _logcdf(self, t):
        # log(1 - exp(-e^t)) = t - e^t / 2 + O(e^{2t}) far in the lower tail.
        with np.errstate(over="ignore"):
            return np.where(t < -30, t - 0.5 * np.exp(np.minimum(t, 0)), log1mexp(-np.exp(t)))

    def _logsf(self, t):
        with np.errstate(over="ignore"):
            return -np.exp(t)

    def _logpdf(self, t):
        with np.errstate(over="ignore"):
            return t - np.exp(t)

    def _dlogpdf(self, t):
        with np.errstate(over="ignore"):
            return 1.0 - np.exp(t)

    def _ppf(self, p):
        return np.log(-np.log1p(-p))

    def kernel(self, t):
        with np.errstate(over="ignore"):
            e = np.exp(t)
            return -np.expm1(-e), np.exp(-e), np.exp(t - e), 1.0 - e

    def _isf(self, q):
        return np.log(-np.log(q))


class LogLog(Link):
    """Maximum extreme-value (Gumbel-max) latent error: ``F(t) = exp(-exp(-t))``."""

    name = "loglog"
    latent = "Gumbel (maximum)"
    dist = stats.gumbel_r()

    def _cdf(self, t):
        with np.errstate(over="ignore"):
            return np.exp(-np.exp(-t))

    def _sf(self, t):
        with np.errstate(over="ignore"):
            return -np.expm1(-np.exp(-t))

    def _logcdf(self, t):
        with np.errstate(over="ignore"):
            return -np.exp(-t)

    def _logsf(self, t):
        # log(1 - exp(-e^{-t})) = -t - e^{-t} / 2 + O(e^{-2t}) far in the upper tail.
        with np.errstate(over="ignore"):
            return np.where(t > 30, -t - 0.5 * np.exp(-np.maximum(t, 0)), log1mexp(-np.exp(-t)))

    def _logpdf(self, t):
        with np.errstate(over="ignore"):
            return -t - np.exp(-t)

    def _dlogpdf(self, t):
        with np.errstate(over="ignore"):
            return np.exp(-t) - 1.0

    def _ppf(self, p):
        return -np.log(-np.log(p))

    def kernel(self, t):
        with np.errstate(over="ignore"):
            e = np.exp(-t)
            return np.exp(-e), -np.expm1(-e), np.exp(-t - e), e - 1.0

    def _isf(self, q):
        return -np.log(-np.log1p(-q))


class Cauchit(Link):
    """Standard Cauchy latent error: ``F(t) = 1/2 + arctan(t) / pi``.

    The Cauchy distribution has no mean or variance; :attr:`mean` and :attr:`var` are
    ``nan`` and summaries use the median and interquartile range instead.  Its
    log-likelihood is not concave, so the fitter uses safeguarded steps for it.
    """

    name = "cauchit"
    latent = "Cauchy"
    dist = stats.cauchy()

    def _cdf(self, t):
        # arctan2(1, -t) / pi is exact in the lower tail, where 1/2 + arctan(t)/pi cancels.
        return np.arctan2(1.0, -t) / np.pi

    def _sf(self, t):
        return np.arctan2(1.0, t) / np.pi

    def _logcdf(self, t):
        return np.log(self._cdf(t))

    def _logsf(self, t):
        return np.log(self._sf(t))

    def _logpdf(self, t):
        return -np.log(np.pi) - np.log1p(t * t)

    def _dlogpdf(self, t):
        return -2.0 * t / (1.0 + t * t)

    def _ppf(self, p):
        return np.where(p < 0.5, -1.0 / np.tan(np.pi * p), 1.0 / np.tan(np.pi * (1.0 - p)))

    def _isf(self, q):
        return -self._ppf(q)

    def exact_interval(self, lower, upper):
        """``(arctan(u) - arctan(l)) / pi`` with the difference taken as one arctangent.

        Far in a tail both CDFs are close to ``1 / (pi |t|)`` while the density is
        ``1 / (pi t^2)``: subtracting them loses ``log10 |t|`` more digits than for the other
        links.  ``arctan(u) - arctan(l) = arctan2(u - l, 1 + u l)`` for ``u > l`` on one side
        of zero (the addition formula of the arctangent) has no cancellation; for ``l >= 1``
        it is rewritten with ``1 / u`` and ``1 / l`` so that ``u l`` cannot overflow.
        """
        gap, _ = self._gap(lower, upper)
        return np.maximum(gap, 0.0) / np.pi

    def exact_log_interval(self, lower, upper):
        """``log`` of :meth:`exact_interval`, finite where the probability underflows."""
        gap, small = self._gap(lower, upper)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = np.log(np.maximum(gap, 0.0)) - np.log(np.pi)
            return np.where(np.isnan(small), out, small - np.log(np.pi))

    @staticmethod
    def _gap(lower, upper):
        """``arctan(upper) - arctan(lower)``, and its log where it is tiny (else ``nan``)."""
        lower, upper = np.broadcast_arrays(np.asarray(lower, float), np.asarray(upper, float))
        neg = upper <= 0
        a, b = np.where(neg, -upper, lower), np.where(neg, -lower, upper)  # one side: 0 <= a
        across = (lower < 0) & (upper > 0)
        far = a >= 1
        with np.errstate(all="ignore"):
            y = np.where(far, (b - a) / b / a, b - a)
            x = np.where(far, 1.0 + 1.0 / b / a, 1.0 + b * a)
            same = np.where(np.isinf(b), np.arctan2(1.0, a), np.arctan2(y, x))
            gap = np.where(upper <= lower, 0.0, np.where(across, np.arctan(upper) - np.arctan(lower), same))
            # arctan(z) = z (1 - z^2/3 + ...): log y - log x is exact to 1e-16 for z < 1e-8,
            # and stays finite where y itself underflows.
            tiny = far & ~across & np.isfinite(b) & (b > a) & (gap < 1e-8)
            small = np.where(tiny, np.log((b - a) / b) - np.log(a) - np.log(x), np.nan)
        return gap, small

    @property
    def mean(self) -> float:
        return float("nan")

    @property
    def var(self) -> float:
        return float("nan")


LINKS: dict[str, Link] = {k.name: k() for k in (Logit, Probit, CLogLog, LogLog, Cauchit)}


def link_names() -> tuple[str, ...]:
    """Names of the available links, in display order."""
    return tuple(LINKS)


def get_link(link) -> Link:
    """Return the :class:`Link` for a name (or pass a :class:`Link` through).

    Raises
    ------
    UnknownLinkError
        If the name is not one of :func:`link_names`; the message lists the valid ones.
    """
    from .exceptions import UnknownLinkError

    if isinstance(link, Link):
        return link
    key = str(link).strip().lower()
    if key not in LINKS:
        raise UnknownLinkError(
            f"unknown link {link!r}; choose one of: {', '.join(LINKS)}"
        )
    return LINKS[key]

"""Choices a random-intercept fit makes before and after its Newton steps: start values
from the plain model and the number of quadrature points.

The model and its adaptive Gauss-Hermite likelihood (Pinheiro & Bates 1995; Hedeker &
Gibbons 1994) are in :mod:`ordwidgets.core.grouped_likelihood`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .grouped_likelihood import marginal_sums, shift_derivatives, shift_terms
from .links import get_link

__all__ = ["choose_points", "PointsChoice", "sd_start", "attenuation", "REFERENCE_POINTS", "POINTS_TOL",
           "CANDIDATE_POINTS", "SAMPLED_GROUPS", "covariance_points", "choose_covariance_points", "COVARIANCE_TOL"]

#: :func:`choose_points`: the reference rule, the tolerance on the log-likelihood, the
#: candidates tried in turn and the number of groups looked at.
REFERENCE_POINTS = 50
POINTS_TOL = 1e-4
CANDIDATE_POINTS = tuple(range(3, 50, 2))
SAMPLED_GROUPS = 64
#: :func:`choose_covariance_points`: largest normalised covariance difference accepted,
#: ``|V_ij - V*_ij| / sqrt(V*_ii V*_jj)`` (about 1e-5 of a standard error).
COVARIANCE_TOL = 2e-5


def sd_start(rows, link, plain_params, *, floor=0.2):
    """A start value of the SD from the plain model's optimum ``[theta, beta]``.

    Each group's one-step estimate of its effect is ``d_g = S_g / I_g`` with ``S_g`` and
    ``I_g`` the group's score and information in a common shift at the plain fit; with
    ``var(d_g) ~ sigma^2 + 1 / I_g`` the moment estimate is
    ``sigma^2 = mean(d_g^2 - 1 / I_g)`` (a method-of-moments start, common practice, no
    source), at least ``floor`` (``sigma = 0`` is a stationary point to stay away from).
    """
    m = rows.n_levels - 1
    theta, beta = plain_params[:m], plain_params[m:]
    eta = rows.X @ beta if len(beta) else np.zeros(len(rows.groups))
    s1, s2, _ = shift_derivatives(shift_terms(get_link(link), rows, theta, eta, order=2))
    score, info = rows.group_total(s1), -rows.group_total(s2)
    ok = info > 0
    if not ok.any():
        return floor
    est = float(np.mean((score[ok] / info[ok]) ** 2 - 1.0 / info[ok]))
    return max(np.sqrt(est) if est > 0 else 0.0, floor)


def attenuation(link, sigma):
    """Approximate ratio of conditional to population-averaged effects at SD ``sigma``.

    ``sqrt(1 + sigma^2)`` for the probit (exact: a normal intercept added to a normal latent
    error); ``sqrt(1 + (16 sqrt(3) / (15 pi))^2 sigma^2)`` for the logit (Zeger, Liang &
    Albert 1988, Biometrics 44:1049-1060); ``sqrt(1 + sigma^2 / v)`` with the latent variance
    ``v = pi^2 / 6`` for the Gumbel links and ``v = 1`` for the cauchit (which has none:
    common practice, no source).  Used for start values only.
    """
    name = get_link(link).name
    inv_var = {"probit": 1.0, "logit": (16.0 * np.sqrt(3.0) / (15.0 * np.pi)) ** 2,
               "cloglog": 6.0 / np.pi ** 2, "loglog": 6.0 / np.pi ** 2}.get(name, 1.0)
    return float(np.sqrt(1.0 + inv_var * sigma * sigma))


@dataclass(frozen=True)
class PointsChoice:
    """Outcome of :func:`choose_points`.

    ``points`` chosen; ``error`` the estimated ``|loglik(points) - loglik(reference)|``
    summed over all groups; ``sampled`` the number of groups the estimate is based on.
    """

    points: int
    error: float
    sampled: int


def _sampled_groups(rows, size):
    """The groups the choice of points looks at, and the weight of each in the total.

    All groups when there are at most ``size``; otherwise the ``size // 2`` groups with the
    fewest (weighted) rows, whose conditional densities are the least normal and whose
    quadrature errors the largest, each counted once, and a seeded random sample of the
    others standing for all of them (a stratified estimate of the total).
    """
    G = rows.n_groups
    if G <= size:
        return np.arange(G), np.ones(G)
    small = np.argsort(rows.group_total(np.ones(len(rows.groups))), kind="stable")[: size // 2]
    rest = np.setdiff1d(np.arange(G), small)
    drawn = np.sort(np.random.default_rng(0).choice(rest, size - len(small), replace=False))
    return np.concatenate([small, drawn]), np.concatenate([np.ones(len(small)),
                                                          np.full(len(drawn), len(rest) / len(drawn))])


def choose_points(rows, link, params, *, tol=POINTS_TOL, reference=REFERENCE_POINTS,
                  candidates=CANDIDATE_POINTS, sample=SAMPLED_GROUPS):
    """The fewest quadrature points whose log-likelihood matches a ``reference``-point rule.

    The candidates (3, 5, 7, ... points: odd rules keep a node at each mode) are tried in
    turn on the groups of :func:`_sampled_groups` at ``params``; the first whose estimated
    total error ``sum_g |l_g(points) - l_g(reference)|`` (groups weighted as sampled) is at
    most ``tol`` is returned, else the reference itself.  Adaptive Gauss-Hermite errors fall
    quickly as points are added (Pinheiro & Bates 1995), so the reference stands for the
    integral.

    Returns
    -------
    PointsChoice
    """
    ids, weight = _sampled_groups(rows, sample)
    sub = rows if len(ids) == rows.n_groups else rows.subset(ids)
    ref = marginal_sums(sub, link, params, points=reference, order=0)
    for Q in candidates:
        if Q >= reference:
            break
        out = marginal_sums(sub, link, params, points=Q, order=0, start_modes=ref.modes)
        err = float(np.sum(weight * np.abs(out.group_loglik - ref.group_loglik)))
        if err <= tol:
            return PointsChoice(int(Q), err, len(ids))
    return PointsChoice(int(reference), 0.0, len(ids))


def covariance_points(points):
    """The most points the covariance's fixed-node Hessian uses: ``2 points + 1``, at most
    :data:`REFERENCE_POINTS` unless ``points`` is more.  With nodes held fixed the
    derivatives lose the adaptive rule's accuracy (at the fit's own points the covariance
    can be off by 1e-3 of the SEs in groups of a dozen rows); about twice the points bring
    it back to the accuracy of the differenced exact gradient."""
    return max(points, min(2 * points + 1, REFERENCE_POINTS))


def _weighted_sample(rows, sample):
    """The sampled groups' rows with each group's weight in the total folded into the row
    weights (so sums over them estimate sums over all groups)."""
    ids, weight = _sampled_groups(rows, sample)
    if len(ids) == rows.n_groups:
        return rows
    sub = rows.subset(ids)
    w = weight[sub.groups] if sub.weights is None else sub.weights * weight[sub.groups]
    return type(rows)(sub.X, sub.bounds, sub.groups, sub.n_groups, w)


def _covariance(H):
    try:
        return np.linalg.inv(-H)
    except np.linalg.LinAlgError:
        return np.full_like(H, np.nan)


def choose_covariance_points(rows, link, params, points, *, tol=COVARIANCE_TOL, sample=SAMPLED_GROUPS):
    """Fewest points (``points``, ``points + 2``, ...) whose fixed-node covariance matches
    that of :func:`covariance_points` to ``tol`` (normalised by the SDs), estimated on the
    groups of :func:`_sampled_groups` (weighted as sampled) at the optimum ``params``.

    Large groups have nearly normal conditional densities, and the fit's own points usually
    suffice there (their Hessian is the last Newton step's, so the covariance costs nothing
    more); small groups need more.
    """
    top = covariance_points(points)
    sub = _weighted_sample(rows, sample)
    ref = _covariance(marginal_sums(sub, link, params, points=top, order=2).hess)
    scale = np.sqrt(np.abs(np.outer(np.diag(ref), np.diag(ref))))
    for q in range(points, top, 2):
        got = _covariance(marginal_sums(sub, link, params, points=q, order=2).hess)
        with np.errstate(invalid="ignore", divide="ignore"):
            if np.all(np.abs(got - ref) <= tol * scale):
                return q
    return top

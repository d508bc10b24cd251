"""Sandwich covariances: cluster-robust and design-based (sampling-weight) standard errors.

The model-based covariance of a maximum-likelihood fit is the inverse observed information
``C = (-H)^{-1}``.  When rows are not independent (repeated ratings of one rater, pupils of
one school) or the weights are survey weights rather than counts, the right covariance is
the sandwich

    ``V = C M C``,  ``M = G / (G - 1) * sum_g s_g s_g'``,  ``s_g = sum_{i in g} w_i s_i``

with ``s_i`` the score (gradient of the log-probability) of row ``i`` at the estimate
(White 1980, Econometrica 48:817-838; Liang & Zeger 1986, Biometrika 73:13-22).  The
small-sample factor is ``G / (G - 1)`` for ``G`` clusters (common practice, no source for
preferring it over other finite-cluster factors); no ``(n - 1) / (n - P)`` factor is used.

Sampling weights (Binder 1983, Int. Statist. Rev. 51:279-292): the point estimates solve the
weighted score equations (the same as with frequency weights), and the linearisation
variance is the same sandwich with every row its own cluster (or with the given clusters as
primary sampling units), sampled with replacement.  Multiplying all weights by a constant
multiplies ``H`` by it and ``M`` by its square, so ``V`` and every standard error are
unchanged; with frequency weights ``C`` shrinks instead, as it should.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from .arguments import aligned_values
from .exceptions import OrdinalDataError
from .links import get_link
from .probabilities import interval_logprob

__all__ = ["sandwich_covariance", "row_scores", "with_robust_covariance", "WEIGHT_KINDS", "COVARIANCE_TYPES",
           "likelihood_caveat", "refuse_likelihood_tests"]

WEIGHT_KINDS = ("frequency", "sampling")
COVARIANCE_TYPES = ("model", "cluster", "sampling")


def sandwich_covariance(scores, bread, *, clusters=None, weights=None):
    """``C M C`` from per-row scores and the model-based covariance ``C``.

    Parameters
    ----------
    scores : ndarray, shape (n, P)
        Per-row scores ``d log P_i / d params`` at the estimate (unweighted).
    bread : ndarray, shape (P, P)
        Model-based covariance ``(-H)^{-1}`` (``H`` the weighted Hessian).
    clusters : array_like, shape (n,), optional
        Cluster label of each row; ``None``: every row its own cluster.
    weights : ndarray, shape (n,), optional
        Row weights multiplying the scores.

    Returns
    -------
    cov : ndarray, shape (P, P)
    n_clusters : int
    """
    s = np.asarray(scores, float)
    if weights is not None:
        w = np.asarray(weights, float)
        s = s * w[:, None]
    if clusters is None:
        totals = s if weights is None else s[w > 0]
    else:
        codes, uniques = pd.factorize(pd.Series(np.asarray(clusters)), sort=False)
        totals = np.zeros((len(uniques), s.shape[1]))
        np.add.at(totals, codes, s)
    G = len(totals)
    if G < 2:
        raise OrdinalDataError(f"a sandwich covariance needs at least 2 clusters, got {G}")
    meat = G / (G - 1.0) * (totals.T @ totals)
    C = np.asarray(bread, float)
    return C @ meat @ C, G


def row_scores(res, *, step=1e-6):
    """Per-row score of a fit's training rows at its estimate, shape (n_rows, n_params).

    ``s_i = f(u_i)/P_i * du_i/dparams - f(l_i)/P_i * dl_i/dparams`` with ``(l_i, u_i]`` the
    row's latent interval (:meth:`FitResult.error_bounds`).  For parallel fits the interval
    ends are linear in the parameters and their derivatives are written out; for extended
    fits (per-threshold or scale effects) they are central differences of
    ``error_bounds`` with a relative step ``step``.
    """
    link = get_link(res.link)
    lower, upper = res.error_bounds()
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        logp = interval_logprob(link, lower, upper)
        ru = np.where(np.isfinite(upper), np.exp(link.logpdf(upper) - logp), 0.0)
        rl = np.where(np.isfinite(lower), np.exp(link.logpdf(lower) - logp), 0.0)
    du, dl = _interval_jacobians(res, lower, upper, step)
    return ru[:, None] * du - rl[:, None] * dl


def _interval_jacobians(res, lower, upper, step):
    m = res.n_thresholds
    if res.layout is None:
        tr = res.training
        n = len(tr.y)
        du = np.zeros((n, res.n_params))
        dl = np.zeros((n, res.n_params))
        top, bottom = tr.y < m, tr.y > 0
        du[np.flatnonzero(top), tr.y[top]] = 1.0
        dl[np.flatnonzero(bottom), tr.y[bottom] - 1] = 1.0
        du[:, m:] = -tr.X
        dl[:, m:] = -tr.X
        return du, dl
    return _differenced_jacobians(res, lower, upper, step)


def _differenced_jacobians(res, lower, upper, step):
    params = np.asarray(res.params, float)
    m = res.n_thresholds
    du = np.zeros((len(upper), len(params)))
    dl = np.zeros_like(du)
    for j in range(len(params)):
        h = step * max(1.0, abs(params[j]))
        ends = []
        for sign in (1.0, -1.0):
            x = params.copy()
            x[j] += sign * h
            ends.append(res.error_bounds(thresholds=x[:m], coefficients=x[m:]))
        with np.errstate(invalid="ignore"):
            dl[:, j] = np.where(np.isfinite(lower), (ends[0][0] - ends[1][0]) / (2 * h), 0.0)
            du[:, j] = np.where(np.isfinite(upper), (ends[0][1] - ends[1][1]) / (2 * h), 0.0)
    return du, dl


def cluster_labels(res, cluster, data):
    """Cluster label of each training row of ``res`` from a column name, an array (by
    position: one per row of ``data`` or per training row) or a Series (by its labels)."""
    index = res.training.index
    if isinstance(cluster, str):
        if data is None or cluster not in data.columns:
            raise OrdinalDataError(f"cluster column {cluster!r} is not in the data")
        labels = data.loc[index, cluster]
    elif isinstance(cluster, pd.Series) and not (data is not None and cluster.index.equals(data.index)):
        labels = aligned_values("fit", "cluster", cluster, index)
    else:
        arr = np.asarray(cluster)
        if data is not None and len(arr) == len(data):
            labels = pd.Series(arr, index=data.index).loc[index]
        elif len(arr) == len(index):
            labels = pd.Series(arr, index=index)
        else:
            raise OrdinalDataError(f"cluster has {len(arr)} values for {len(index)} rows")
    if labels.isna().any():
        name = cluster if isinstance(cluster, str) else "cluster"
        raise OrdinalDataError(f"cluster column {name!r} has {int(labels.isna().sum())} missing values in the rows fitted")
    return labels.to_numpy()


def with_robust_covariance(res, data=None, *, cluster=None, weight_kind="frequency"):
    """A copy of ``res`` whose covariance is the cluster-robust or sampling sandwich.

    Parameters
    ----------
    res : FitResult
        A fit that keeps its training rows.
    data : pandas.DataFrame, optional
        The fitted frame (needed when ``cluster`` is a column name).
    cluster : str or array_like, optional
        Cluster column (or labels for every row of ``data``).
    weight_kind : {"frequency", "sampling"}

    Returns
    -------
    FitResult
        ``options["covariance_type"]`` is ``"cluster"`` (clusters given), ``"sampling"``
        (sampling weights, every row its own unit) or ``"model"``.
    """
    check_weight_kind(weight_kind)
    if cluster is None and weight_kind == "frequency":
        return res
    if res.training is None or res.training.is_sample:
        raise OrdinalDataError("robust standard errors need all training rows in memory (not a Dask sample)")
    labels = None if cluster is None else cluster_labels(res, cluster, data)
    kind = "cluster" if labels is not None else "sampling"
    cov, G = sandwich_covariance(row_scores(res), res.cov, clusters=labels, weights=res.training.weights)
    options = {**res.options, "covariance_type": kind, "n_clusters": int(G), "weight_kind": weight_kind,
               "cluster": cluster if isinstance(cluster, str) else None}
    return dataclasses.replace(res, cov=cov, options=options)


def likelihood_caveat(res):
    """Why likelihood-ratio statistics of ``res`` are not valid, or ``None``.

    They compare log-likelihoods that assume independent rows (with frequency weights):
    ``2 (loglik_1 - loglik_0)`` follows chi-squared only then.  With a cluster-robust
    covariance the rows within a cluster are taken as dependent, and with sampling weights
    the log-likelihood is a pseudo-likelihood; in both cases the statistic is not
    chi-squared (too large when rows within a cluster are positively correlated), so
    likelihood-ratio tests and profile-likelihood intervals would ignore the covariance
    the fit reports.  Wald tests and intervals use that covariance.
    """
    kind = getattr(res, "covariance_type", "model")
    if kind == "cluster":
        col = res.options.get("cluster")
        named = f" (cluster={col!r})" if col else ""
        return (f"this fit's covariance is cluster-robust{named}, but likelihood-ratio statistics assume "
                "independent rows")
    if kind == "sampling":
        return ("this fit has sampling weights (weight_kind='sampling'): its log-likelihood is a "
                "pseudo-likelihood, and likelihood-ratio statistics assume independent rows with frequency weights")
    return None


def refuse_likelihood_tests(what, *fits, error=OrdinalDataError):
    """Raise ``error`` for ``what`` when any of ``fits`` has a caveat
    (:func:`likelihood_caveat`), pointing to the Wald alternative."""
    for res in fits:
        why = likelihood_caveat(res)
        if why:
            raise error(f"{what}: {why}; use Wald tests or intervals (method='wald', "
                                   "term_tests(likelihood_ratio=False)), which use the robust covariance")


def check_weight_kind(weight_kind):
    """Refuse anything but ``"frequency"`` or ``"sampling"``."""
    if weight_kind not in WEIGHT_KINDS:
        raise OrdinalDataError(f"weight_kind must be 'frequency' or 'sampling', got {weight_kind!r}")

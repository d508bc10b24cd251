"""Log-likelihood at edited thresholds, updated only where an edit can change it.

Moving threshold ``theta_j`` changes the probability of rows in categories ``j`` and ``j+1``
only (``P(Y = k) = F(theta_k - eta) - F(theta_{k-1} - eta)``), so the per-row
log-probabilities of the other rows are kept.  The linear predictor is fixed while
thresholds are edited, so it is computed once per fit.  Values equal
:meth:`FitResult.loglik_at` (the reference in the tests).
"""
from __future__ import annotations

import numpy as np

from .core.probabilities import interval_logprob

__all__ = ["RowLoglik"]


class RowLoglik:
    """Per-row log-probabilities of a parallel fit at the last thresholds asked for."""

    def __init__(self, res):
        tr = res.training
        self.link, self.weights = res.link, tr.weights
        self.eta = res.linear_predictor()
        self.rows = [np.flatnonzero(tr.y == k) for k in range(len(res.levels))]  # linear in n
        self.theta = res.thresholds.to_numpy().copy()
        self.logp = interval_logprob(res.link, *res.error_bounds())

    def at(self, theta) -> float:
        """Log-likelihood at ``theta`` (recomputing only the rows next to moved thresholds)."""
        theta = np.asarray(theta, float)
        moved = np.flatnonzero(theta != self.theta)
        cuts = np.concatenate([[-np.inf], theta, [np.inf]])
        for k in sorted(set(moved) | set(moved + 1)):
            rows = self.rows[k]
            self.logp[rows] = interval_logprob(self.link, cuts[k] - self.eta[rows], cuts[k + 1] - self.eta[rows])
        self.theta = theta.copy()
        return float(self.logp.sum() if self.weights is None else self.weights @ self.logp)

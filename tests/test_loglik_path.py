"""The log-likelihood-only path of the designs (line-search trial points) against the sums path.

``SortedDesign.loglik`` must equal ``SortedDesign.sums(..., order=0)[0]`` (which is itself
checked against the plain CDF-difference likelihood of ``tests/reference.py`` and against
scipy.differentiate in ``test_core_fit`` and ``test_extended_engine``); here both are also
compared with the reference likelihood written from McCullagh (1980), eq. (2.3).
"""
from __future__ import annotations

import numpy as np
import pytest

from ordwidgets.core.engine import maximise
from ordwidgets.core.objective import row_logp, row_terms, sort_by_category
from ordwidgets.core.sorted_design import SortedDesign

from . import reference as R

LINKS = ["logit", "probit", "cloglog", "loglog", "cauchit"]


def _plain(link, zero_weights=False):
    X, y = R.simulate(400, [0.6, -0.4], [-0.8, 0.2, 1.1], link=link, seed=3)
    order, bounds = sort_by_category(y, 4)
    w = np.random.default_rng(4).integers(1, 4, size=len(y)).astype(float)
    if zero_weights:
        w[::7] = 0.0
    return X, y, w, SortedDesign(np.asfortranarray(X[order]), bounds, w[order], chunk=61)  # many segments


@pytest.mark.parametrize("link", LINKS)
@pytest.mark.parametrize("zero_weights", [False, True])
def test_loglik_path_equals_the_sums_path_and_the_reference(link, zero_weights):
    X, y, w, design = _plain(link, zero_weights)
    near = np.array([-0.7, 0.1, 1.3, 0.5, -0.3])
    for params in (near, np.array([-2.0, -1.9, 3.0, 1.7, 0.8])):
        ll = design.loglik(link, params)
        assert ll == pytest.approx(design.sums(link, params, order=0)[0], rel=1e-12, abs=1e-12)
        assert ll == pytest.approx(design.sums(link, params, order=2)[0], rel=1e-12, abs=1e-12)
    # The reference subtracts CDFs directly, which is exact enough only away from the tails.
    assert design.loglik(link, near) == pytest.approx(R.loglik(near, X, y, 3, link, w), rel=1e-12)


@pytest.mark.parametrize("link", LINKS)
def test_loglik_path_in_the_far_tails(link):
    # Effects of 60 latent units push many rows' probabilities below 1e-280, where both paths
    # switch to log space; they must still agree (and stay finite).
    _, _, _, design = _plain(link)
    params = np.array([-0.7, 0.1, 1.3, 60.0, -45.0])
    ll = design.loglik(link, params)
    assert np.isfinite(ll)
    assert ll == pytest.approx(design.sums(link, params, order=0)[0], rel=1e-12)


@pytest.mark.parametrize("link", LINKS)
def test_row_logp_is_the_logp_of_row_terms(link):
    rng = np.random.default_rng(5)
    lower = rng.normal(scale=30, size=2000)
    upper = lower + rng.exponential(scale=2.0, size=2000)
    for up, lo in ((upper, lower), (upper, None), (None, lower)):
        np.testing.assert_array_equal(row_logp(link, upper=up, lower=lo),
                                      row_terms(link, upper=up, lower=lo)["logp"])


class _SumsOnly:
    """A design with only the required protocol members (no ``loglik``): the fallback."""

    def __init__(self, design, calls):
        self._d, self.calls = design, calls
        self.n_params = design.n_params

    def counts(self):
        return self._d.counts()

    def sums(self, link, params, *, order=2):
        self.calls.append(("sums", order))
        return self._d.sums(link, params, order=order)


class _WithLoglik(_SumsOnly):
    def loglik(self, link, params):
        self.calls.append(("loglik", 0))
        return self._d.loglik(link, params)


class _FarStart:
    """Starts the fit far from the optimum so that the full Newton step is rejected."""

    def start(self, link):
        return np.array([-0.8, 0.2, 1.1, 4.0, -4.0])


@pytest.mark.parametrize("link", ["logit", "cauchit"])
def test_engine_uses_loglik_at_trial_points_and_designs_without_it_fall_back(link):
    _, _, _, design = _plain(link)
    lean_calls, plain_calls = [], []
    lean = type("Lean", (_FarStart, _WithLoglik), {})(design, lean_calls)
    fallback = type("Fallback", (_FarStart, _SumsOnly), {})(design, plain_calls)
    a, b = maximise(lean, link), maximise(fallback, link)
    assert a.converged and b.converged
    np.testing.assert_allclose(a.params, b.params, rtol=1e-12, atol=1e-12)
    assert a.loglik == pytest.approx(b.loglik, rel=1e-13)
    assert ("loglik", 0) in lean_calls and ("sums", 0) not in lean_calls  # trial points: loglik only
    assert ("sums", 0) in plain_calls  # the fallback asks sums for the value alone
    assert len(lean_calls) == len(plain_calls)

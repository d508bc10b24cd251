"""Extended fits on the sorted-segment design agree with the dense design and the reference.

Sources: ``tests/reference_extended.py`` (the published likelihood written with scipy.stats
CDFs, Peterson & Harrell 1990 and McCullagh 1980; scipy.differentiate for its derivatives),
and the dense row-by-row design of :mod:`ordwidgets.core.layout` (``ExtendedDesign``, which
builds every row's full Jacobian) maximised by the same engine.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import differentiate

import ordwidgets as ow
from ordwidgets.core.engine import maximise, standardise, user_scale_matrix
from ordwidgets.core.layout import ExtendedDesign, ModelLayout
from ordwidgets.core.objective import sort_by_category
from ordwidgets.core.sorted_design import SortedDesign

from . import reference_extended as RX
from .reference import DISTS

LINKS = ["logit", "probit", "cloglog", "loglog", "cauchit"]


def _data(link, n=500, seed=0):
    """x1 parallel; x2 and binary g with per-threshold effects; z on the scale."""
    rng = np.random.default_rng(seed)
    x1, x2, z = rng.normal(size=n), rng.normal(size=n), rng.uniform(-1, 1, n)
    g = rng.integers(0, 2, n)
    e = DISTS[link].rvs(size=n, random_state=rng) * np.exp(0.3 * z)
    y = np.searchsorted([-1.0, 0.2, 1.3], 0.6 * x1 - 0.4 * x2 + 0.5 * g + e)
    y = np.where((g == 1) & (y == 0) & (rng.uniform(size=n) < 0.3), 1, y)
    return pd.DataFrame({"y": y, "x1": x1, "x2": x2, "g": g, "z": z})


LAYOUT = ModelLayout(("x1", "x2", "g", "z"), (0,), (1, 2), (3,), ("0->1", "1->2", "2->3"))


@pytest.mark.parametrize("link", LINKS)
def test_segment_sums_match_the_independent_likelihood(link):
    df = _data(link, n=150, seed=1)
    D = df[["x1", "x2", "g", "z"]].to_numpy(float)
    y = df.y.to_numpy()
    w = np.random.default_rng(2).integers(1, 4, len(df)).astype(float)
    order, bounds = sort_by_category(y, 4)
    X, W, Z = LAYOUT.arrays(D[order])
    design = SortedDesign(np.asfortranarray(X), bounds, w[order], chunk=17, W=W, Z=Z)  # many segments
    params = np.array([-1.0, 0.2, 1.4, 0.6, -0.3, -0.2, -0.1, 0.5, 0.4, 0.2, 0.25])
    ref = lambda v: RX.loglik(v, D[:, [0]], D[:, [1, 2]], D[:, [3]], y, 3, link, w)  # noqa: E731
    ll, g, H = design.sums(link, params)
    assert ll == pytest.approx(ref(params), rel=1e-12)
    np.testing.assert_allclose(g, differentiate.jacobian(ref, params, initial_step=0.05).df, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(H, differentiate.hessian(ref, params, initial_step=0.05).ddf, rtol=1e-5, atol=1e-5)
    assert design.sums(link, params, order=0)[0] == ll
    np.testing.assert_allclose(design.sums(link, params, order=1)[1], g, rtol=1e-13, atol=1e-12)


def _dense_fit(D, y, link):
    mean, sd = standardise(D)
    dense = ExtendedDesign(LAYOUT, (D - mean) / sd, y, None, scale_design=D / sd)
    return maximise(dense, link, to_user=user_scale_matrix(LAYOUT, mean, sd), names=LAYOUT.param_names())


@pytest.mark.parametrize("link", LINKS)
def test_extended_fit_agrees_with_the_dense_design_and_the_reference(link):
    df = _data(link)
    res = ow.fit("y ~ x1 + x2 + g", df, link=link, nonparallel=["x2", "g"], scale_by=["z"])
    assert res.converged
    assert res.names == LAYOUT.param_names()
    D = df[["x1", "x2", "g", "z"]].to_numpy(float)
    y = df.y.to_numpy()
    dense = _dense_fit(D, y, link)
    assert dense.converged
    assert res.loglik == pytest.approx(dense.loglik, rel=1e-9)
    np.testing.assert_allclose(res.params, dense.params, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(res.cov, dense.cov, rtol=1e-6, atol=1e-9)
    # the optimum of the independent likelihood: same value, zero slope
    ref = lambda v: RX.loglik(v, D[:, [0]], D[:, [1, 2]], D[:, [3]], y, 3, link)  # noqa: E731
    assert res.loglik == pytest.approx(ref(res.params), rel=1e-12)
    slope = differentiate.jacobian(ref, res.params, initial_step=0.01).df
    assert np.max(np.abs(slope)) < 1e-4

"""Residuals of location-scale and non-parallel fits.

Liu & Zhang (2018, J. Amer. Statist. Assoc. 113:845-854): surrogate residuals standardised by
the fitted scale are identically distributed under a correct location-scale model; for
models without a single latent variable the jitter on the probability scale is uniform.
Li & Shepherd (2012, Biometrika 99:473-480): the probability-scale residual is the
conditional mean of ``2U - 1`` for that jitter ``U``.
"""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

import ordwidgets as ow

from .residual_helpers import row_of

N = 20_000
CUTS = np.array([-1.0, 0.3, 1.6])


@pytest.fixture(scope="module")
def spread_data():
    """``y* = x + exp(0.4 z) e`` with logistic ``e``: the scale grows with ``z``."""
    rng = np.random.default_rng(20)
    x, z = rng.normal(size=N), rng.normal(size=N)
    latent = x + np.exp(0.4 * z) * rng.logistic(size=N)
    return pd.DataFrame({"y": np.searchsorted(CUTS, latent), "x": x, "z": z})


@pytest.fixture(scope="module")
def nonparallel_data():
    """``P(Y <= j) = F(theta_j - 0.8 x - gamma_j w)`` with ``gamma = (0.2, 0.5, 0.8)``;
    ``w`` uniform on (-2, 2) keeps the cumulative probabilities from crossing."""
    rng = np.random.default_rng(21)
    x, w = rng.normal(size=N), rng.uniform(-2, 2, size=N)
    cum = stats.logistic.cdf(CUTS[None, :] - 0.8 * x[:, None] - np.outer(w, [0.2, 0.5, 0.8]))
    y = (rng.random(N)[:, None] > cum).sum(axis=1)
    return pd.DataFrame({"y": y, "x": x, "w": w})


def test_a_scale_fit_removes_the_spread_signal(spread_data):
    plain = ow.fit("y ~ x + z", spread_data).residual_diagnostics(seed=22)
    scaled_fit = ow.fit("y ~ x + z", spread_data, scale_by=["z"])
    scaled = scaled_fit.residual_diagnostics(seed=22)
    assert row_of(plain, "spread", "z")["p_value"] < 1e-6
    assert row_of(scaled, "spread", "z")["p_value"] > 1e-3
    assert "standardised by the fitted scale" in scaled.description


def test_standardised_residuals_of_a_scale_fit_follow_the_link(spread_data):
    r = ow.fit("y ~ x + z", spread_data, scale_by=["z"]).surrogate_residuals(seed=23)
    assert stats.kstest(r, stats.logistic.cdf).pvalue > 1e-3
    assert abs(r.var() - np.pi**2 / 3) < 5 * (np.pi**2 / 3) * np.sqrt((1.2 + 2) / N)  # excess kurtosis 1.2


def test_non_parallel_fit_uses_the_probability_scale_jitter(nonparallel_data):
    res = ow.fit("y ~ x + w", nonparallel_data, nonparallel=["w"])
    d = res.residual_diagnostics(x="w", seed=24)
    assert d.kind == "probability" and "non-parallel" in d.description
    r = d.residuals[:, 0]
    assert np.all((r >= -0.5) & (r <= 0.5))
    assert stats.kstest(r, stats.uniform(loc=-0.5, scale=1).cdf).pvalue > 1e-3
    assert not d.tests["flagged"].any(), d.tests


def test_probability_scale_residual_is_twice_the_mean_jitter(nonparallel_data):
    res = ow.fit("y ~ x + w", nonparallel_data.iloc[:2000], nonparallel=["w"])
    jitter = res.surrogate_residuals(draws=400, seed=25)
    psr = res.probability_scale_residuals()
    # each row: mean of 400 uniforms on an interval of width <= 1, sd <= 1 / sqrt(12 * 400)
    assert np.all(np.abs(2 * jitter.mean(axis=1) - psr) < 2 * 5 / np.sqrt(12 * 400))

"""Checks of each panel's marks against fresh computations outside the widgets.

Each check names its reference: scipy.stats densities, the core's category probabilities
with a hand-built linear predictor, the core's surrogate residuals and diagnostics.
"""
import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow
from ordwidgets._spec import grid_values

from tests.ow_sim import FORMULA, data, html_values, make_panel, manual_eta, scenario_rows, simulate

__all__ = ["FORMULA", "data", "make_panel", "simulate", "manual_eta", "scenario_rows", "html_values",
           "check_threshold_panel", "check_explorer", "check_residual_panel"]


def check_threshold_panel(p):
    """Density, regions, rules, labels, sliders and readout of a ThresholdPanel."""
    st = p.state
    eta = manual_eta(st.fit, scenario_rows(st))[0]
    # reference: scipy.stats density of the link's latent distribution, shifted by eta
    np.testing.assert_allclose(p.curve.y, st.fit.link.dist.pdf(p.curve.x - eta), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(p.regions.y, st.fit.link.dist.pdf(p.regions.x - eta), rtol=1e-9, atol=1e-12)
    np.testing.assert_array_equal(np.atleast_2d(p.rules.x)[:, 0], st.theta)
    # reference: the core's category probabilities at the shown thresholds
    probs = ow.category_probabilities(st.fit.link, st.theta, [eta])[0]
    assert list(p.labels.text) == [f"{q:.1%}" for q in probs]
    assert [s.value for s in p.sliders] == list(st.thresholds)
    assert f"{st.fit.loglik_at(thresholds=st.theta):.8g}" in p.readout.value


def reference_probs(st):
    """Probabilities along the focus grid from ow.category_probabilities and manual_eta."""
    categorical = st.is_categorical(st.focus)
    values = grid_values(st.frame[st.focus], categorical)
    frame = scenario_rows(st, n=len(values))
    frame[st.focus] = values
    return values, ow.category_probabilities(st.fit.link, st.theta, manual_eta(st.fit, frame))


def check_explorer(p):
    """Stacked bands, lines, marker and what-if table of a ProbabilityExplorer."""
    st = p.state
    values, probs = reference_probs(st)
    stacked = np.asarray(p.bands.y)
    np.testing.assert_allclose(stacked[0], 0.0)
    np.testing.assert_allclose(stacked[1:], np.cumsum(probs, axis=1).T.clip(0, 1), atol=1e-12)
    np.testing.assert_allclose(np.asarray(p.lines.y), probs.T, atol=1e-12)
    value = st.scenario[st.focus]
    expected_x = values.index(value) if st.is_categorical(st.focus) else value
    assert np.ravel(p.marker.x)[0] == pytest.approx(expected_x)
    both = pd.concat([scenario_rows(st, "baseline"), scenario_rows(st)], ignore_index=True)
    ref = ow.category_probabilities(st.fit.link, st.theta, manual_eta(st.fit, both))
    np.testing.assert_allclose(p.whatif_probabilities(), ref, atol=1e-12)
    score = ref @ np.arange(1, ref.shape[1] + 1)
    assert f"{score[1] - score[0]:+.3f}" in p.whatif.value


def check_residual_panel(p):
    """Points, QQ points and trend of a ResidualPanel at the shown thresholds."""
    from ordwidgets.core import diagnostics, residuals

    st = p.state
    thresholds = st.theta if st.edited else None
    # reference: the core's surrogate residuals with the same seed and thresholds
    r = residuals.surrogate_residuals(st.fit, draws=st.residual_draws, seed=st.residual_seed,
                                      thresholds=thresholds).reshape(st.fit.n_rows, -1)
    shown = diagnostics.display_rows(st.fit.n_rows, max_points=5000, seed=0)
    np.testing.assert_allclose(p.points.y, r[shown, 0], atol=1e-12)
    assert len(p.points.x) == min(5000, st.fit.n_rows)
    k = min(200, st.fit.n_rows)
    probs = (np.arange(k) + 0.5) / k
    ref = residuals.reference_distribution(st.fit.link, residuals.surrogate_kind(st.fit))
    if ref.link is not None:  # reference: scipy.stats quantiles of the latent distribution
        np.testing.assert_allclose(p.qq.x, st.fit.link.dist.ppf(probs) - ref.shift, rtol=1e-9, atol=1e-12)
    if r.shape[1] == 1:  # reference: numpy order statistics within one row of the probability
        n = st.fit.n_rows
        lo = np.quantile(r[:, 0], np.clip(probs - 1 / n, 0, 1), method="lower")
        hi = np.quantile(r[:, 0], np.clip(probs + 1 / n, 0, 1), method="higher")
        assert np.all((lo <= p.qq.y) & (p.qq.y <= hi)) and np.all(np.isin(p.qq.y, r[:, 0]))
    x, _ = p.x_values()
    trend = diagnostics.binned_means(x, r, bins=20)
    np.testing.assert_allclose(p.trend.y, trend["mean"].to_numpy(), atol=1e-12)

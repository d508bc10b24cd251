"""Residuals of frequency-weighted fits behave as on the expanded data; residuals against a factor
are summarised per level."""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

import ordwidgets as ow
from ordwidgets.core.residuals import unit_positions

SEEDS = range(100)


def cell_data(n=1500, seed=3):
    """A correct logistic model with a four-valued number and a factor, and its cell counts."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"x": rng.integers(0, 4, n).astype(float), "g": rng.choice(["a", "b", "c"], n)})
    eta = 0.7 * frame.x + np.where(frame.g == "b", 0.8, 0.0)
    frame["y"] = np.digitize(eta + rng.logistic(size=n), [0.5, 1.6, 2.8])
    cells = frame.groupby(["x", "g", "y"]).size().rename("count").reset_index()
    return frame, cells


@pytest.fixture(scope="module")
def fits():
    frame, cells = cell_data()
    expanded = ow.fit("y ~ x + C(g)", frame)
    weighted = ow.fit("y ~ x + C(g)", cells, weights="count")
    return expanded, weighted, cells


def test_the_two_fits_are_the_same_model(fits):
    expanded, weighted, cells = fits
    assert len(cells) < 60 and weighted.n_obs == expanded.n_rows
    # reference: the fit on the expanded rows (identical likelihood)
    assert weighted.loglik == pytest.approx(expanded.loglik, abs=1e-8)
    np.testing.assert_allclose(weighted.params, expanded.params, atol=1e-6)


def test_one_residual_per_counted_unit(fits):
    expanded, weighted, cells = fits
    d = weighted.residual_diagnostics(seed=1)
    assert d.counted == "counted units" and d.residuals.shape == (expanded.n_rows, 1)
    np.testing.assert_array_equal(np.bincount(d.units, minlength=len(cells)), cells["count"].to_numpy())
    lower, upper = weighted.error_bounds()  # every residual lies in its own row's interval
    r = d.residuals[:, 0] + d.reference.shift
    assert np.all((lower[d.units] <= r) & (r <= upper[d.units]))
    assert "counted unit" in d.description


def flag_rates(res, alpha):
    """Per test: share of seeds flagged, and the distance test's p-values."""
    tables = [res.residual_diagnostics(seed=s, alpha=alpha).tests for s in SEEDS]
    flags = pd.concat([t.set_index(["test", "against"]).flagged for t in tables], axis=1).mean(axis=1)
    pvals = np.array([t.loc[t.test == "distance", "p_value"].iloc[0] for t in tables])
    return flags, pvals


def test_aggregated_and_expanded_flag_alike_over_seeds(fits):
    """The same data, aggregated or expanded, give the same flags in distribution over seeds.

    The data are fixed, so a test may flag in many seeds for both (a feature of this sample);
    what must agree is the rate.  Binomial tolerance: the difference of two rates over
    ``k`` seeds has standard deviation at most ``sqrt(2 * 0.25 / k)``; four of them allowed.
    """
    expanded, weighted, _ = fits
    alpha = 0.05
    flags_w, p_w = flag_rates(weighted, alpha)
    flags_e, p_e = flag_rates(expanded, alpha)
    pooled = (flags_w + flags_e) / 2
    sd = np.sqrt(2 * np.maximum(pooled * (1 - pooled), 1 / len(SEEDS)) / len(SEEDS))
    assert (np.abs(flags_w - flags_e) <= 4 * sd).all(), pd.concat([flags_w, flags_e], axis=1)
    # The distance test's p-values have the same distribution (two-sample Kolmogorov-Smirnov).
    assert stats.ks_2samp(p_w, p_e).pvalue > 0.001
    # not p ~ 0 with everything flagged, as when one draw per row was weighted by its count
    assert np.median(p_w) > 0.05 and flags_w.loc[("distance", "link distribution")] <= 0.3


def test_weights_that_are_not_counts_give_plots_but_no_tests(fits):
    _, _, cells = fits
    scaled = cells.assign(share=cells["count"] / 7.0)
    res = ow.fit("y ~ x + C(g)", scaled, weights="share")
    d = res.residual_diagnostics(seed=2)
    assert d.counted == "weighted rows" and d.residuals.shape == (len(cells), 1)
    assert d.tests.p_value.isna().all() and not d.tests.flagged.any()
    assert d.tests.message.str.contains("not whole counts").all()
    with pytest.raises(ow.OrdinalDataError, match="whole-number"):
        unit_positions(res)


def test_a_sample_of_units_above_the_cap(fits):
    _, weighted, cells = fits
    units = unit_positions(weighted, max_units=500, seed=4)
    per_row = np.bincount(units, minlength=len(cells))
    assert len(units) == 500 and np.all(per_row <= cells["count"].to_numpy())
    # reference: a simple random sample takes each row's units in proportion (hypergeometric mean)
    expected = 500 * cells["count"].to_numpy() / cells["count"].sum()
    big = expected > 30
    assert np.all(np.abs(per_row[big] - expected[big]) < 5 * np.sqrt(expected[big]))


# ---- residuals against a factor --------------------------------------------------------------------
def test_factor_gets_per_level_means_and_an_analysis_of_variance(fits):
    expanded, _, _ = fits
    frame = expanded.training.frame
    d = expanded.residual_diagnostics(x="g", seed=5)
    assert d.x_levels == ("a", "b", "c")
    r = d.residuals[:, 0]
    # reference: pandas group means of the residuals by level
    means = pd.Series(r).groupby(frame.g.to_numpy()).mean()
    np.testing.assert_allclose(d.versus_x["mean"].to_numpy(), means.to_numpy(), rtol=1e-12)
    assert list(d.versus_x["level"]) == ["a", "b", "c"]
    v = d.reference.cdf(r) - 0.5
    groups = [v[frame.g.to_numpy() == lv] for lv in "abc"]
    trend = d.tests[(d.tests.test == "trend") & (d.tests.against == "g")].iloc[0]
    spread = d.tests[(d.tests.test == "spread") & (d.tests.against == "g")].iloc[0]
    # reference: scipy's one-way analysis of variance on v and on |v|
    assert trend.p_value == pytest.approx(stats.f_oneway(*groups).pvalue, rel=1e-9)
    assert spread.p_value == pytest.approx(stats.f_oneway(*[np.abs(a) for a in groups]).pvalue, rel=1e-9)
    assert "analysis of variance" in trend.method


def test_factor_test_does_not_depend_on_the_level_order(fits):
    expanded, _, _ = fits
    frame = expanded.training.frame
    tests = []
    for order in (["a", "b", "c"], ["c", "a", "b"]):
        x = pd.Series(pd.Categorical(frame.g, categories=order), name="g")
        t = expanded.residual_diagnostics(x=x, seed=6).tests
        tests.append(t[t.against == "g"].p_value.to_numpy())
    np.testing.assert_allclose(tests[0], tests[1], rtol=1e-10)


def test_factor_with_weights_counts_units(fits):
    expanded, weighted, _ = fits
    d = weighted.residual_diagnostics(x="g", seed=7)
    assert d.versus_x["count"].sum() == expanded.n_rows  # units, not rows
    counts = expanded.training.frame.g.value_counts().sort_index()  # reference: the expanded rows
    np.testing.assert_array_equal(d.versus_x["count"].to_numpy(), counts.to_numpy())


def test_panel_states_units_and_per_level_rows(fits):
    _, weighted, cells = fits
    d = ow.dashboard(weighted, background=False)
    rp = d.residual_panel
    assert f"all {int(cells['count'].sum()):,} units of the {len(cells):,} weighted rows" in rp.count.value
    assert f"{len(rp.view.rows):,} of {int(cells['count'].sum()):,} points" in rp.count.value
    rp.x_choice.value = "g"
    assert "analysis of variance" in rp.summary.value and "mean residual, g = b" in rp.summary.value
    rp.state.selection = (0,)
    assert "1 selected rows" in rp.table.value
    d.close()

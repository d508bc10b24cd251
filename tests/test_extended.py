"""Per-threshold (partial proportional odds) and scale (location-scale) effects."""
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import differentiate

import ordwidgets as ow
from ordwidgets.core.extended_fit import crossing_in_range, fit_layout
from ordwidgets.core.layout import ExtendedDesign, ModelLayout

from . import reference_extended as RX
from .reference import DISTS

LINKS = ["logit", "probit", "cloglog", "loglog", "cauchit"]


def sim_extended(n=300, seed=0, link="logit"):
    """Latent simulation: x parallel, binary g with a threshold-dependent effect, z on scale."""
    rng = np.random.default_rng(seed)
    x, z = rng.normal(size=n), rng.uniform(-1, 1, n)
    g = rng.integers(0, 2, n)
    e = DISTS[link].rvs(size=n, random_state=rng) * np.exp(0.4 * z)
    y = np.searchsorted([-1.0, 0.3, 1.5], 0.7 * x + 0.5 * g + e)
    y = np.where((g == 1) & (y == 0) & (rng.uniform(size=n) < 0.4), 1, y)  # non-parallel g
    return pd.DataFrame({"y": y, "x": x, "g": g, "z": z})


def layout_three_groups():
    return ModelLayout(("x", "g", "z"), (0,), (1,), (2, 0), ("0->1", "1->2", "2->3"))


@pytest.mark.parametrize("link", LINKS)
def test_loglik_gradient_and_hessian_match_independent_reference(link):
    # Log-likelihood against plain CDF differences (reference_extended.loglik); gradient and
    # Hessian against scipy.differentiate applied to that independent log-likelihood.
    df = sim_extended(n=100, seed=1)
    D = df[["x", "g", "z"]].to_numpy(float)
    w = np.random.default_rng(2).integers(1, 4, len(df)).astype(float)
    layout = layout_three_groups()
    design = ExtendedDesign(layout, D, df.y.to_numpy(), w)
    params = np.array([-1.0, 0.2, 1.4, 0.6, 0.3, 0.5, 0.8, 0.3, -0.2])
    X, W, Z = D[:, [0]], D[:, [1]], D[:, [2, 0]]
    ref = lambda v: RX.loglik(v, X, W, Z, df.y.to_numpy(), 3, link, w)  # noqa: E731
    ll, g, H = design.sums(link, params)
    assert ll == pytest.approx(ref(params), rel=1e-12)
    np.testing.assert_allclose(g, differentiate.jacobian(ref, params, initial_step=0.05).df, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(H, differentiate.hessian(ref, params, initial_step=0.05).ddf, rtol=1e-5, atol=1e-5)


def _empirical_cumulative(df):
    counts = pd.crosstab(df.g, df.y)
    return (counts.cumsum(axis=1).div(counts.sum(axis=1), axis=0)).to_numpy()


@pytest.mark.parametrize("link", LINKS)
def test_saturated_nonparallel_reproduces_group_cumulative_proportions(link):
    # Closed form: one binary predictor with per-threshold effects leaves each group its own
    # free cumulative probabilities, so the MLE equals the empirical cumulative proportions.
    rng = np.random.default_rng(3)
    g = rng.integers(0, 2, 400)
    y = np.where(g == 1, rng.choice(4, 400, p=[0.1, 0.2, 0.3, 0.4]), rng.choice(4, 400, p=[0.4, 0.1, 0.3, 0.2]))
    df = pd.DataFrame({"y": y, "g": g})
    res = ow.fit("y ~ g", df, link=link, nonparallel=["g"])
    assert res.converged
    pred = res.predict(pd.DataFrame({"g": [0, 1]}), kind="cumulative").to_numpy()
    np.testing.assert_allclose(pred, _empirical_cumulative(df), atol=1e-6)  # Newton stops at decrement 1e-10


@pytest.mark.parametrize("link", LINKS)
def test_saturated_location_scale_reproduces_group_cumulative_proportions(link):
    # Closed form: with three levels, a binary predictor in location and scale has two free
    # parameters per group, as many as the group's two cumulative proportions.
    rng = np.random.default_rng(4)
    g = rng.integers(0, 2, 500)
    y = np.where(g == 1, rng.choice(3, 500, p=[0.3, 0.15, 0.55]), rng.choice(3, 500, p=[0.2, 0.6, 0.2]))
    df = pd.DataFrame({"y": y, "g": g})
    res = ow.fit("y ~ g", df, link=link, scale_by=["g"])
    assert res.converged
    pred = res.predict(pd.DataFrame({"g": [0, 1]}), kind="cumulative").to_numpy()
    np.testing.assert_allclose(pred, _empirical_cumulative(df), atol=1e-6)  # Newton stops at decrement 1e-10


def test_fit_is_never_worse_than_a_generic_optimiser():
    # "Never worse than a generic optimiser": Nelder-Mead + BFGS on the independent
    # log-likelihood; z enters the scale only (it is not in the formula).
    df = sim_extended(n=250, seed=5)
    res = ow.fit("y ~ x + g", df, nonparallel=["g"], scale_by=["z"])
    assert res.converged and res.coef_names == ("x", "g @ 0->1", "g @ 1->2", "g @ 2->3", "scale: z")
    X, W, Z = df[["x"]].to_numpy(float), df[["g"]].to_numpy(float), df[["z"]].to_numpy(float)
    start = np.array([-1.0, 0.3, 1.5, 0.0, 0.0, 0.0, 0.0, 0.0])
    v, ll = RX.fit(X, W, Z, df.y.to_numpy(), "logit", start)
    assert res.loglik >= ll - 1e-7
    np.testing.assert_allclose(res.params, v, atol=2e-3)


def test_parallel_layout_matches_the_fast_parallel_fit():
    # The sorted-segment fitter of the parallel model is an independent implementation.
    df = sim_extended(seed=6)
    fast = ow.fit("y ~ x + g + z", df, link="probit")
    D = df[["x", "g", "z"]].to_numpy(float)
    layout = ModelLayout(("x", "g", "z"), (0, 1, 2), (), (), fast.threshold_names)
    out = fit_layout(layout, D, df.y.to_numpy(), None, "probit")
    np.testing.assert_allclose(out.params, fast.params, atol=1e-7)
    np.testing.assert_allclose(out.cov, fast.cov, rtol=1e-6, atol=1e-9)


def test_integer_weights_equal_duplicated_rows():
    # Frequency weights: a row of weight k is k copies of the row (definition of the weights).
    df = sim_extended(n=150, seed=7)
    w = np.random.default_rng(8).integers(1, 4, len(df))
    a = ow.fit("y ~ x + g", df.assign(w=w), weights="w", nonparallel=["g"], scale_by=["x"])
    b = ow.fit("y ~ x + g", df.loc[df.index.repeat(w)].reset_index(drop=True), nonparallel=["g"], scale_by=["x"])
    np.testing.assert_allclose(a.params, b.params, atol=1e-7)
    np.testing.assert_allclose(a.cov, b.cov, rtol=1e-6, atol=1e-10)
    assert a.loglik == pytest.approx(b.loglik, rel=1e-10)


def test_error_bounds_follow_the_model_formula():
    # error_bounds: (theta_k - x'beta - w'gamma_k) / exp(z'zeta), written out from the model.
    df = sim_extended(n=120, seed=9)
    res = ow.fit("y ~ x + g", df, nonparallel=["g"], scale_by=["z"])
    th, (b, g1, g2, g3, zeta) = res.params[:3], res.params[3:]
    cuts = np.column_stack([th[0] - g1 * df.g, th[1] - g2 * df.g, th[2] - g3 * df.g]) - (b * df.x).to_numpy()[:, None]
    cuts = cuts / np.exp(zeta * df.z.to_numpy())[:, None]
    full = np.column_stack([np.full(len(df), -np.inf), cuts, np.full(len(df), np.inf)])
    lo, up = res.error_bounds()
    np.testing.assert_allclose(lo, full[np.arange(len(df)), df.y], rtol=1e-12)
    np.testing.assert_allclose(up, full[np.arange(len(df)), df.y + 1], rtol=1e-12)
    assert res.loglik_at() == pytest.approx(res.loglik, rel=1e-12)
    assert list(res.std_errors.index) == res.names and len(res.names) == len(res.params)
    assert res.options["nonparallel"] == ["g"] and res.options["scale_by"] == ["z"]


def test_factor_name_expands_to_all_its_columns():
    # A variable name selects every column of the terms that use it (common practice, no source).
    rng = np.random.default_rng(10)
    df = pd.DataFrame({"f": rng.choice(["a", "b", "c"], 300), "x": rng.normal(size=300)})
    df["y"] = np.searchsorted([-0.5, 0.8], df.x + (df.f == "b") + rng.logistic(size=300))
    res = ow.fit("y ~ x + C(f)", df, nonparallel=["f"])
    assert {"C(f)[T.b] @ 0->1", "C(f)[T.c] @ 1->2"} <= set(res.coef_names) and "x" in res.coef_names


def test_crossing_for_observed_rows_is_refused_with_advice():
    # Group x=2 has no middle responses and x=0 mostly middle ones: with a linear
    # per-threshold effect the likelihood increases up to the boundary where the two cuts of
    # the x=2 rows meet, so there is no maximum with valid probabilities.
    rows = [(0, 0, 10), (0, 1, 30), (0, 2, 10), (1, 0, 15), (1, 1, 10), (1, 2, 15), (2, 0, 20), (2, 2, 20)]
    df = pd.DataFrame([(x, y) for x, y, c in rows for _ in range(c)], columns=["x", "y"])
    with pytest.raises(ow.CrossingError, match="fewer non-parallel terms") as info:
        ow.fit("y ~ x", df, nonparallel=["x"])
    assert "for x" in str(info.value) and "40 rows" in str(info.value)


def test_crossing_between_observed_rows_warns_and_flags():
    # Saturated three-group design (a, b) in {(0,0), (1,0), (0,1)}: the middle category is
    # common at (0,0) and rare at the others, so the linear cuts cross at the unobserved
    # corner (1,1) inside the data box.
    spec = {(0, 0): [10, 80, 10], (1, 0): [45, 10, 45], (0, 1): [40, 12, 48]}
    df = pd.DataFrame([(a, b, y) for (a, b), c in spec.items() for y, k in enumerate(c) for _ in range(k)],
                      columns=["a", "b", "y"])
    with pytest.warns(ow.CrossingWarning, match="a, b"):
        res = ow.fit("y ~ a + b", df, nonparallel=["a", "b"])
    assert res.crossing == ("0->1 / 1->2",)
    with pytest.warns(ow.CrossingWarning, match="1 of 1 rows"):
        p = res.predict(pd.DataFrame({"a": [1], "b": [1]}))
    assert p.isna().all(axis=None)


def test_crossing_in_range_matches_a_grid_search():
    # The corner rule against brute force on a grid over the box of the data.
    rng = np.random.default_rng(11)
    D = rng.uniform(-1, 2, size=(50, 2))
    layout = ModelLayout(("u", "v"), (), (0, 1), (), ("a", "b", "c"))
    for _ in range(20):
        params = np.concatenate([[-1.0, 0.0, 1.0], rng.normal(scale=0.6, size=6)])
        th, gam = params[:3], params[3:].reshape(2, 3)
        grid = np.stack(np.meshgrid(np.linspace(D[:, 0].min(), D[:, 0].max(), 41),
                                    np.linspace(D[:, 1].min(), D[:, 1].max(), 41)), -1).reshape(-1, 2)
        gaps = np.diff(th[None, :] - grid @ gam, axis=1)
        expect = [p for p, bad in zip(["a / b", "b / c"], (gaps < 0).any(axis=0)) if bad]
        assert crossing_in_range(layout, params, D) == expect


def test_bad_names_and_unidentified_combinations_are_refused():
    df = sim_extended(n=300, seed=12)
    with pytest.raises(ValueError, match=r"'nope'.*predictors: x, g"):
        ow.fit("y ~ x + g", df, nonparallel=["nope"])
    with pytest.raises(ValueError, match=r"scale_by= names 'ghost'"):
        ow.fit("y ~ x + g", df, scale_by=["ghost"])
    with pytest.raises(ValueError, match=r"'g' takes at most two values"):
        ow.fit("y ~ x + g", df, nonparallel=["g"], scale_by=["g"])
    with pytest.raises(ValueError, match="not in the formula: z"):
        ow.fit("y ~ x + g", df, nonparallel=["z"], scale_by=["z"])
    with pytest.raises(ValueError, match="list of predictor names"):
        ow.fit("y ~ x + g", df, nonparallel=[1])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = ow.fit("y ~ x + g", df, nonparallel=["x"], scale_by=["x"])  # continuous: identified
    assert res.converged


def test_separation_by_a_non_parallel_predictor_is_named_in_the_refusal():
    # All g = 1 rows are in the top category: the per-threshold cuts of g = 1 run to -inf
    # together and meet; the refusal says that these rows share one extreme category.
    rng = np.random.default_rng(13)
    g = np.repeat([0, 1], [80, 20])
    df = pd.DataFrame({"y": np.where(g == 1, 2, rng.choice(3, 100)), "g": g, "x": rng.normal(size=100)})
    with pytest.raises(ow.CrossingError, match="20 rows.*same extreme category.*separate"):
        ow.fit("y ~ g + x", df, nonparallel=["g"])


def test_display_separates_scale_effects_and_names_the_extensions():
    # Common practice, no source: scale effects are not location effects and are shown apart.
    df = sim_extended(n=150, seed=14)
    res = ow.fit("y ~ x + g", df, nonparallel=["g"], scale_by=["z"])
    html = res._repr_html_()
    assert html.index("Effects (positive") < html.index("g @ 0-&gt;1") < html.index("Scale effects") < html.index("scale: z")
    facts = res.facts()
    assert facts["per-threshold effects"] == "g" and facts["scale effects"] == "z"
    assert "per-threshold effects" not in ow.fit("y ~ x", df).facts()


def test_rescaling_and_shifting_columns_only_reparametrises_the_fit():
    # Invariance (follows from the model formula): x -> a x + b and z -> c z + d leave the
    # likelihood unchanged; the x effects are divided by a, the scale effect by c, and the
    # thresholds absorb b; shifting z multiplies every location parameter by exp(d zeta / c).
    df = sim_extended(n=200, seed=15)
    base = ow.fit("y ~ x + g", df, nonparallel=["x"], scale_by=["z"])
    moved = ow.fit("y ~ x + g", df.assign(x=3 * df.x + 2, z=0.5 * df.z + 1), nonparallel=["x"], scale_by=["z"])
    assert moved.loglik == pytest.approx(base.loglik, rel=1e-10)
    zeta = base.params[-1]
    assert moved.params[-1] == pytest.approx(zeta / 0.5, rel=1e-6)
    factor = np.exp(1 * zeta / 0.5)
    gam = base.params[4:7]
    np.testing.assert_allclose(moved.params[4:7], factor * gam / 3, rtol=1e-6)
    np.testing.assert_allclose(moved.params[:3], factor * (base.params[:3] + 2 * gam / 3), rtol=1e-6)
    assert moved.params[3] == pytest.approx(factor * base.params[3], rel=1e-6)

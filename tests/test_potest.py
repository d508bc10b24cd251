"""Proportional-odds tests: likelihood ratio per predictor and Brant's (1990) Wald test."""
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.linear_model import LogisticRegression

import ordwidgets as ow

from . import reference as R
from . import reference_extended as RE


def parallel_data(n, seed, beta=(0.7, -0.5)):
    X, y = R.simulate(n, list(beta), [-0.6, 0.5, 1.4], seed=seed)
    return pd.DataFrame({"y": y, "x": X[:, 0], "v": X[:, 1]})


def test_lr_rows_equal_explicit_refits_and_probability_changes():
    # Each row is the LR comparison with that predictor freed (ow.compare on explicit fits);
    # the probability change is read off the two fits' public predictions.  The explicit fits
    # run to a tight Newton decrement so that their own error stays below the tolerances.
    df = parallel_data(300, seed=1)
    res = ow.fit("y ~ x + v", df, tol=1e-15)
    table = res.proportional_odds_test()
    assert list(table.index) == ["x", "v", "(overall)"]
    for name, free in (("x", ["x"]), ("v", ["v"]), ("(overall)", ["x", "v"])):
        other = ow.fit("y ~ x + v", df, nonparallel=free, tol=1e-15)
        lr = ow.compare(res, other).loc["larger"]
        assert table.loc[name, "statistic"] == pytest.approx(lr["statistic"], rel=1e-6, abs=1e-8)
        assert table.loc[name, "df"] == lr["df"] == 2 * len(free)
        assert table.loc[name, "p_value"] == pytest.approx(stats.chi2.sf(lr["statistic"], lr["df"]), rel=1e-5)
        change = (other.predict() - res.predict()).abs().to_numpy()
        assert table.loc[name, "max_prob_change"] == pytest.approx(change.max(), rel=1e-6)
        assert table.loc[name, "mean_prob_change"] == pytest.approx(change.max(axis=1).mean(), rel=1e-6)


def _brant_reference(X, y, groups=None):
    """Brant (1990), Biometrics 46:1171-1178, sec. 3, written from the paper: separate logistic
    fits (scikit-learn, no penalty) of 1(y > j) and
    Var(b_j, b_l) = (X'W_jj X)^-1 X'W_jl X (X'W_ll X)^-1 with W_jl = diag(pi_l - pi_j pi_l), l >= j.
    """
    m = int(y.max())
    Xt = np.column_stack([np.ones(len(X)), X])
    fits = [LogisticRegression(C=np.inf, tol=1e-12, max_iter=10_000).fit(X, (y > j).astype(int)) for j in range(m)]
    B = np.array([np.concatenate([f.intercept_, f.coef_[0]]) for f in fits])
    pi = np.column_stack([f.predict_proba(X)[:, 1] for f in fits])
    k = Xt.shape[1]
    V = np.zeros((m * k, m * k))
    inv = [np.linalg.inv(Xt.T @ ((pi[:, j] * (1 - pi[:, j]))[:, None] * Xt)) for j in range(m)]
    for j in range(m):
        for l in range(j, m):
            block = inv[j] @ Xt.T @ ((pi[:, l] - pi[:, j] * pi[:, l])[:, None] * Xt) @ inv[l]
            V[j * k:(j + 1) * k, l * k:(l + 1) * k] = block
            V[l * k:(l + 1) * k, j * k:(j + 1) * k] = block.T
    out = {}
    groups = {"x": [1], "v": [2], "(overall)": [1, 2]} if groups is None else groups
    for name, cols in groups.items():
        C = np.array([np.eye(m * k)[c] - np.eye(m * k)[j * k + c] for c in cols for j in range(1, m)])
        d = C @ B.ravel()
        out[name] = float(d @ np.linalg.solve(C @ V @ C.T, d))
    return out


def test_brant_statistic_matches_the_published_construction():
    df = parallel_data(400, seed=2, beta=(0.9, -0.3))
    df.loc[df.x > 1, "y"] = np.maximum(df.loc[df.x > 1, "y"], 1)  # some departure in x
    table = ow.fit("y ~ x + v", df).proportional_odds_test()
    ref = _brant_reference(df[["x", "v"]].to_numpy(), df.y.to_numpy())
    for name, stat in ref.items():
        assert table.loc[name, "brant_statistic"] == pytest.approx(stat, rel=1e-5)
        assert table.loc[name, "brant_df"] == (4 if name == "(overall)" else 2)
        assert table.loc[name, "brant_p_value"] == pytest.approx(stats.chi2.sf(stat, table.loc[name, "brant_df"]), rel=1e-6)


def test_both_tests_hold_their_size_under_parallel_effects():
    # Published property: under the null the rejection rate at 5 % is 5 % (asymptotically);
    # the count over independent replicates is binomial, checked against its 99.9 % range.
    reps, hits = 100, np.zeros(2)
    for seed in range(reps):
        table = ow.fit("y ~ x", parallel_data(200, seed=100 + seed).drop(columns="v")).proportional_odds_test()
        hits += table.loc["x", ["p_value", "brant_p_value"]].to_numpy(float) < 0.05
    lo, hi = stats.binom.interval(0.999, reps, 0.05)
    assert np.all((hits >= lo) & (hits <= hi)), hits


def test_both_tests_reject_a_strongly_non_parallel_effect():
    # Simulated from the non-parallel model itself: P(Y <= 0) = F(-1 - 1.5 x) and
    # P(Y <= 1) = F(1.5 - 0.3 x); the cuts cross only at x = -2.08, outside x in (-1, 1).
    rng = np.random.default_rng(3)
    x = rng.uniform(-1, 1, 500)
    u = stats.logistic.ppf(rng.uniform(size=500))
    y = (u > -1 - 1.5 * x).astype(int) + (u > 1.5 - 0.3 * x)
    df = pd.DataFrame({"y": y, "x": x})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        table = ow.fit("y ~ x", df).proportional_odds_test()
    assert table.loc["x", "p_value"] < 1e-4 and table.loc["x", "brant_p_value"] < 1e-4
    assert table.loc["x", "max_prob_change"] > 0.1


def test_untestable_fits_are_refused():
    df = parallel_data(100, seed=4)
    with pytest.raises(ValueError, match="no parallel effect"):
        ow.fit("y ~ 1", df).proportional_odds_test()
    with pytest.raises(ValueError, match="two response levels"):
        ow.fit("y ~ x", df.assign(y=(df.y > 1).astype(int))).proportional_odds_test()
    scaled = ow.fit("y ~ x", df, scale_by=["v"]).proportional_odds_test()
    assert scaled["brant_statistic"].isna().all() and "scale" in scaled.loc["x", "brant_note"]
    assert np.isfinite(scaled.loc["x", "statistic"])


def test_large_n_flags_a_trivial_departure_that_barely_moves_probabilities():
    # The documented large-n caution: slopes 0.5 and 0.6 at the two cuts (simulated from the
    # non-parallel model) are detected with 60,000 rows, yet no fitted probability moves by
    # more than a few points; the change columns show it.
    rng = np.random.default_rng(5)
    n = 60_000
    x = rng.uniform(-1, 1, n)
    u = stats.logistic.ppf(rng.uniform(size=n))
    df = pd.DataFrame({"y": (u > -1 - 0.5 * x).astype(int) + (u > 1 - 0.6 * x), "x": x})
    row = ow.fit("y ~ x", df).proportional_odds_test().loc["x"]
    assert row["p_value"] < 1e-3 and row["brant_p_value"] < 1e-3
    assert row["max_prob_change"] < 0.03 and row["mean_prob_change"] < 0.015


def _factor_data(n=600, seed=7):
    rng = np.random.default_rng(seed)
    g = rng.choice(["oak", "elm", "ash", "yew"], n)
    x = rng.normal(size=n)
    shift = pd.Series(g).map({"oak": 0.0, "elm": 0.5, "ash": -0.4, "yew": 0.2}).to_numpy()
    u = stats.logistic.ppf(rng.uniform(size=n))
    # the elm effect differs between the cuts: a real departure for the factor jointly
    cuts = np.array([-0.8, 0.3, 1.3])[None, :] + np.where(g == "elm", 1.0, 0.0)[:, None] * np.array([0.6, 0.0, -0.6])
    y = (u[:, None] + x[:, None] * 0.7 + shift[:, None] > cuts).sum(axis=1)
    return pd.DataFrame({"y": y, "x": x, "g": pd.Categorical(g, categories=["oak", "elm", "ash", "yew"])})


def test_a_factor_is_tested_jointly_against_an_independent_non_parallel_fit():
    # Reference: the partial proportional odds likelihood (Peterson & Harrell 1990) written
    # with scipy.stats CDFs in tests/reference_extended.py and maximised by scipy.optimize
    # (Nelder-Mead then BFGS), the factor's three dummies free at every threshold; the LR
    # statistic against the parallel fit has (J - 2) * 3 = 6 degrees of freedom.
    df = _factor_data()
    res = ow.fit("y ~ x + g", df)
    table = res.proportional_odds_test()
    assert list(table.index) == ["x", "g", "(overall)"]
    X, D = df[["x"]].to_numpy(), res.training.X[:, 1:]
    m = res.n_thresholds
    start = np.concatenate([res.params[:m], res.params[m:m + 1], np.repeat(res.params[m + 1:], m)])
    _, ll_free = RE.fit(X, D, np.empty((len(df), 0)), res.training.y, "logit", start)
    stat = 2 * (ll_free - res.loglik)
    assert table.loc["g", "df"] == 6
    assert table.loc["g", "statistic"] == pytest.approx(stat, abs=2e-4)
    assert table.loc["g", "p_value"] == pytest.approx(stats.chi2.sf(stat, 6), rel=1e-3)
    assert table.loc["g", "p_value"] < 0.01  # the simulated departure is found


def test_detail_rows_free_one_level_at_a_time_and_agree_with_explicit_fits():
    # Reference: ow.compare of the parallel fit against an explicit fit with only that dummy
    # non-parallel (both run to a tight Newton decrement).
    df = _factor_data()
    res = ow.fit("y ~ x + g", df, tol=1e-15)
    table = res.proportional_odds_test(detail=True)
    dummies = ["g[T.elm]", "g[T.ash]", "g[T.yew]"]
    assert list(table.index) == ["x", "g"] + dummies + ["(overall)"]
    for d in dummies:
        other = ow.fit("y ~ x + g", df, nonparallel=[d], tol=1e-15)
        lr = ow.compare(res, other).loc["larger"]
        assert table.loc[d, "statistic"] == pytest.approx(lr["statistic"], rel=1e-6, abs=1e-8)
        assert table.loc[d, "df"] == 2
    joint = ow.compare(res, ow.fit("y ~ x + g", df, nonparallel=["g"], tol=1e-15)).loc["larger"]
    assert table.loc["g", "statistic"] == pytest.approx(joint["statistic"], rel=1e-6, abs=1e-8)


def test_brant_rows_of_a_factor_match_the_published_construction():
    # Reference: _brant_reference above (scikit-learn binary fits, Brant 1990 sec. 3), the
    # factor's dummies tested jointly and each on its own.
    df = _factor_data()
    res = ow.fit("y ~ x + g", df)
    table = res.proportional_odds_test(detail=True)
    groups = {"x": [1], "g": [2, 3, 4], "g[T.elm]": [2], "g[T.ash]": [3], "g[T.yew]": [4], "(overall)": [1, 2, 3, 4]}
    ref = _brant_reference(res.training.X, res.training.y, groups)
    for name, stat in ref.items():
        assert table.loc[name, "brant_statistic"] == pytest.approx(stat, rel=1e-5)
        assert table.loc[name, "brant_df"] == 2 * len(groups[name])

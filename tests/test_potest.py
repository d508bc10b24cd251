"""Proportional-odds tests: likelihood ratio per predictor and Brant's (1990) Wald test."""
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.linear_model import LogisticRegression

import ordwidgets as ow

from . import reference as R


def parallel_data(n, seed, beta=(0.7, -0.5)):
    X, y = R.simulate(n, list(beta), [-0.6, 0.5, 1.4], seed=seed)
    return pd.DataFrame({"y": y, "x": X[:, 0], "v": X[:, 1]})


def test_lr_rows_equal_explicit_refits_and_probability_changes():
    # Each row is the LR comparison with that predictor freed (ow.compare on explicit fits);
    # the probability change is read off the two fits' public predictions.
    df = parallel_data(300, seed=1)
    res = ow.fit("y ~ x + v", df)
    table = res.proportional_odds_test()
    assert list(table.index) == ["x", "v", "(overall)"]
    for name, free in (("x", ["x"]), ("v", ["v"]), ("(overall)", ["x", "v"])):
        other = ow.fit("y ~ x + v", df, nonparallel=free)
        lr = ow.compare(res, other).loc["larger"]
        assert table.loc[name, "statistic"] == pytest.approx(lr["statistic"], rel=1e-6, abs=1e-8)
        assert table.loc[name, "df"] == lr["df"] == 2 * len(free)
        assert table.loc[name, "p_value"] == pytest.approx(stats.chi2.sf(lr["statistic"], lr["df"]), rel=1e-5)
        change = (other.predict() - res.predict()).abs().to_numpy()
        assert table.loc[name, "max_prob_change"] == pytest.approx(change.max(), rel=1e-6)
        assert table.loc[name, "mean_prob_change"] == pytest.approx(change.max(axis=1).mean(), rel=1e-6)


def _brant_reference(X, y):
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
    for name, cols in (("x", [1]), ("v", [2]), ("(overall)", [1, 2])):
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

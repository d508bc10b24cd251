"""The fitting engine: weight-scale invariance and separation found in the data.

Sources: frequency-weight maximum-likelihood estimates do not change when every weight is
multiplied by the same constant (the log-likelihood is multiplied by it; its maximiser is
unchanged) -- an elementary property of weighted likelihoods.  Non-existence of the MLE is
shown with the independent likelihood of ``tests/reference.py`` (scipy.stats CDFs): for a
factor level whose rows all sit in an end category the log-likelihood keeps increasing as
that level's effect grows (Albert & Anderson 1984, Biometrika 71:1-10, complete separation).
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow

from . import reference as R


def _simulated(n=600, seed=3):
    rng = np.random.default_rng(seed)
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    y = np.digitize(0.8 * x1 - 0.5 * x2 + rng.logistic(size=n), [-1.2, 0.0, 1.1])
    return pd.DataFrame({"x1": x1, "x2": x2, "y": y})


@pytest.mark.parametrize("scale", [1e-12, 1e-8, 1e6])
def test_uniform_weights_of_any_size_give_the_unweighted_estimates(scale):
    df = _simulated()
    ref = ow.fit("y ~ x1 + x2", df)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = ow.fit("y ~ x1 + x2", df, weights=np.full(len(df), scale))
    assert res.converged and ref.converged
    assert res.iterations == ref.iterations
    np.testing.assert_allclose(res.params, ref.params, rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(res.loglik, scale * ref.loglik, rtol=1e-9)
    # frequency-weight covariance scales as 1 / constant
    np.testing.assert_allclose(res.cov * scale, ref.cov, rtol=1e-7)


def test_tiny_weights_agree_with_an_independent_fit():
    df = _simulated()
    X, y = df[["x1", "x2"]].to_numpy(), df.y.to_numpy()
    params, _ = R.fit(X, y, "logit")  # unweighted generic-optimiser fit (scipy only)
    res = ow.fit("y ~ x1 + x2", df, weights=np.full(len(df), 1e-12))
    np.testing.assert_allclose(res.params, params, rtol=1e-6, atol=1e-7)


def _frame_with_separated_level(end):
    """A three-level factor; level 'c' has one row, in the lowest or highest category."""
    rng = np.random.default_rng(5)
    n = 300
    g = np.where(rng.random(n) < 0.5, "a", "b").astype(object)
    x = rng.normal(size=n)
    y = np.digitize(0.7 * x + 0.4 * (g == "b") + rng.logistic(size=n), [-1.0, 0.2, 1.3])
    g[0], y[0] = "c", (0 if end == "lowest" else 3)
    return pd.DataFrame({"x": x, "g": g, "y": y})


@pytest.mark.parametrize("end", ["lowest", "highest"])
def test_a_single_row_level_in_an_end_category_is_separated(end):
    df = _frame_with_separated_level(end)
    with pytest.warns(ow.SeparationWarning, match=r"g\)?\[T\.c\]"):
        res = ow.fit("y ~ x + C(g)", df)
    assert not res.converged
    name = [c for c in res.coef_names if c.endswith("[T.c]")][0]
    # independent check that no maximum exists: the reference log-likelihood keeps rising as
    # the effect of 'c' moves outwards (at 2, 6, 12 -- further out the single row's log P is
    # below double precision's resolution of the total), and the fit went out along that ray
    X = res.training.X
    y = res.training.y
    k = res.names.index(name)
    direction = -1.0 if end == "lowest" else 1.0
    values = []
    for at in (2.0, 6.0, 12.0):
        p = res.params.copy()
        p[k] = direction * at
        values.append(R.loglik(p, X, y, res.n_thresholds, "logit"))
    assert values[0] < values[1] < values[2]
    assert direction * res.params[k] > 12.0


def test_a_level_in_a_middle_category_is_not_separated():
    df = _frame_with_separated_level("lowest")
    df.loc[0, "y"] = 1  # a middle category: the MLE exists (the likelihood is bounded there)
    with warnings.catch_warnings():
        warnings.simplefilter("error", ow.SeparationWarning)
        res = ow.fit("y ~ x + C(g)", df)
    assert res.converged


def test_several_rare_levels_of_a_97_level_factor_are_named():
    rng = np.random.default_rng(11)
    levels = [f"L{i:02d}" for i in range(97)]
    n = 5000
    g = rng.choice(levels, size=n).astype(object)
    effect = dict(zip(levels, rng.normal(scale=0.5, size=97)))
    y = np.digitize(np.array([effect[v] for v in g]) + rng.logistic(size=n), [-1.0, 0.0, 1.0])
    for level, cat, rows in (("L10", 0, 1), ("L40", 3, 3), ("L77", 3, 2)):
        g[np.flatnonzero(g == level)] = "L00"
        idx = np.arange(rows) + 50 * int(level[1:])
        g[idx], y[idx] = level, cat
    df = pd.DataFrame({"g": g, "y": y})
    with pytest.warns(ow.SeparationWarning) as caught:
        res = ow.fit("y ~ C(g)", df)
    message = " ".join(str(w.message) for w in caught if issubclass(w.category, ow.SeparationWarning))
    for level in ("L10", "L40", "L77"):
        assert f"[T.{level}]" in message
    assert "[T.L20]" not in message
    assert not res.converged


def test_separation_is_found_for_extended_fits_too():
    df = _frame_with_separated_level("highest")
    with pytest.warns(ow.SeparationWarning, match=r"\[T\.c\]"):
        res = ow.fit("y ~ x + C(g)", df, nonparallel=["x"])
    assert not res.converged


def test_a_scale_effect_that_runs_away_is_flagged_and_its_profile_does_not_crash():
    # A 0/1 scale column that is 1 only on rows of one middle category: the spread of those
    # rows can shrink to zero, so the independent likelihood (tests/reference_extended.py,
    # scipy.stats CDFs) keeps rising as the scale effect goes to minus infinity -- no MLE.
    from . import reference_extended as RX

    rng = np.random.default_rng(0)
    n = 400
    x1 = rng.normal(size=n)
    y = np.digitize(0.8 * x1 + rng.logistic(size=n), [-1.0, 0.5, 2.0])
    s = np.zeros(n)
    s[rng.choice(np.flatnonzero(y == 1), 30, replace=False)] = 1.0
    df = pd.DataFrame({"y": y, "x1": x1, "s": s})
    with pytest.warns(ow.SeparationWarning, match="scale: s"):
        res = ow.fit("y ~ x1", df, scale_by=["s"])
    assert not res.converged
    empty = np.empty((n, 0))
    ray = [RX.loglik(np.r_[res.params[:-1], z], x1[:, None], empty, s[:, None], y, 3, "logit")
           for z in (-2.0, -4.0, -8.0)]
    assert ray[0] < ray[1] < ray[2] <= 0.0  # the reference: rising along the scale effect
    table = res.intervals(method="profile")  # used to fail on a non-finite profile point
    lo, hi = table.loc["x1"]
    assert lo < res.params[res.names.index("x1")] < hi

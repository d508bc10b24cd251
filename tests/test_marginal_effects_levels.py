"""Average marginal effects of factors with several levels, checked against brute force.

Independent reference written here in plain numpy/scipy from the model's definition
(McCullagh 1980; location-scale and per-threshold effects as in the layout's docstring):
``P(Y <= j | d) = F((theta_j - x'beta - w'gamma_j) / exp(z'zeta))`` with ``F`` the scipy.stats
distribution of the link, parameters read in their documented storage order
``[theta, beta, gamma (blocks of m), zeta]``.  Discrete changes are a plain loop over the
levels (every row set to the level, the factor's other dummies 0); derivatives are central
finite differences of the averaged probabilities in the column; standard errors the delta
method (Oehlert 1992, Am. Stat. 46:27-29) with a finite-difference Jacobian in the parameters.
"""
import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow


def factor_data(n=500, seed=11):
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"x": rng.normal(size=n), "g": rng.integers(0, 2, n),
                       "site": rng.choice(["n", "e", "s", "w", "c", "k"], n), "wt": rng.uniform(0.3, 3.0, n)})
    effect = df.site.map({"n": 0.0, "e": 0.5, "s": -0.4, "w": 0.9, "c": 0.2, "k": -0.8})
    lat = 0.7 * df.x - 0.5 * df.g + effect + rng.logistic(size=n) * np.exp(0.15 * df.g)
    df["y"] = np.searchsorted([-1.2, -0.1, 0.8, 1.7], lat)
    return df


def reference_mean_probabilities(res, params, D, w):
    """Weighted mean category probabilities of design rows ``D`` (plain numpy/scipy)."""
    lay, m = res.layout, res.n_thresholds
    p, q = len(lay.location), len(lay.nonparallel)
    theta, beta = params[:m], params[m:m + p]
    gamma = params[m + p:m + p + q * m].reshape(q, m)
    zeta = params[m + p + q * m:]
    num = theta[None, :] - (D[:, list(lay.location)] @ beta)[:, None] - D[:, list(lay.nonparallel)] @ gamma
    cum = res.link.dist.cdf(num / np.exp(D[:, list(lay.scale)] @ zeta)[:, None])
    n = len(D)
    P = np.diff(np.column_stack([np.zeros(n), cum, np.ones(n)]), axis=1)
    return w @ P


def reference_effects(res, params, D, w, factor_cols, numeric, binary, h=1e-4):
    """``{column: effect (J,)}`` by brute force (loop over levels; central differences in x)."""
    out = {}
    for c in numeric:
        up, down = D.copy(), D.copy()
        up[:, c] += h
        down[:, c] -= h
        out[c] = (reference_mean_probabilities(res, params, up, w)
                  - reference_mean_probabilities(res, params, down, w)) / (2 * h)
    for group in [factor_cols] + [[c] for c in binary]:
        base = D.copy()
        base[:, group] = 0.0
        p0 = reference_mean_probabilities(res, params, base, w)
        for c in group:
            level = base.copy()
            level[:, c] = 1.0
            out[c] = reference_mean_probabilities(res, params, level, w) - p0
    return out


CASES = {
    "logit, weights": dict(link="logit", weights=True),
    "probit": dict(link="probit"),
    "cloglog, extended, weights": dict(link="cloglog", weights=True, nonparallel=["x"], scale_by=["g"]),
    "loglog, factor per threshold": dict(link="loglog", nonparallel=["C(site)"]),
}


@pytest.mark.parametrize("case", CASES)
def test_effects_and_standard_errors_match_brute_force(case):
    options = dict(CASES[case])
    df = factor_data()
    if options.pop("weights", False):
        options["weights"] = df.wt
    res = ow.fit("y ~ x + g + C(site)", df, **options)
    ame = res.average_marginal_effects()
    tr = res.training_rows()
    D = np.asarray(tr.X, float)
    w = np.ones(len(D)) if tr.weights is None else np.asarray(tr.weights, float)
    w = w / w.sum()
    cols = list(res.layout.columns)
    factor_cols = [i for i, c in enumerate(cols) if c.startswith("C(site)")]
    assert len(factor_cols) == 5
    numeric, binary = [cols.index("x")], [cols.index("g")]

    def effects_at(params):
        ref = reference_effects(res, params, D, w, factor_cols, numeric, binary)
        return np.array([ref[c] for c in range(len(cols))])

    ref = effects_at(res.params)
    np.testing.assert_allclose(ame["effect"].to_numpy(), ref, atol=1e-7)
    step = 1e-4
    J = np.stack([(effects_at(res.params + step * e) - effects_at(res.params - step * e)) / (2 * step)
                  for e in np.eye(res.n_params)], axis=-1)
    se = np.sqrt(np.einsum("cjp,pq,cjq->cj", J, res.cov, J))
    np.testing.assert_allclose(ame["std_error"].to_numpy(), se, rtol=2e-4, atol=1e-8)
    assert ame.attrs["kind"]["x"] == "derivative"
    assert all(ame.attrs["kind"][cols[c]] == "change 0 -> 1" for c in factor_cols + binary)



def test_a_level_moved_outside_its_data_that_crosses_gives_nan_and_a_named_warning():
    # Per-threshold effects of x and of one site level, set so that the cumulative
    # probabilities stay ordered on every training row but cross once a row with large x is
    # moved to that level (the level was only seen at small |x|).  The reference above
    # decides independently which rows cross (plain scipy.stats CDFs of the documented formula).
    import dataclasses

    rng = np.random.default_rng(5)
    n = 600
    x = rng.uniform(-2.0, 2.0, n)
    site = np.where(np.abs(x) < 0.5, rng.choice(["w", "n"], n), rng.choice(["n", "e"], n))
    df = pd.DataFrame({"x": x, "g": rng.integers(0, 2, n), "site": site})
    df["y"] = np.searchsorted([-1.5, 0.0, 1.5], 0.6 * x - 0.4 * df.g + rng.logistic(size=n))
    res = ow.fit("y ~ x + g + C(site)", df, nonparallel=["x", "C(site)"])
    lay, m = res.layout, res.n_thresholds
    cols = list(lay.columns)
    target = cols.index("C(site)[T.w]")
    params = res.params.copy()
    theta = np.array([-1.5, 0.0, 1.5])
    params[:m] = theta
    gamma = np.zeros((len(lay.nonparallel), m))
    gamma[list(lay.nonparallel).index(cols.index("x"))] = 0.25 * np.arange(m)
    gamma[list(lay.nonparallel).index(target)] = (theta - theta[0]) - 0.2 * np.arange(m)
    params[m + len(lay.location):] = gamma.ravel()
    edited = dataclasses.replace(res, params=params)

    D = np.asarray(edited.training_rows().X, float)
    factor_cols = [i for i, c in enumerate(cols) if c.startswith("C(site)")]

    def crosses(rows):
        num = (theta[None, :] - (rows[:, list(lay.location)] @ params[m:m + len(lay.location)])[:, None]
               - rows[:, list(lay.nonparallel)] @ gamma)
        return np.any(np.diff(edited.link.dist.cdf(num), axis=1) < 0)

    moved = D.copy()
    moved[:, factor_cols] = 0.0
    moved[:, target] = 1.0
    assert not crosses(D) and crosses(moved)  # the reference: ordered in the data, crossed when moved

    with pytest.warns(ow.CrossingWarning, match=r"C\(site\)\[T\.w\]") as caught:
        ame = edited.average_marginal_effects()
    assert len(caught) == 1
    assert np.isnan(ame.loc["C(site)[T.w]"].to_numpy()).all()
    w = np.full(len(D), 1.0 / len(D))
    ref = reference_effects(edited, params, D, w, factor_cols, [cols.index("x")], [cols.index("g")])
    for c, name in enumerate(cols):
        if c != target:
            np.testing.assert_allclose(ame.loc[name, "effect"].to_numpy(), ref[c], atol=1e-7)
            assert np.isfinite(ame.loc[name, "std_error"].to_numpy()).all()


def test_a_variable_that_enters_several_terms_is_named_in_a_warning():
    # The row of design column x holds I(x ** 2) and x:g fixed; changing x itself moves them
    # too.  Central differences of the averaged predictions in the data variable (the
    # model's definition; predict re-encodes the formula) differ from that row, hence the warning.
    df = factor_data()
    res = ow.fit("y ~ x + I(x ** 2) + g + x:g", df)
    with pytest.warns(UserWarning, match=r"x also enters I\(x \*\* 2\), x:g") as caught:
        ame = res.average_marginal_effects()
    assert any("g also enters x:g" in str(w.message) for w in caught)
    h = 1e-5
    whole = (res.predict(df.assign(x=df.x + h)).mean() - res.predict(df.assign(x=df.x - h)).mean()) / (2 * h)
    assert np.abs(whole.to_numpy() - ame.loc["x", "effect"].to_numpy()).max() > 1e-3
    plain = ow.fit("y ~ x + g + C(site)", df)
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error", UserWarning)
        plain.average_marginal_effects()  # every variable in one term: no warning

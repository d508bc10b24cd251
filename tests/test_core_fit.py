"""The fitter against outside references: closed forms, scipy, scikit-learn, open data."""
import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.datasets import load_diabetes
from sklearn.linear_model import LogisticRegression

import ordwidgets as ow
from ordwidgets.core.objective import sort_by_category, sorted_standardised
from ordwidgets.core.sorted_design import SortedDesign

from . import reference as R

LINKS = list(ow.link_names())


def frame(X, y, names=None):
    names = names or [f"x{i}" for i in range(X.shape[1])]
    df = pd.DataFrame(X, columns=names)
    df["grade"] = y
    return df


@pytest.mark.parametrize("link", LINKS)
def test_thresholds_only_equals_closed_form(link):
    # Closed form: with no predictors the MLE is theta_j = F^-1(cumulative proportion_j)
    # (the multinomial MLE of the cumulative probabilities, mapped through F^-1).
    y = np.repeat([0, 1, 2, 3], [37, 81, 55, 27])
    res = ow.fit("grade ~ 1", pd.DataFrame({"grade": y}), link=link)
    cum = np.cumsum([37, 81, 55, 27])[:-1] / 200
    np.testing.assert_allclose(res.thresholds.to_numpy(), R.DISTS[link].ppf(cum), rtol=1e-12, atol=1e-12)
    # loglik of the multinomial at its MLE: sum n_k log(n_k / n) (closed form).
    counts = np.array([37, 81, 55, 27])
    assert res.loglik == pytest.approx(float(counts @ np.log(counts / 200)), rel=1e-12)
    assert res.converged


def test_two_categories_equal_unpenalised_logistic_regression():
    # Reference: scikit-learn's LogisticRegression without penalty.  With two categories
    # P(Y = 1) = 1 - F(theta - x'b) = F(x'b - theta): coefficients agree, intercept = -theta.
    X, y = R.simulate(3000, [1.2, -0.7, 0.3], [0.4], seed=11)
    res = ow.fit("grade ~ x0 + x1 + x2", frame(X, y), link="logit")
    sk = LogisticRegression(C=np.inf, tol=1e-12, max_iter=10_000).fit(X, y)
    np.testing.assert_allclose(res.coefficients.to_numpy(), sk.coef_[0], rtol=1e-6, atol=1e-7)
    assert res.thresholds.iloc[0] == pytest.approx(-sk.intercept_[0], abs=1e-6)


@pytest.mark.parametrize("link", LINKS)
def test_matches_independent_scipy_fit_on_simulated_data(link):
    # Reference: the published likelihood (McCullagh 1980) coded in tests/reference.py with
    # scipy.stats CDFs, maximised by scipy.optimize and polished with scipy.differentiate.
    X, y = R.simulate(900, [0.8, -0.5, 0.25], [-1.0, 0.3, 1.5], link=link, seed=5)
    res = ow.fit("grade ~ x0 + x1 + x2", frame(X, y), link=link)
    params, ll = R.fit(X, y, link)
    assert res.loglik == pytest.approx(ll, abs=1e-6)
    np.testing.assert_allclose(res.params, params, atol=1e-5)
    # Standard errors: inverse of the numerical Hessian of the reference likelihood.
    H = R.hessian(res.params, X, y, 3, link)
    np.testing.assert_allclose(res.std_errors.to_numpy(), np.sqrt(np.diag(np.linalg.inv(-H))), rtol=1e-4)


def diabetes_grades():
    """Open data shipped with scikit-learn (Efron et al. 2004 diabetes data): disease
    progression cut at its quartiles into four ordered grades."""
    d = load_diabetes(as_frame=True).frame
    d["grade"] = pd.qcut(d["target"], 4, labels=False).astype(int)
    return d


@pytest.mark.parametrize("link", ["logit", "probit", "cloglog"])
def test_matches_independent_fit_on_open_dataset(link):
    d = diabetes_grades()
    res = ow.fit("grade ~ bmi + bp + s5", d, link=link)
    X = d[["bmi", "bp", "s5"]].to_numpy()
    params, ll = R.fit(X, d["grade"].to_numpy(), link)
    assert res.loglik == pytest.approx(ll, abs=1e-6)
    np.testing.assert_allclose(res.params, params, atol=1e-5, rtol=1e-7)
    assert (res.coefficients > 0).all()  # higher bmi, bp, s5: more progression (sign convention)


@pytest.mark.parametrize("link", LINKS)
def test_analytic_gradient_and_hessian_match_finite_differences(link):
    # Reference: central differences of the log-likelihood and of the gradient.
    X, y = R.simulate(400, [0.6, -0.4], [-0.8, 0.2, 1.1], link=link, seed=2)
    order, bounds = sort_by_category(y, 4)
    w = np.random.default_rng(0).integers(1, 4, size=len(y)).astype(float)
    d = SortedDesign(X[order], bounds, w[order], chunk=97)
    x0 = np.array([-0.7, 0.1, 1.3, 0.5, -0.3])
    ll, g, H = d.sums(link, x0)
    assert ll == pytest.approx(R.loglik(x0, X, y, 3, link, w), rel=1e-12)
    g_num = central_differences(lambda p: d.sums(link, p, order=0)[0], x0)
    np.testing.assert_allclose(g, g_num, rtol=1e-7, atol=1e-6)
    H_num = central_differences(lambda p: d.sums(link, p, order=1)[1], x0)
    np.testing.assert_allclose(H, H_num, rtol=1e-6, atol=1e-5)


def central_differences(f, x, h=1e-5):
    """Jacobian by central differences (error O(h^2)); an outside check of the analytic one."""
    cols = [(np.asarray(f(x + h * e)) - np.asarray(f(x - h * e))) / (2 * h) for e in np.eye(len(x))]
    return np.array(cols).T


def test_weights_equal_expanded_rows():
    # Definition of frequency weights: a row with weight k is k identical rows.
    X, y = R.simulate(300, [0.9, -0.6], [-0.5, 0.7], seed=8)
    w = np.random.default_rng(1).integers(1, 5, size=300)
    df = frame(X, y)
    weighted = ow.fit("grade ~ x0 + x1", df.assign(w=w), weights="w")
    expanded = ow.fit("grade ~ x0 + x1", df.loc[df.index.repeat(w)].reset_index(drop=True))
    assert weighted.loglik == pytest.approx(expanded.loglik, rel=1e-12)
    np.testing.assert_allclose(weighted.params, expanded.params, rtol=1e-9, atol=1e-11)
    np.testing.assert_allclose(weighted.std_errors, expanded.std_errors, rtol=1e-8)
    assert weighted.n_obs == expanded.n_obs == w.sum()
    assert weighted.bic == pytest.approx(expanded.bic, rel=1e-12)


def test_badly_scaled_correlated_design_reaches_the_standardised_optimum():
    # Invariance: rescaling and shifting columns reparameterises the model; the optimum
    # (loglik, fitted probabilities) cannot change.  Years ~ 2000, money ~ 1e5, 0/1 flags.
    rng = np.random.default_rng(4)
    n = 4000
    year = rng.integers(1960, 2024, n).astype(float)
    money = 2e3 * (year - 1990) + rng.normal(0, 2e4, n) + 1e5
    flag = (rng.random(n) < 0.3).astype(float)
    latent = 0.03 * (year - 1990) + 1.5e-5 * (money - 1e5) + 0.8 * flag + rng.logistic(size=n)
    df = pd.DataFrame({"year": year, "money": money, "flag": flag,
                       "grade": np.searchsorted([-1.0, 0.5, 2.0], latent)})
    raw = ow.fit("grade ~ year + money + flag", df)
    z = (df[["year", "money", "flag"]] - df[["year", "money", "flag"]].mean()) / df[["year", "money", "flag"]].std()
    std = ow.fit("grade ~ year + money + flag", z.assign(grade=df["grade"]))
    assert raw.converged and std.converged
    assert raw.loglik == pytest.approx(std.loglik, abs=1e-8)
    sd = df[["year", "money", "flag"]].std().to_numpy()
    np.testing.assert_allclose(raw.coefficients.to_numpy() * sd, std.coefficients.to_numpy(), rtol=1e-7)
    np.testing.assert_allclose(raw.predict().to_numpy(), std.predict().to_numpy(), atol=1e-10)


def test_interval_coverage_in_simulation():
    # Property of maximum likelihood: 95% Wald intervals cover the truth ~95% of the time.
    # 150 data sets x 2 effects = 300 intervals; Binomial(300, 0.95) lies in [272, 298]
    # with probability > 0.999 (scipy.stats.binom).
    truth = np.array([0.7, -0.4])
    hits = 0
    for seed in range(150):
        X, y = R.simulate(250, truth, [-0.6, 0.4, 1.3], seed=100 + seed)
        tab = ow.fit("grade ~ x0 + x1", frame(X, y)).table()
        lo, hi = tab.iloc[3:, 4].to_numpy(), tab.iloc[3:, 5].to_numpy()
        hits += int(np.sum((lo <= truth) & (truth <= hi)))
    lo_ok, hi_ok = stats.binom.ppf([0.0005, 0.9995], 300, 0.95)
    assert lo_ok <= hits <= hi_ok


@pytest.mark.parametrize("link", LINKS)
def test_extreme_linear_predictors_give_valid_probabilities(link):
    # Definition of a distribution: predictions for eta up to +-1e8 are finite,
    # non-negative and sum to one.
    X, y = R.simulate(500, [1.0], [-0.5, 0.5], seed=3)
    res = ow.fit("grade ~ x0", frame(X, y), link=link)
    new = pd.DataFrame({"x0": [-1e8, -1e4, 0.0, 1e4, 1e8] / res.coefficients.iloc[0]})
    p = res.predict(new).to_numpy()
    assert np.all(np.isfinite(p)) and np.all(p >= 0)
    np.testing.assert_allclose(p.sum(axis=1), 1.0, atol=1e-12)
    assert p[0, -1] == 0.0 or p[0, 0] > 0.999  # the far ends put all mass in an end category


def test_prediction_kinds_are_consistent():
    X, y = R.simulate(600, [0.8, -0.3], [-0.5, 0.6, 1.4], seed=9)
    res = ow.fit("grade ~ x0 + x1", frame(X, y))
    probs = res.predict(kind="probabilities")
    cum = res.predict(kind="cumulative")
    np.testing.assert_allclose(np.cumsum(probs.to_numpy(), axis=1), cum.to_numpy(), atol=1e-12)
    # P(Y <= j) = F(theta_j - x'b) with scipy.stats.logistic as the reference F.
    eta = res.predict(kind="latent").to_numpy()
    ref = stats.logistic.cdf(res.thresholds.to_numpy()[None, :] - eta[:, None])
    np.testing.assert_allclose(cum.to_numpy()[:, :3], ref, atol=1e-12)
    assert (res.predict(kind="most_likely") == probs.idxmax(axis=1).astype(int)).all()
    with pytest.raises(ValueError, match="kind"):
        res.predict(kind="odds")


def test_positive_effect_moves_mass_to_higher_categories():
    # The sign convention stated in the docs: increasing x with beta > 0 raises P(top).
    X, y = R.simulate(800, [1.0], [-0.5, 0.5], seed=12)
    res = ow.fit("grade ~ x0", frame(X, y))
    p = res.predict(pd.DataFrame({"x0": [-1.0, 1.0]})).to_numpy()
    assert res.coefficients.iloc[0] > 0 and p[1, -1] > p[0, -1] and p[1, 0] < p[0, 0]


def test_cauchit_reaches_the_maximum_from_a_hard_start():
    # The cauchit likelihood is not concave; with strong effects the guarded fit still
    # matches the generic optimiser (reference: tests/reference.py).
    X, y = R.simulate(700, [2.5, -1.5], [-1.0, 1.0], link="cauchit", seed=21)
    res = ow.fit("grade ~ x0 + x1", frame(X, y), link="cauchit")
    params, ll = R.fit(X, y, "cauchit")
    assert res.converged
    assert res.loglik >= ll - 1e-6
    np.testing.assert_allclose(res.params, params, atol=1e-4)


def test_result_is_immutable_and_html_escapes_labels():
    df = pd.DataFrame({"<b>x</b>": np.linspace(-1, 1, 60),
                       "grade": pd.Categorical(np.tile(["<i>lo</i>", "mid", "hi"], 20),
                                               categories=["<i>lo</i>", "mid", "hi"], ordered=True)})
    res = ow.fit("grade ~ Q('<b>x</b>')", df)
    with pytest.raises(AttributeError):
        res.loglik = 0.0
    page = res._repr_html_()
    assert "<i>lo</i>" not in page and "&lt;i&gt;lo&lt;/i&gt;" in page
    assert "<b>x</b>" not in page
    assert "positive effect moves probability towards higher categories" in str(res)
    assert res.thresholds.index.tolist() == ["<i>lo</i>->mid", "mid->hi"]


def test_internal_scaling_does_not_cancel_for_columns_far_from_zero():
    # Reference: numpy's two-pass mean and standard deviation.  E[x^2] - E[x]^2 would lose
    # every digit here (values ~1e9 with unit spread).
    from ordwidgets.core.engine import standardise

    rng = np.random.default_rng(0)
    X = np.column_stack([1e9 + rng.normal(size=2000), rng.normal(size=2000)])
    mean, sd = standardise(X)
    np.testing.assert_allclose(sd, X.std(axis=0), rtol=1e-9)
    np.testing.assert_allclose(mean, X.mean(axis=0), rtol=1e-14, atol=1e-12)
    cols = sorted_standardised(X, np.arange(2000), np.array([0, 2000]))
    Xs, mean2, sd2 = cols.X, cols.mean, cols.sd
    np.testing.assert_allclose(sd2, sd, rtol=1e-12)
    np.testing.assert_allclose(Xs.std(axis=0), 1.0, rtol=1e-9)

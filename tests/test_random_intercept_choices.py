"""Choices a random-intercept fit makes for the user: the number of quadrature points and the
covariance from one analytic Hessian (references named beside each check)."""
import numpy as np
import pytest
from scipy import optimize

import ordwidgets as ow
from ordwidgets.core.grouped_choices import choose_points
from ordwidgets.core.grouped_likelihood import GroupedRows, marginal_sums

from . import reference_grouped as RG
from .test_random_intercepts import M, frame, medium, small


def test_default_points_match_quad_and_fifty_points_with_few_points_chosen():
    """Large groups (about 40 rows each): the default takes fewer points than the fixed rule
    of 9, and the marginal log-likelihood at the estimate still matches the integral
    (scipy.integrate.quad per group, tests/reference_grouped.py) and a 50-point rule to
    1e-4, the issue's contract."""
    df, _ = medium(n=1500, n_groups=40, seed=3)
    res = ow.fit("grade ~ x0 + x1", df, random_intercepts="rater")
    assert res.converged and res.options["quadrature"] <= 5
    est = np.concatenate([res.params, res.sds])
    X, y = df[["x0", "x1"]].to_numpy(), df["grade"].cat.codes.to_numpy()
    g = np.unique(df["rater"], return_inverse=True)[1]
    assert abs(res.loglik - RG.loglik(est, X, y, g, M, "logit")) < 1e-4
    rows, _ = GroupedRows.from_rows(X, y, g, M + 1)
    assert abs(res.loglik - marginal_sums(rows, "logit", est, points=50, order=0).loglik) < 1e-4


def test_choice_is_the_fewest_points_at_given_parameters():
    """With every group looked at (40 groups), the chosen rule matches the 50-point rule to
    1e-4 and the rule with two points fewer does not: the default is not a generous one."""
    df, _ = medium(n=1500, n_groups=40, seed=3)
    res = ow.fit("grade ~ x0 + x1", df, random_intercepts="rater")
    rows, x = res.likelihood.rows, res.internal_params
    choice = choose_points(rows, "logit", x)
    assert choice.sampled == 40 and choice.points >= 3
    ref = marginal_sums(rows, "logit", x, points=50, order=0).loglik
    assert abs(marginal_sums(rows, "logit", x, points=choice.points, order=0).loglik - ref) <= 1e-4
    assert abs(marginal_sums(rows, "logit", x, points=choice.points - 2, order=0).loglik - ref) > 1e-4


def test_sampled_choice_holds_on_all_groups():
    """With more groups than are sampled (300 groups of about 10 rows), the chosen points
    still match the 50-point rule to 1e-4 summed over every group (the 50-point rule is
    itself checked against scipy.integrate.quad in test_random_intercepts)."""
    df, _ = medium(n=3000, n_groups=300, seed=8)
    res = ow.fit("grade ~ x0 + x1", df, random_intercepts="rater")
    rows = res.likelihood.rows
    assert rows.n_groups == 300 and choose_points(rows, "logit", res.internal_params).sampled < 300
    ref = marginal_sums(rows, "logit", res.internal_params, points=50, order=0).loglik
    assert abs(res.loglik - ref) < 1e-4


@pytest.mark.parametrize("link", ["logit", "probit", "loglog", "cauchit"])
def test_covariance_against_differenced_gradient(link):
    """The covariance (one fixed-node analytic Hessian) against the inverse of the Hessian
    by finite differences (scipy.optimize.approx_fprime) of the exact gradient of the
    50-point marginal log-likelihood (that gradient is checked against scipy.differentiate,
    the log-likelihood against scipy.integrate.quad, in test_random_intercepts)."""
    X, y, g, w = small(link)
    res = ow.fit("grade ~ x0 + x1", frame(X, y, g, w), weights="w", random_intercepts="rater", link=link)
    assert res.converged
    est = np.concatenate([res.params, res.sds])
    rows, _ = GroupedRows.from_rows(X, y, g, M + 1, weights=w)
    H = optimize.approx_fprime(est, lambda x: marginal_sums(rows, link, x, points=50, order=1).grad, 1e-6)
    cov = np.linalg.inv(-0.5 * (H + H.T))
    scale = np.sqrt(np.outer(np.diag(cov), np.diag(cov)))
    np.testing.assert_array_less(np.abs(res.full_cov - cov) / scale, 5e-5)


def test_fit_from_plain_start_reaches_the_scipy_maximum():
    """Start values come from the plain model; the optimum is still the maximum of the quad
    likelihood found by scipy.optimize (tests/reference_grouped.py) from elsewhere."""
    X, y, g, w = small("logit", n=60, n_groups=5, seed=11)
    res = ow.fit("grade ~ x0 + x1", frame(X, y, g, w), weights="w", random_intercepts="rater", quadrature=25)
    assert res.converged
    start = np.concatenate([res.params, res.sds]) - 0.05
    est, ll = RG.fit(X, y, g, M, "logit", start, weights=w)
    assert res.loglik == pytest.approx(ll, abs=1e-6)
    np.testing.assert_allclose(np.concatenate([res.params, res.sds]), est, atol=2e-3)

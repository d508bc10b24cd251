"""Links and tail-exact probabilities against scipy.stats and 50-digit mpmath arithmetic."""
import mpmath
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

import ordwidgets as ow
from ordwidgets.core.probabilities import interval_logprob, interval_probability

LINKS = list(ow.link_names())
SCIPY = {"logit": stats.logistic, "probit": stats.norm, "cloglog": stats.gumbel_l,
         "loglog": stats.gumbel_r, "cauchit": stats.cauchy}
mpmath.mp.dps = 50


def mp_cdf(name, t):
    """CDFs written from their textbook definitions, evaluated in 50-digit arithmetic."""
    t = mpmath.mpf(t)
    return {
        "logit": lambda: 1 / (1 + mpmath.exp(-t)),
        "probit": lambda: mpmath.ncdf(t),
        "cloglog": lambda: 1 - mpmath.exp(-mpmath.exp(t)),
        "loglog": lambda: mpmath.exp(-mpmath.exp(-t)),
        "cauchit": lambda: mpmath.mpf(1) / 2 + mpmath.atan(t) / mpmath.pi,
    }[name]()


def test_link_names_and_unknown_link_lists_valid_ones():
    assert LINKS == ["logit", "probit", "cloglog", "loglog", "cauchit"]
    with pytest.raises(ow.UnknownLinkError, match="logit, probit, cloglog, loglog, cauchit"):
        ow.get_link("logistic-ish")


@pytest.mark.parametrize("name", LINKS)
def test_functions_match_scipy_stats(name):
    # Reference: scipy.stats' own implementation of each distribution.
    link, ref = ow.get_link(name), SCIPY[name]
    t = np.linspace(-12, 12, 97)
    np.testing.assert_allclose(link.cdf(t), ref.cdf(t), rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(link.sf(t), ref.sf(t), rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(link.pdf(t), ref.pdf(t), rtol=1e-11)
    np.testing.assert_allclose(link.logpdf(t), ref.logpdf(t), rtol=1e-11, atol=1e-12)
    p = np.linspace(0.001, 0.999, 101)
    np.testing.assert_allclose(link.ppf(p), ref.ppf(p), rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(link.isf(p), ref.isf(p), rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("name", LINKS)
def test_fitter_kernel_matches_scipy_stats_in_both_tails(name):
    # Reference: scipy.stats (F, S, f) and central differences of its logpdf (f'/f), on both
    # sides of zero and far into the tails, where the kernel's branch selection matters.
    link, ref = ow.get_link(name), SCIPY[name]
    t = np.concatenate([np.linspace(-30, 30, 121), [-0.0, 0.0, np.nextafter(0, 1), -1e-300]])
    F, S, f, score = link.kernel(t.copy())
    np.testing.assert_allclose(F, ref.cdf(t), rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(S, ref.sf(t), rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(f, ref.pdf(t), rtol=1e-11, atol=1e-300)
    h = 1e-5
    np.testing.assert_allclose(score, (ref.logpdf(t + h) - ref.logpdf(t - h)) / (2 * h), rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize("name", LINKS)
def test_score_of_density_matches_numerical_derivative(name):
    # Reference: central differences of scipy.stats' logpdf.
    link, ref = ow.get_link(name), SCIPY[name]
    t, h = np.linspace(-6, 6, 41), 1e-5
    numeric = (ref.logpdf(t + h) - ref.logpdf(t - h)) / (2 * h)
    np.testing.assert_allclose(link.dlogpdf(t), numeric, rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("name", LINKS)
@pytest.mark.parametrize("t", [-30.0, -8.0, 8.0, 30.0])
def test_tails_are_exact_against_mpmath(name, t):
    # Reference: the definitions in 50-digit arithmetic; relative error must stay ~1e-13
    # in both tails (a naive 1 - F(t) would lose every digit for t = 30).
    c = mp_cdf(name, t)
    if c == 0 or 1 - c == 0:
        pytest.skip("beyond double range")
    link = ow.get_link(name)
    for got, want in [(link.cdf(t), c), (link.sf(t), 1 - c)]:
        if want > 1e-300:
            assert float(got) == pytest.approx(float(want), rel=1e-12)


@pytest.mark.parametrize("name", LINKS)
def test_interval_probability_far_in_the_upper_tail(name):
    # P(7 < e <= 9) computed in 50 digits; naive F(9) - F(7) cancels for every link.
    want = float(mp_cdf(name, 9) - mp_cdf(name, 7))
    got = float(interval_probability(name, 7.0, 9.0))
    assert got == pytest.approx(want, rel=1e-10)
    assert float(np.exp(interval_logprob(name, 7.0, 9.0))) == pytest.approx(want, rel=1e-10)


@pytest.mark.parametrize("name", LINKS)
def test_logprob_is_finite_where_probability_underflows(name):
    # An interval 1000 units out in the tail that decays no faster than exponentially has
    # probability far below 1e-308, yet its log is finite.  (The Gumbel links' other tail
    # decays doubly exponentially: log S = -e^1000 is -inf in doubles, honestly.)
    a, b = (-1001.0, -1000.0) if name == "cloglog" else (1000.0, 1001.0)
    lp = float(interval_logprob(name, a, b))
    assert np.isfinite(lp)
    if name in {"logit", "loglog"}:
        # Closed form: both tails behave as e^{-t}: log(e^-1000 - e^-1001) = -1000 + log(1 - 1/e).
        assert lp == pytest.approx(-1000 + np.log1p(-np.exp(-1.0)), rel=1e-12)
    if name == "cloglog":
        assert lp == pytest.approx(-1000 + np.log1p(-np.exp(-1.0)), rel=1e-12)


@settings(max_examples=200, deadline=None)
@given(
    name=st.sampled_from(LINKS),
    eta=st.floats(-1e8, 1e8, allow_nan=False),
    gaps=st.lists(st.floats(1e-3, 5.0), min_size=1, max_size=6),
    start=st.floats(-10, 10),
)
def test_category_probabilities_are_a_distribution(name, eta, gaps, start):
    # Property (definition of a probability distribution): finite, non-negative, sum to 1,
    # for linear predictors up to +-1e8.
    theta = start + np.cumsum([0.0] + gaps)
    p = ow.category_probabilities(name, theta, [eta])
    assert np.all(np.isfinite(p)) and np.all(p >= 0)
    assert p.sum() == pytest.approx(1.0, abs=1e-12)


@settings(max_examples=100, deadline=None)
@given(name=st.sampled_from(LINKS), a=st.floats(-40, 40), w=st.floats(1e-6, 10))
def test_logprob_equals_log_of_probability(name, a, w):
    # Two routes to the same number must agree wherever the probability is representable.
    p = float(interval_probability(name, a, a + w))
    if p > 1e-290:
        assert float(interval_logprob(name, a, a + w)) == pytest.approx(np.log(p), rel=1e-9, abs=1e-12)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.booleans(), st.floats(-1, 1), st.floats(-1, 1)), min_size=1, max_size=40))
def test_branch_free_pick_equals_numpy_where(rows):
    # Reference: numpy.where. The arithmetic selection the kernels use must pick the same values.
    from ordwidgets.core.links import pick

    flag, a, b = (np.array(c) for c in zip(*rows))
    np.testing.assert_array_equal(pick(flag, a, b), np.where(flag, a, b))
    with_nan = np.where(flag, a, np.nan)  # nan where the first branch is not taken
    got = pick(flag, with_nan, np.full_like(b, np.nan))
    assert np.isnan(got).all()

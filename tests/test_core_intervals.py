"""Narrow intervals far in the tails: interval probabilities against high-precision mpmath.

Reference: the CDFs and survival functions written from their definitions and evaluated
with mpmath at 60 significant digits; the difference is taken on the side where it does not
cancel in 60 digits, so the reference is exact to far below double precision.
"""
import math

import mpmath
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import ordwidgets as ow
from ordwidgets.core.probabilities import interval_logprob, interval_probability

EPS = np.finfo(float).eps


def _mp(name, t, upper):
    """F(t) (``upper=False``) or S(t) = 1 - F(t) (``upper=True``), each from its definition."""
    t = mpmath.mpf(t)
    cdf = {"logit": lambda s: 1 / (1 + mpmath.exp(-s)), "probit": mpmath.ncdf,
           "cauchit": lambda s: mpmath.atan2(1, -s) / mpmath.pi,
           "cloglog": lambda s: -mpmath.expm1(-mpmath.exp(s)),
           "loglog": lambda s: mpmath.exp(-mpmath.exp(-s))}
    sf = {"cloglog": lambda s: mpmath.exp(-mpmath.exp(s)),
          "loglog": lambda s: -mpmath.expm1(-mpmath.exp(-s))}
    if not upper:
        return cdf[name](t)
    return sf[name](t) if name in sf else cdf[name](-t)  # the other three are symmetric


def mp_interval(name, a, b):
    """P(a < e <= b) in 60 digits, differenced where it does not cancel."""
    with mpmath.workdps(60):
        if math.isinf(b) and b > 0:
            return _mp(name, a, True)
        if math.isinf(a) and a < 0:
            return _mp(name, b, False)
        if a >= 0:
            return _mp(name, a, True) - _mp(name, b, True)
        return _mp(name, b, False) - _mp(name, a, False)


def _check(name, a, b, rel):
    want = mp_interval(name, a, b)
    got = float(interval_probability(name, a, b))
    assert got == pytest.approx(float(want), rel=rel)
    got_log = float(interval_logprob(name, a, b))
    assert got_log == pytest.approx(float(mpmath.log(want)), rel=rel, abs=rel)


@pytest.mark.parametrize("a, width", [(-35.25, 1e-6), (35.25, 1e-6), (-1e6, 1e-3), (1e6, 1e-3),
                                      (2.0, 1e-12), (-3.0, 1e-9), (1e100, 1e90), (-1e100, 1e90),
                                      (-0.5, 1.0), (0.7, 1e-14)])
def test_cauchit_narrow_intervals_far_out_are_exact(a, width):
    # The difference of two CDFs near 1/(pi |t|) lost log10|t| digits (1e-8 relative at
    # t = -35, width 1e-6); the one-arctangent form is exact to a few ulp anywhere.
    _check("cauchit", a, a + width, rel=5e-15)


@pytest.mark.parametrize("a, b", [(-np.inf, -1e8), (1e8, np.inf), (-np.inf, np.inf), (-2.0, 3.0),
                                  (-np.inf, 0.0), (0.0, np.inf), (-1e300, 1e300)])
def test_cauchit_infinite_and_wide_intervals(a, b):
    _check("cauchit", a, b, rel=5e-15)


def test_cauchit_log_is_finite_where_the_probability_underflows():
    # Closed form: P(l < e <= u) ~ (1/l - 1/u) / pi for l, u -> inf, here 1e-310 / pi * (1 - 1/2).
    l, u = 1e305, 2e305
    assert float(interval_probability("cauchit", l, u)) == pytest.approx(0.5e-305 / np.pi, rel=1e-12)
    lp = float(interval_logprob("cauchit", 1e307, 1e307 * (1 + 1e-9)))
    want = mpmath.log(mp_interval("cauchit", 1e307, 1e307 * (1 + 1e-9)))
    assert lp == pytest.approx(float(want), rel=1e-14)


def test_empty_and_reversed_intervals_have_no_mass():
    assert interval_probability("cauchit", 2.0, 2.0) == 0.0
    assert interval_probability("cauchit", 3.0, -3.0) == 0.0
    assert interval_logprob("cauchit", 2.0, 2.0) == -np.inf


@settings(max_examples=60, deadline=None)
@given(name=st.sampled_from(list(ow.link_names())), a=st.floats(-40, 40),
       log_width=st.floats(-9, 1))
def test_narrow_interval_error_does_not_grow_in_the_tails(name, a, log_width):
    # A difference of two rounded CDF values of size F loses F / (f w) ulps: bounded on the
    # side each link differences (F/f <= 2 for logit, ~1/|t| for probit, ~1 for the Gumbel
    # links) but ~|t| for the Cauchy tail, which has its own closed form now.  So the error
    # must stay within a fixed multiple of eps / w wherever the interval lies -- on top of the
    # error of one tail value itself (scipy's ndtr is good to ~5e-14 relative near t = 29, not
    # to eps: found by hypothesis at a = 29, w = 1), which no differencing can undo.
    b = a + 10.0 ** log_width
    want = mp_interval(name, a, b)
    if want < 1e-300:
        return
    got = float(interval_probability(name, a, b))
    width = b - a
    near = (a, np.inf) if a >= 0 else (-np.inf, b)  # the one-sided tail at the interval's nearer end
    one_tail = abs(float(interval_probability(name, *near)) / float(mp_interval(name, *near)) - 1)
    assert abs(got / float(want) - 1) <= 50 * EPS * max(1.0, 1.0 / width) + 1e-13 + 4 * one_tail

"""Shortcuts of the plain fit checked against outside references.

* The sums at the engine's start (every effect zero) come from per-category moments instead
  of a pass over the rows; they must equal the independent likelihood of
  ``tests/reference.py`` (McCullagh 1980, eq. 2.3, scipy.stats CDFs) and its derivatives by
  scipy.differentiate, for every link and with frequency weights that include zeros.
* Integer responses are coded by a lookup table; the codes must equal numpy's sorted
  unique values and ``np.searchsorted`` (the definition of "sorted integer levels").
* A formula of plain numeric columns reuses its model spec; the design must equal
  formulaic's own encoding of all rows, and a column of another type must not reuse it.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from formulaic import model_matrix

from ordwidgets.core import design as dz
from ordwidgets.core.engine import closed_form_thresholds
from ordwidgets.core.objective import sort_by_category, sorted_standardised
from ordwidgets.core.sorted_design import SortedDesign

from . import reference as R

LINKS = ["logit", "probit", "cloglog", "loglog", "cauchit"]


def _sorted_rows(n=300, seed=0, weighted=False):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 3)) * [1.0, 3.0, 0.2] + [0.0, 50.0, -2.0]
    eta = (X - X.mean(axis=0)) @ [0.7, 0.1, -1.0]
    y = np.digitize(eta + rng.logistic(size=n), [-1.5, -0.5, 0.5, 1.5])
    w = rng.integers(0, 4, n).astype(float) if weighted else None
    order, bounds = sort_by_category(y, 5)
    ws = None if w is None else w[order]
    return sorted_standardised(X, order, bounds, ws), y[order], bounds, ws


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("link", LINKS)
def test_sums_at_zero_effects_equal_the_reference_likelihood(link, weighted):
    cols, ys, bounds, ws = _sorted_rows(weighted=weighted)
    design = SortedDesign(cols.X, bounds, ws, moments=cols.moments)
    params = np.r_[closed_form_thresholds(link, design.counts()), np.zeros(3)]
    assert design._at_zero(design.split(params))  # the shortcut is the path under test
    ll, g, H = design.sums(link, params)
    m = 4
    assert ll == pytest.approx(R.loglik(params, cols.X, ys, m, link, ws), rel=1e-12)
    np.testing.assert_allclose(g, R.gradient(params, cols.X, ys, m, link, ws), atol=1e-6 * len(ys))
    np.testing.assert_allclose(H, R.hessian(params, cols.X, ys, m, link, ws), rtol=1e-5, atol=1e-5 * len(ys))
    # and the row-by-row path of the same design agrees to rounding
    rows = SortedDesign(cols.X, bounds, ws)
    ll2, g2, H2 = rows.sums(link, params)
    assert ll == pytest.approx(ll2, rel=1e-13)
    np.testing.assert_allclose(g, g2, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(H, H2, rtol=1e-10, atol=1e-9)


def test_sums_away_from_zero_do_not_take_the_shortcut():
    cols, ys, bounds, _ = _sorted_rows()
    design = SortedDesign(cols.X, bounds, moments=cols.moments)
    params = np.r_[closed_form_thresholds("logit", design.counts()), [0.3, 0.0, -0.2]]
    assert not design._at_zero(design.split(params))
    assert design.sums("logit", params)[0] == pytest.approx(R.loglik(params, cols.X, ys, 4, "logit"), rel=1e-12)


@pytest.mark.parametrize("dtype", [np.int8, np.int16, np.int64, np.uint8, np.uint32])
def test_integer_codes_equal_sorted_unique_values(dtype):
    rng = np.random.default_rng(4)
    low = -120 if np.issubdtype(dtype, np.signedinteger) else 0
    v = rng.choice(np.array([low, low + 3, 7, 90, 100]), 500).astype(dtype)
    codes, levels = dz.encode_response(pd.Series(v))
    uniq = np.unique(v)
    np.testing.assert_array_equal(codes, np.searchsorted(uniq, v))
    assert levels == tuple(int(u) for u in uniq)
    assert all(type(lv) is int for lv in levels)


def test_wide_integer_span_falls_back_to_sorting():
    v = pd.Series([0, 10 ** 9, 5, 0])
    codes, levels = dz.encode_response(v)
    assert levels == (0, 5, 10 ** 9) and codes.tolist() == [0, 2, 1, 0]


def test_reused_spec_gives_formulaic_design_and_follows_column_types():
    rng = np.random.default_rng(5)
    df = pd.DataFrame({"a": rng.normal(size=40), "b": rng.normal(size=40)})
    for _ in range(2):  # the second call reuses the spec
        X, names, _ = dz.design_matrix("a + b", df)
        ref = model_matrix("a + b", df)
        np.testing.assert_array_equal(X, ref[["a", "b"]].to_numpy())
        assert names == ("a", "b")
    df["b"] = rng.integers(0, 3, 40)  # another type: a new key, learnt again
    X, names, _ = dz.design_matrix("a + b", df)
    np.testing.assert_array_equal(X, model_matrix("a + b", df)[["a", "b"]].to_numpy())

"""Inputs the state must handle or refuse by name.

Column names that need quoting in a formula (spaces, '-', quotes, '<', dots, integers) work in
the state and the dashboard as in ``ow.fit``: the panels' curves equal the core's ``predict``
on the same rows, and dropping a predictor refits the model without it.  Random-intercept and sandwich-covariance
fits are carried by the state: tests/test_state_groups.py."""
import html
import warnings

import numpy as np
import ipywidgets as ipw
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st_

import ordwidgets as ow
from ordwidgets import _spec

HOSTILE = ["street width", "pit-area", "it's", '<b onclick="x">', "x.y", "a<b"]


def frame_with(num_name, cat_name, n=240, seed=3):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    g = rng.choice(["oak", "elm"], size=n)
    y = np.digitize(0.9 * x + 0.6 * (g == "elm") + rng.logistic(size=n), [-1.0, 0.2, 1.4])
    return pd.DataFrame({num_name: x, cat_name: g, "grade": y})


def html_values(widget):
    """Every HTML widget's value in a widget tree."""
    out = [widget.value] if isinstance(widget, ipw.HTML) else []
    for child in getattr(widget, "children", ()):
        out += html_values(child)
    return out


def formula_for(num_name, cat_name):
    return f"grade ~ {ow.quote_name(num_name)} + {ow.quote_name(cat_name)}"


@pytest.mark.parametrize("num_name,cat_name", [(HOSTILE[0], HOSTILE[1]), (HOSTILE[2], HOSTILE[3]),
                                               (HOSTILE[4], HOSTILE[5])])
def test_dashboard_curves_equal_predict_with_quoted_names(num_name, cat_name):
    df = frame_with(num_name, cat_name)
    res = ow.fit(formula_for(num_name, cat_name), df)
    d = ow.dashboard(res, background=False)
    try:
        st, ex = d.state, d.explorer
        assert st.included == [num_name, cat_name]
        st.focus = num_name
        *_, grid = ex.grid_frame()
        ref = res.predict(grid).to_numpy(float)  # the core, on the explorer's own rows
        np.testing.assert_allclose(np.asarray(ex.lines.y), ref.T, rtol=0, atol=1e-14)
        assert html.escape(num_name) in ex.children[0].value  # the heading names the focus, escaped
        for text in html_values(d):
            assert '<b onclick="x">' not in text  # never raw markup from a column name
    finally:
        d.close()


@pytest.mark.parametrize("num_name,cat_name", [(HOSTILE[0], HOSTILE[1]), (HOSTILE[3], HOSTILE[4])])
def test_dropping_a_quoted_predictor_refits_without_it(num_name, cat_name):
    df = frame_with(num_name, cat_name)
    state = ow.FitState.from_fit(ow.fit(formula_for(num_name, cat_name), df))
    state.dropped = [cat_name]
    # Reference: the same model written out by hand, fitted by the core.
    ref = ow.fit(f"grade ~ {ow.quote_name(num_name)}", df)
    assert not state.error
    np.testing.assert_allclose(state.fit.params, ref.params, rtol=0, atol=1e-10)


@settings(max_examples=25, deadline=None)
@given(names=st_.lists(st_.text(st_.characters(codec="ascii", exclude_characters="`\\~\x00"), min_size=1,
                                max_size=8).filter(lambda s: s.strip() and s not in ("1", ".")),
                       min_size=2, max_size=3, unique=True))
def test_variables_and_without_round_trip_any_quotable_names(names):
    # The terms we write from column names parse back to the same columns, and dropping one
    # leaves exactly the others (formulaic's parser is the outside reference here).
    formula = "grade ~ " + " + ".join(ow.quote_name(n) for n in names)
    assert _spec.variables(formula) == names
    left = _spec.without(formula, [names[0]])
    assert _spec.variables(left) == names[1:]


@pytest.mark.parametrize("name", ["a`b", "back\\slash", "y~x", "1", ".", " "])
def test_names_a_formula_cannot_hold_are_refused_by_name(name):
    with pytest.raises(ow.OrdinalDataError, match="cannot be written in a formula"):
        ow.quote_name(name)


def test_factor_wrapped_in_C_is_categorical_with_a_quoted_name():
    df = frame_with("girth", "pit-area")
    assert _spec.is_categorical(df["girth"], "girth", "grade ~ C(girth)")
    assert not _spec.is_categorical(df["girth"], "girth", "grade ~ C(girth2) + girth")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert _spec.is_categorical(df["pit-area"], "pit-area", "grade ~ C(`pit-area`)")

"""Formula terms -> design columns (terms.term_columns) -> parameter names (termtests.term_parameters)."""
import numpy as np
import pandas as pd
from formulaic import model_matrix

import ordwidgets as ow
from ordwidgets.core.terms import term_columns
from ordwidgets.core.termtests import term_parameters


def _data(n=400, seed=3):
    rng = np.random.default_rng(seed)
    g = pd.Categorical(rng.choice(["north", "east", "south", "west"], n), categories=["north", "east", "south", "west"])
    x, v = rng.normal(size=n), rng.uniform(1, 3, n)
    eta = 0.6 * x + np.where(g == "east", 0.5, 0.0) + 0.3 * x * v
    y = np.digitize(eta + rng.logistic(size=n), [-0.8, 0.4, 1.5])
    return pd.DataFrame({"y": y, "x": x, "v": v, "g": g})


def _alone(rhs, df):
    """Columns the term gets when formulaic (an outside library) encodes it on its own."""
    return [c for c in model_matrix(rhs, df).columns if c != "Intercept"]


def test_plain_fit_groups_the_columns_of_each_term_like_formulaic_encodes_them_alone():
    # Reference: formulaic's model_matrix of each term on its own, and the factor's
    # categories from pandas (treatment contrasts drop the first category).
    df = _data()
    res = ow.fit("y ~ x + C(g) + x:v + np.log(v)", df)
    got = term_columns(res)
    assert set(got) == {"x", "C(g)", "x:v", "np.log(v)"}
    assert got["C(g)"] == [f"C(g)[T.{c}]" for c in df["g"].cat.categories[1:]] == _alone("C(g)", df)
    assert got["x:v"] == _alone("0 + x:v", df) and got["np.log(v)"] == _alone("np.log(v)", df)
    flat = [c for cols in got.values() for c in cols]
    assert sorted(flat) == sorted(res.coef_names) and len(flat) == len(set(flat))
    # ordered as the design columns (the order formulaic expands the formula in)
    assert flat == list(res.coef_names)
    assert term_parameters(res) == got


def test_extended_fit_puts_per_threshold_and_scale_coefficients_under_their_term():
    df = _data()
    res = ow.fit("y ~ x + g", df, nonparallel=["g"], scale_by=["x", "v"])
    got = term_parameters(res)
    dummies = [f"g[T.{c}]" for c in df["g"].cat.categories[1:]]
    assert term_columns(res)["g"] == dummies
    assert got["g"] == [f"{d} @ {t}" for d in dummies for t in res.threshold_names]
    assert got["x"] == ["x", "scale: x"]
    assert got["v"] == ["scale: v"]  # a scale-only variable is a term of its own
    flat = [c for cols in got.values() for c in cols]
    assert sorted(flat) == sorted(res.coef_names) and len(flat) == len(set(flat))


def test_thresholds_only_fit_has_no_terms():
    df = _data()
    assert term_columns(ow.fit("y ~ 1", df)) == {}

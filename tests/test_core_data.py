"""Bad input: each case gives a clear error or a clear warning, never silence."""
import warnings

import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow

from . import reference as R


@pytest.fixture
def df():
    X, y = R.simulate(200, [0.8, -0.4], [-0.5, 0.5], seed=1)
    return pd.DataFrame({"wait": X[:, 0], "crowding": X[:, 1], "grade": y,
                         "route": np.tile(["north", "south", "east", "west"], 50)})


def test_ordered_categorical_order_is_used(df):
    order = ["low", "mid", "high"]
    lab = pd.Categorical(np.array(order)[df["grade"]], categories=order, ordered=True)
    res = ow.fit("grade ~ wait", df.assign(grade=lab))
    assert res.levels == tuple(order)
    ref = ow.fit("grade ~ wait", df)
    np.testing.assert_allclose(res.params, ref.params)  # same codes, same fit


def test_strings_need_levels_and_levels_define_order(df):
    words = np.array(["poor", "fair", "good"])[df["grade"]]
    with pytest.raises(ow.OrdinalDataError, match="levels="):
        ow.fit("grade ~ wait", df.assign(grade=words))
    res = ow.fit("grade ~ wait", df.assign(grade=words), levels=["poor", "fair", "good"])
    assert res.levels == ("poor", "fair", "good")
    unordered = pd.Categorical(words)
    with pytest.raises(ow.OrdinalDataError, match="unordered"):
        ow.fit("grade ~ wait", df.assign(grade=unordered))


def test_values_outside_levels_are_named(df):
    words = np.array(["poor", "fair", "good"])[df["grade"]]
    with pytest.raises(ow.OrdinalDataError, match="'good'"):
        ow.fit("grade ~ wait", df.assign(grade=words), levels=["poor", "fair"])


def test_fewer_than_two_categories(df):
    with pytest.raises(ow.OrdinalDataError, match="fewer than two observed categories"):
        ow.fit("grade ~ wait", df.assign(grade=1))


def test_unknown_link(df):
    with pytest.raises(ow.UnknownLinkError, match="cauchit"):
        ow.fit("grade ~ wait", df, link="tobit")


@pytest.mark.parametrize("bad, msg", [(-1.0, "non-negative"), (np.inf, "finite")])
def test_bad_weights(df, bad, msg):
    w = np.ones(len(df))
    w[3] = bad
    with pytest.raises(ow.OrdinalDataError, match=msg):
        ow.fit("grade ~ wait", df, weights=w)
    with pytest.raises(ow.OrdinalDataError, match="numeric"):
        ow.fit("grade ~ wait", df.assign(w="heavy"), weights="w")


def test_mixed_numeric_and_text_column_is_refused(df):
    col = df["wait"].astype(object)
    col.iloc[5] = "n/a"
    with pytest.raises(ow.OrdinalDataError, match="'wait'.*'n/a'"):
        ow.fit("grade ~ wait", df.assign(wait=col))


def test_collinear_predictors_are_named(df):
    with pytest.raises(ow.CollinearityError, match="wait, crowding, total|crowding, wait, total"):
        ow.fit("grade ~ wait + crowding + total", df.assign(total=df.wait + 2 * df.crowding))
    with pytest.raises(ow.CollinearityError, match="constant.*flat"):
        ow.fit("grade ~ wait + flat", df.assign(flat=3.0))


def test_a_column_far_from_zero_is_refused_with_the_remedy(df):
    far = df.wait + 1e12
    assert far.std() / far.mean() < 1e-12 < far.std()  # numpy: varies, but below 1e-12 of its size
    with pytest.raises(ow.CollinearityError, match="far varies.*centre it"):
        ow.fit("grade ~ wait + far", df.assign(far=far))
    with pytest.raises(ow.CollinearityError) as flat:
        ow.fit("grade ~ wait + flat", df.assign(flat=3.0))
    assert "centre" not in str(flat.value)  # a true constant gets no remedy about centring


def test_fewer_rows_than_parameters():
    tiny = pd.DataFrame({"grade": [0, 1, 2, 1], "a": [1.0, 2, 3, 5], "b": [2.0, 1, 0, 4], "c": [0.5, 0, 1, 7]})
    with pytest.raises(ow.OrdinalDataError, match="fewer rows than parameters"):
        ow.fit("grade ~ a + b + c", tiny)


def test_missing_columns_are_listed(df):
    with pytest.raises(ow.OrdinalDataError, match="not in the data: 'speed'"):
        ow.fit("grade ~ wait + speed", df)
    with pytest.raises(ow.OrdinalDataError, match="response column 'rating'"):
        ow.fit("rating ~ wait", df)


def test_missing_values_are_dropped_with_counts(df):
    d = df.copy()
    d.loc[[0, 1, 2], "wait"] = np.nan
    d.loc[[2, 3], "route"] = None
    with pytest.warns(ow.DataWarning, match=r"dropped 4 rows with missing values \(route: 2, wait: 3\)"):
        res = ow.fit("grade ~ wait + C(route)", d)
    assert res.n_rows == 196
    assert any("dropped 4 rows" in n for n in res.notes)


def test_infinite_values_are_dropped_with_a_warning(df):
    d = df.copy()
    d.loc[7, "crowding"] = np.inf
    with pytest.warns(ow.DataWarning, match=r"infinite values \(crowding: 1\)"):
        res = ow.fit("grade ~ crowding", d)
    assert res.n_rows == 199


def test_declared_level_without_observations_is_dropped_with_a_warning(df):
    lab = pd.Categorical(np.array(["a", "b", "d"])[df["grade"]], categories=["a", "b", "c", "d"], ordered=True)
    with pytest.warns(ow.DataWarning, match="no observations were dropped: c"):
        res = ow.fit("grade ~ wait", df.assign(grade=lab))
    assert res.levels == ("a", "b", "d")


def test_complete_separation_is_flagged_and_named():
    # x > 0 determines y = 1 exactly: the MLE of its effect is +infinity.
    x = np.linspace(-2, 2, 80)
    d = pd.DataFrame({"x": x, "z": np.sin(7 * x), "grade": (x > 0).astype(int) + (x > 1).astype(int)})
    with pytest.warns(ow.SeparationWarning, match="x"):
        res = ow.fit("grade ~ x + z", d)
    assert not res.converged
    assert "separation" in res.message


def test_quasi_complete_separation_is_flagged():
    # A 0/1 flag with only the top category when flag = 1 (quasi-complete separation).
    rng = np.random.default_rng(5)
    flag = (rng.random(300) < 0.2).astype(float)
    grade = np.where(flag == 1, 2, rng.integers(0, 3, 300))
    d = pd.DataFrame({"flag": flag, "noise": rng.normal(size=300), "grade": grade})
    with pytest.warns(ow.SeparationWarning, match="flag"):
        res = ow.fit("grade ~ flag + noise", d)
    assert not res.converged


def test_clean_fit_raises_no_warning(df):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = ow.fit("grade ~ wait + crowding + C(route)", df)
    assert res.converged and res.notes == ()
    assert list(res.coefficients.index) == ["wait", "crowding", "C(route)[T.north]", "C(route)[T.south]",
                                            "C(route)[T.west]"]


def test_not_converged_warns(df):
    with pytest.warns(ow.ConvergenceWarning, match="no convergence after 1 Newton steps"):
        res = ow.fit("grade ~ wait + crowding", df, max_iter=1)
    assert not res.converged and "NOT converged" in res._repr_html_()


def test_numeric_columns_read_straight_from_the_frame_equal_formulaic_encoding():
    """Reference: formulaic's own model_matrix on all rows.  When every term is a numeric
    column the design is copied from the frame (the spec learnt from a few rows); it must
    be the same matrix, and the spec must encode new rows as formulaic does."""
    from formulaic import model_matrix

    from ordwidgets.core.design import SPEC_ROWS, design_matrix

    rng = np.random.default_rng(4)
    n = 5 * SPEC_ROWS
    data = pd.DataFrame({"girth": rng.normal(size=n), "age": rng.integers(1, 90, n),
                         "street width": pd.array(rng.normal(size=n), dtype="Float64")})
    rhs = "girth + age + `street width`"
    X, names, spec = design_matrix(rhs, data)
    ref = model_matrix(rhs, data, na_action="ignore").drop(columns="Intercept")
    assert names == tuple(ref.columns) == ("girth", "age", "street width")
    np.testing.assert_array_equal(X, ref.to_numpy(dtype=float))
    new = data.iloc[SPEC_ROWS:].sample(frac=1.0, random_state=0)
    np.testing.assert_array_equal(spec.get_model_matrix(new, na_action="ignore").to_numpy(dtype=float),
                                  model_matrix(rhs, new, na_action="ignore").to_numpy(dtype=float))

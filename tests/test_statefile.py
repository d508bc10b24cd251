"""State files: product-written formulas load back, other data are refused, every failure is StateFileError."""
import json
import tracemalloc
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hst

import ordwidgets as ow
from ordwidgets import FitState, StateFileError
from tests.ow_sim import simulate

GROUPS = "['plain', '<b>bold</b>', '<script>alert(1)</script>']"
FORMULA = f"rating ~ age + dose + C(group, levels={GROUPS})"


@pytest.fixture(scope="module")
def frame():
    return simulate(n=300, seed=4)


def _saved(frame, tmp_path, **edits):
    st = FitState(data=frame, formula=FORMULA)
    with st.batch():
        st.set_threshold(0, st.theta[0] - 0.25)
        st.selection = (1, 5)
        for k, v in edits.items():
            setattr(st, k, v)
    path = tmp_path / "s.json"
    st.save(path)
    return st, path


def test_a_formula_the_product_wrote_loads_back(frame, tmp_path):
    # C(x, levels=[...]) with quotes, brackets and hostile labels
    st, path = _saved(frame, tmp_path)
    back = FitState.load(path, frame)
    assert back.formula == FORMULA and back.to_dict() == st.to_dict()
    assert back.thresholds == st.thresholds
    # reference: the core fitter called directly on the same data
    np.testing.assert_allclose(back.fit.params, ow.fit(FORMULA, frame).params, rtol=1e-12)


@pytest.mark.parametrize("change, what", [
    (lambda d: d.iloc[:-1], "300 rows saved, 299 now"),
    (lambda d: d.assign(age=d.age + 1e-9), "the values differ"),
    (lambda d: d.assign(age=d.age.astype("float32")), "column 'age' was float64, is float32"),
    (lambda d: d.iloc[::-1].reset_index(drop=True), "the values differ"),
    (lambda d: d.assign(group=d.group.replace("plain", "other")), "levels of 'group' differ"),
])
def test_other_data_are_refused_unless_only_the_spec_is_asked_for(frame, tmp_path, change, what):
    _, path = _saved(frame, tmp_path)
    other = change(frame)
    with pytest.raises(StateFileError, match=what + ".*spec_only=True"):
        FitState.load(path, other)
    if "levels" in what:
        return  # the saved formula declares levels the new data do not have: shown below
    with pytest.warns(ow.DataWarning, match="saved thresholds, .*selection belong to the data .*dropped"):
        st = FitState.load(path, other, spec_only=True)
    assert st.selection == () and not st.edited
    np.testing.assert_allclose(st.fit.params, ow.fit(FORMULA, other).params, rtol=1e-10)


def test_an_unrelated_extra_column_is_the_same_data(frame, tmp_path):
    st, path = _saved(frame, tmp_path)
    assert FitState.load(path, frame.assign(note="x")).thresholds == st.thresholds


def test_non_frames_and_missing_columns_give_state_file_errors(frame, tmp_path):
    _, path = _saved(frame, tmp_path)
    for bad in (None, [1, 2], frame.to_dict(), frame.drop(columns="age")):
        with pytest.raises(StateFileError):
            FitState.load(path, bad)


def test_a_formula_with_a_huge_design_is_refused_before_memory_is_spent(tmp_path):
    big = simulate(n=30_000, seed=1, hostile=False)
    st = FitState(data=big.iloc[:300], formula="rating ~ age")
    doc = st.to_dict() | {"formula": "rating ~ C(age)"}
    path = tmp_path / "huge.json"
    path.write_text(json.dumps(doc))
    tracemalloc.start()
    try:
        with pytest.raises(StateFileError, match="design columns"):
            FitState.load(path, big, spec_only=True)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 100e6  # a dense 30,000 x 30,000 design would be 7.2 GB


@pytest.mark.parametrize("formula", [
    "rating ~ __import__('os').system('true')", "rating ~ np.random.seed(age)", "rating ~ eval('age')",
    "rating ~ (lambda: 1)()", "rating ~ age.real", "rating ~ C(group, contrasts=open('/etc/passwd'))",
    "rating ~ {open('/etc/passwd')}", "rating ~ `nope`", "nope ~ age", "rating ~ [a for a in age]",
    "rating ~ np.log(age)[0]", "rating ~ " + "(" * 1500 + "age" + ")" * 1500,
])
def test_hostile_formulas_are_refused_without_evaluation(frame, tmp_path, formula):
    _, path = _saved(frame, tmp_path)
    doc = json.loads(path.read_text()) | {"formula": formula}
    path.write_text(json.dumps(doc))
    with pytest.raises(StateFileError):
        FitState.load(path, frame, spec_only=True)


json_values = hst.recursive(
    hst.none() | hst.booleans() | hst.integers(-(10 ** 400), 10 ** 400) | hst.floats(allow_nan=False, allow_infinity=False)
    | hst.text(max_size=12),
    lambda inner: hst.lists(inner, max_size=4) | hst.dictionaries(hst.text(max_size=6), inner, max_size=3),
    max_leaves=8,
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                 HealthCheck.function_scoped_fixture])
@given(key=hst.sampled_from(["formula", "link", "weights", "levels", "dropped", "nonparallel", "scale_by",
                             "thresholds", "scenario", "baseline", "focus", "residual_draws",
                             "residual_seed", "selection", "data", "version"]),
       value=json_values)
def test_any_value_in_any_entry_loads_or_gives_a_state_file_error(frame, tmp_path, key, value):
    st, path = _saved(frame, tmp_path)
    doc = st.to_dict() | {key: value}
    path.write_text(json.dumps(doc, allow_nan=False))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            back = FitState.load(path, frame)
    except StateFileError:
        return
    assert isinstance(back, FitState) and np.all(np.isfinite(back.theta))

"""FitState: refit rules, validation, batching, reset and files."""
import json

import numpy as np
import pytest
import traitlets
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hst

import ordwidgets as ow
from ordwidgets.state import FitState, ThresholdEditError
from ordwidgets._statefile import StateFileError
from tests.ow_sim import FORMULA, data, simulate


def try_threshold(state, i, value):
    """``set_threshold``, where a refusal must leave the thresholds exactly as they were."""
    before = state.theta
    try:
        assert state.set_threshold(i, value) == value == state.theta[i]
    except ThresholdEditError:
        lo = before[i - 1] if i > 0 else -np.inf
        hi = before[i + 1] if i + 1 < len(before) else np.inf
        assert not lo < value < hi
        np.testing.assert_array_equal(state.theta, before)


@pytest.fixture
def state(data):
    return FitState(data=data, formula=FORMULA)


def test_state_matches_a_direct_fit(state, data):
    ref = ow.fit(FORMULA, data)  # reference: the core fitter called directly
    np.testing.assert_allclose(state.theta, ref.thresholds.to_numpy(), rtol=0, atol=1e-12)
    assert state.loglik == pytest.approx(ref.loglik, abs=1e-9)
    assert state.lr_distance == 0.0 and not state.edited


def test_from_fit_does_not_refit(data):
    res = ow.fit(FORMULA, data, link="probit")
    st = FitState.from_fit(res, data=data)
    assert st.fit is res and st.link == "probit"


def test_from_fit_uses_the_frame_the_result_holds(data):
    res = ow.fit(FORMULA, data)
    assert res.training.frame is data  # no rows dropped: the caller's frame, not a copy
    st = FitState.from_fit(res)
    assert st.fit is res and st.data is data
    dropped = data.copy()
    dropped.iloc[0, dropped.columns.get_loc("age")] = np.nan
    with pytest.warns(ow.DataWarning, match="dropped 1 rows"):
        res2 = ow.fit(FORMULA, dropped)
    assert len(res2.training.frame) == len(data) - 1
    assert FitState.from_fit(res2).frame.index.equals(res2.training.index)


def test_threshold_edit_is_cheap_and_exact(state):
    before = state.fit
    theta = state.theta.copy()
    theta[1] += 0.3
    state.thresholds = tuple(theta)
    assert state.fit is before  # no refit
    # reference: loglik of the core at the same thresholds
    assert state.loglik == pytest.approx(before.loglik_at(thresholds=theta), abs=1e-12)
    assert state.lr_distance == pytest.approx(2 * (before.loglik - state.loglik))
    assert state.lr_distance > 0 and state.changed == ("thresholds",)


def test_link_change_refits(state, data):
    n0 = state.updates
    state.link = "cloglog"
    ref = ow.fit(FORMULA, data, link="cloglog")  # reference: direct fit with that link
    np.testing.assert_allclose(state.fit.params, ref.params, atol=1e-8)
    assert state.updates == n0 + 1 and "fit" in state.changed


@pytest.mark.parametrize("bad", [(0.0, 0.0, 1.0), (2.0, 1.0, 3.0), (0.0, np.nan, 1.0), (0.0, 1.0)])
def test_crossing_or_bad_thresholds_refused(state, bad):
    old = state.thresholds
    with pytest.raises(traitlets.TraitError):
        state.thresholds = bad
    assert state.thresholds == old


def test_set_threshold_beyond_a_neighbour_is_refused(state):
    # the user guide: "an edit that would break their order is not accepted"
    theta, n0 = state.theta, state.updates
    for i, value in ((1, theta[2] + 5), (1, theta[2]), (2, theta[1] - 1e-9), (0, theta[1] + 1)):
        with pytest.raises(ow.OrdinalDataError, match="keep their order") as err:
            state.set_threshold(i, value)
        assert repr(state.fit.threshold_names[i]) in str(err.value)
        assert isinstance(err.value, traitlets.TraitError)
    for i, value in ((5, 0.0), (-1, 0.0), (0, np.nan), (0, "1")):
        with pytest.raises(ow.OrdinalDataError, match="does not exist|finite number"):
            state.set_threshold(i, value)
    np.testing.assert_array_equal(state.theta, theta)
    assert state.updates == n0
    inside = (theta[1] + theta[2]) / 2
    assert state.set_threshold(1, inside) == inside and state.theta[1] == inside


def test_batch_processes_once(state):
    n0 = state.updates
    with state.batch():
        state.set_threshold(0, state.theta[0] - 0.1)
        state.scenario = {"age": 30.0}
        state.focus = "dose"
    assert state.updates == n0 + 1
    assert set(state.changed) == {"thresholds", "scenario", "focus"}


def test_batch_link_and_drop_refit_once(state, data, monkeypatch):
    calls = []
    real = ow.state.core_fit
    monkeypatch.setattr(ow.state, "core_fit", lambda *a, **k: calls.append(1) or real(*a, **k))
    with state.batch():
        state.link = "probit"
        state.dropped = ("dose",)
    assert len(calls) == 1 and state.fit.coef_names == ow.fit("rating ~ age + C(group)", data).coef_names


def test_refused_refit_keeps_the_last_good_fit(state):
    good = state.fit
    state.formula = "rating ~ nonexistent"
    assert state.fit is good and state.formula == FORMULA and "refit refused" in state.error


def test_scenario_defaults_and_validation(state, data):
    assert state.scenario["age"] == pytest.approx(np.median(data.age))  # reference: numpy median
    assert state.scenario["group"] == data.group.value_counts().index[0]
    with pytest.raises(traitlets.TraitError):
        state.scenario = {"age": "old"}
    with pytest.raises(traitlets.TraitError):
        state.scenario = {"group": "never seen"}
    with pytest.raises(traitlets.TraitError):
        state.focus = "not a predictor"


def test_reset_restores_the_fitted_state(state):
    state.set_threshold(0, state.theta[0] - 1)
    state.scenario = {"age": 21.0}
    state.selection = (1, 2, 3)
    state.reset()
    assert not state.edited and state.lr_distance == 0 and state.selection == ()
    assert state.scenario == FitState(data=state.data, formula=FORMULA).scenario


def test_save_load_round_trips_exactly(state, data, tmp_path):
    with state.batch():
        state.link = "loglog"
        state.set_threshold(2, state.theta[2] + 0.123456789)
        state.scenario = {"age": 44.4, "group": "plain"}
        state.baseline = {"dose": -1.5}
        state.focus = "age"
        state.residual_seed, state.selection = 7, (5, 9)
    path = tmp_path / "s.json"
    state.save(path)
    back = FitState.load(path, data)
    assert back.to_dict() == state.to_dict()
    assert back.thresholds == state.thresholds  # exact float round trip
    assert back.loglik == state.loglik


HOSTILE_DOCS = {
    "code in formula": {"formula": "rating ~ __import__('os').system('touch /tmp/owned')"},
    "unknown name in formula": {"formula": "rating ~ eval(age)"},
    "attribute access": {"formula": "rating ~ np.random.seed(age)"},
    "bad link": {"link": "../../etc"},
    "extra key": {"payload": "x"},
    "wrong type": {"thresholds": "0,1,2"},
    "bool as int": {"residual_seed": True},
    "non-finite threshold": {"thresholds": [0, 1e400, 2]},
    "crossing thresholds": {"thresholds": [2.0, 1.0, 3.0]},
    "selection out of range": {"selection": [10**9]},
    "unknown weights column": {"weights": "w"},
}


@pytest.mark.parametrize("name", sorted(HOSTILE_DOCS))
def test_hostile_files_give_a_clear_error(state, data, tmp_path, name):
    doc = state.to_dict() | HOSTILE_DOCS[name]
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(doc).replace("Infinity", "1e400"))
    with pytest.raises(StateFileError):
        FitState.load(path, data)


@pytest.mark.parametrize("text", ["", "[1, 2]", "{\"format\": \"other\"}", "{" * 100000, "NaN", "\xff\xfe"])
def test_malformed_files_give_a_clear_error(data, tmp_path, text):
    path = tmp_path / "bad.json"
    path.write_text(text, encoding="latin-1")
    with pytest.raises(StateFileError):
        FitState.load(path, data)


def test_oversized_file_refused(data, tmp_path):
    path = tmp_path / "big.json"
    path.write_text(" " * 2_000_001)
    with pytest.raises(StateFileError, match="bytes"):
        FitState.load(path, data)
    with pytest.raises(StateFileError, match="bytes"):  # a device reports size 0 and never ends
        FitState.load("/dev/zero", data)


def test_random_edits_keep_the_state_consistent(state):
    rng = np.random.default_rng(3)
    for _ in range(300):
        action = rng.integers(4)
        if action == 0:
            try_threshold(state, int(rng.integers(3)), float(rng.normal(1.5, 2)))
        elif action == 1:
            state.scenario = {"age": float(rng.uniform(20, 70)), "dose": float(rng.normal())}
        elif action == 2:
            state.focus = str(rng.choice(state.included))
        else:
            state.reset_thresholds()
        assert np.all(np.diff(state.theta) > 0)
        assert state.loglik == pytest.approx(state.fit.loglik_at(thresholds=state.theta), abs=1e-9)


def test_batch_validates_the_final_thresholds_only(state):
    theta = state.theta
    shifted = tuple(theta + 5.0)
    with state.batch():  # an intermediate assignment may cross; the final one is checked
        state.thresholds = (theta[0] + 5.0, theta[1], theta[2])
        state.thresholds = shifted
    assert state.thresholds == shifted
    with pytest.raises(traitlets.TraitError):
        with state.batch():
            state.thresholds = (9.0, 8.0, 10.0)
    assert state.thresholds == shifted  # rolled back
    n0 = state.updates
    state.set_threshold(0, shifted[0] - 0.1)
    assert state.updates == n0 + 1 and state.changed == ("thresholds",)


def test_data_and_options_changes_refit(data):
    st = FitState(data=data, formula=FORMULA)
    weighted = data.assign(w=np.arange(len(data)) % 3 + 1.0)
    with st.batch():
        st.data = weighted
        st.options = {"weights": "w"}
    ref = ow.fit(FORMULA, weighted, weights="w")  # reference: direct weighted fit
    np.testing.assert_allclose(st.fit.params, ref.params, atol=1e-8)
    assert st.loglik == pytest.approx(ref.loglik)
    st.set_threshold(1, st.theta[1] + 0.2)  # weighted loglik at edited thresholds
    assert st.loglik == pytest.approx(ref.loglik_at(thresholds=st.theta), abs=1e-9)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(moves=hst.lists(hst.tuples(hst.integers(0, 2), hst.floats(-50, 50, allow_nan=False)), min_size=1, max_size=25))
def test_any_slider_sequence_keeps_order_and_exact_loglik(state, moves):
    for i, value in moves:
        try_threshold(state, i, value)
        assert np.all(np.diff(state.theta) > 0)
    # reference: the core's loglik at the same thresholds (no incremental bookkeeping)
    assert state.loglik == pytest.approx(state.fit.loglik_at(thresholds=state.theta), rel=1e-12, abs=1e-9)
    state.reset_thresholds()
    assert state.loglik == state.fit.loglik


def test_long_work_background_stale_and_cancelled(data):
    import threading
    from concurrent.futures import ThreadPoolExecutor

    pool = ThreadPoolExecutor(1)
    st = FitState(data=data, formula=FORMULA, executor=pool)
    gate, results = threading.Event(), []
    st.run_long("first", lambda: gate.wait(5) and "first done", results.append)
    st.run_long("queued", lambda: "never", results.append)
    assert st.busy == "first, queued"
    gate.set()
    st.close()  # cancels the queued job, drops the running one, ends the thread
    assert results == [] and st.busy == "" and st.executor is None
    st.run_long("after close", lambda: "inline", results.append)  # a closed state works inline
    assert results == ["inline"] and st.busy == ""
    st2 = FitState(data=data, formula=FORMULA, executor=ThreadPoolExecutor(1))
    gate2 = threading.Event()
    st2.run_long("stale", lambda: gate2.wait(5), results.append)
    st2.link = "probit"  # the refit lands while the job still waits
    gate2.set()
    assert st2.wait(10)
    assert results == ["inline"] and st2.busy == ""  # the result for the old fit is dropped
    st2.close()
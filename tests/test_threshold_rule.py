"""One rule for threshold values, one message: every entry point that takes thresholds refuses
the same bad values with the same words, naming the threshold by our label ("low->high").

The rule is the model's own: P(Y <= j) = F(theta_j - x'beta) needs finite, strictly
increasing thresholds (McCullagh 1980, eq. 2.3); nothing numeric is computed here.
"""
import json

import numpy as np
import pytest
import traitlets

import ordwidgets as ow
from ordwidgets._statefile import StateFileError
from ordwidgets.core.arguments import check_thresholds
from ordwidgets.core.exceptions import ThresholdError
from ordwidgets.state import FitState, ThresholdEditError
from tests.ow_sim import FORMULA, data  # noqa: F401  (fixture)


@pytest.fixture
def state(data):  # noqa: F811
    return FitState(data=data, formula=FORMULA)


def _bad_values(theta):
    """Bad edits of the fitted thresholds, with the label the message must name."""
    out = {}
    swapped = theta.copy()
    swapped[1] = theta[2] + 1.0  # passes its upper neighbour: the pair (1, 2) is out of order
    out["passes a neighbour"] = (swapped, 2)
    tie = theta.copy()
    tie[1] = theta[0]
    out["equals a neighbour"] = (tie, 1)
    gap = theta.copy()
    gap[2] = np.nan
    out["missing"] = (gap, 2)
    inf = theta.copy()
    inf[0] = np.inf
    out["infinite"] = (inf, 0)
    return out


def _message(call):
    with pytest.raises(ValueError) as err:
        call()
    return str(err.value)


def test_every_entry_point_gives_the_same_message(state, data, tmp_path):  # noqa: F811
    res = state.fit
    names = list(res.threshold_names)
    for case, (bad, which) in _bad_values(state.theta).items():
        core = _message(lambda: check_thresholds(bad, names))
        assert repr(names[which]) in core, case
        assert "->" in core and "|" not in core
        seen = {
            "error_bounds": _message(lambda: res.error_bounds(thresholds=bad)),
            "loglik_at": _message(lambda: res.loglik_at(thresholds=bad)),
            "surrogate residuals": _message(lambda: res.surrogate_residuals(thresholds=bad)),
            "probability-scale residuals": _message(lambda: res.probability_scale_residuals(thresholds=bad)),
            "residual diagnostics": _message(lambda: res.residual_diagnostics(thresholds=bad)),
        }
        with pytest.raises(traitlets.TraitError) as err:
            state.thresholds = tuple(bad)
        seen["FitState.thresholds"] = str(err.value)
        assert isinstance(err.value, ThresholdEditError) and isinstance(err.value, ThresholdError.__mro__[1])
        assert {k: v for k, v in seen.items() if v != core} == {}, case
        path = tmp_path / "edited.json"
        doc = state.to_dict() | {"thresholds": [float(v) for v in bad]}
        path.write_text(json.dumps(doc).replace("NaN", "1e400").replace("Infinity", "1e400"))
        with pytest.raises(StateFileError) as err:
            FitState.load(path, data)
        if case == "missing":  # JSON has no nan: the file holds 1e400, read back as inf
            core = _message(lambda: check_thresholds(np.where(np.isnan(bad), np.inf, bad), names))
        assert str(err.value).endswith(core), case


def test_a_single_edit_is_refused_with_the_rules_message(state):
    theta, names = state.theta, list(state.fit.threshold_names)
    moved = theta.copy()
    moved[1] = theta[2] + 5.0
    with pytest.raises(ThresholdEditError) as err:
        state.set_threshold(1, theta[2] + 5.0)
    assert str(err.value) == _message(lambda: check_thresholds(moved, names)) + "; the edit was not applied"
    assert repr(names[1]) in str(err.value) and repr(names[2]) in str(err.value)
    np.testing.assert_array_equal(state.theta, theta)


@pytest.mark.parametrize("bad", ["0,1,2", [True, 1.0, 2.0], [0.0, 1.0], [[0.0, 1.0, 2.0]], [10 ** 400, 1, 2]])
def test_values_that_are_not_one_number_per_threshold(bad):
    names = ["poor->fair", "fair->good", "good->fine"]
    with pytest.raises(ThresholdError, match=r"must be 3 numbers, one per threshold \(poor->fair, "):
        check_thresholds(bad, names)


def test_good_values_come_back_as_a_new_float_array():
    values = [0, 1.5, 2]
    out = check_thresholds(values, ["a->b", "b->c", "c->d"])
    assert out.dtype == float and out.tolist() == [0.0, 1.5, 2.0]
    out[0] = 9.0
    assert values[0] == 0
    np.testing.assert_array_equal(check_thresholds(np.array([-1.0, 3.0])), [-1.0, 3.0])
    assert ow.OrdinalDataError in ThresholdError.__mro__

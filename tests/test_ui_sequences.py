"""Random UI sequences (hypothesis stateful): after every step each panel shows the core's numbers,
computed afresh here, or says on screen why there are none; background work ends; close() leaves
no thread behind.

Steps: threshold edits (state and slider, some past a neighbour), partial scenario edits (some
outside the data), link changes while the background work runs, a predictor made non-parallel
(cut points may then cross), and ``close()`` of the state in the middle.
"""
import dataclasses
import threading
import warnings

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, settings
from hypothesis import strategies as hst
from hypothesis.stateful import RuleBasedStateMachine, invariant, precondition, rule

import ordwidgets as ow
from ordwidgets._jobs import THREAD_PREFIX
from ordwidgets._spec import grid_values
from ordwidgets.core import CrossingWarning, residual_diagnostics
from ordwidgets.state import ThresholdEditError

from tests.ow_sim import FORMULA, simulate

DATA = simulate(n=300, seed=11, hostile=True)


def core_at(st, frame):
    """Reference: the core's ``predict`` of a result carrying the shown thresholds."""
    res = st.fit
    shown = dataclasses.replace(res, params=np.concatenate([st.theta, res.params[res.n_thresholds:]]))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CrossingWarning)
        return shown.predict(data=frame).to_numpy(float)


def one_row(values):
    frame = pd.DataFrame({k: [v] for k, v in values.items()})
    frame["group"] = frame["group"].astype(str)
    return frame


class DashboardSequence(RuleBasedStateMachine):
    def __init__(self):
        super().__init__()
        self.threads_before = {t for t in threading.enumerate() if t.name.startswith(THREAD_PREFIX)}
        self.dash = ow.dashboard(ow.FitState(data=DATA, formula=FORMULA, nonparallel=("dose",)), background=True)
        self.st = self.dash.state

    # ---- steps ---------------------------------------------------------------------------------
    @rule(i=hst.integers(0, 2), value=hst.floats(-6, 8, allow_nan=False))
    def edit_threshold(self, i, value):
        before = self.st.theta
        try:
            self.st.set_threshold(i, value)
        except ThresholdEditError:
            assert np.array_equal(self.st.theta, before)  # a refusal changes nothing

    @rule(i=hst.integers(0, 2), step=hst.floats(-4, 4, allow_nan=False))
    def drag_slider(self, i, step):
        panel, before = self.dash.threshold_panel, self.st.thresholds
        slider = panel.sliders[i]
        # A slider cannot go past its ends (ipywidgets clamps the value, as the browser does):
        # the move that actually happens is the clamped one.
        moved = min(max(before[i] + step, slider.min), slider.max) - before[i]
        slider.value = before[i] + step
        if self.st.thresholds == before and abs(moved) > 0.5 * slider.step:
            assert "not applied" in panel.message.value  # refused on screen, slider put back
            assert slider.value == before[i]

    @rule(age=hst.floats(0, 120, allow_nan=False), which=hst.sampled_from(["scenario", "baseline"]))
    def edit_age(self, age, which):
        others = dict(getattr(self.st, which))
        setattr(self.st, which, {"age": age})
        after = getattr(self.st, which)
        assert after["age"] == age and all(after[k] == v for k, v in others.items() if k != "age")

    @rule(i=hst.integers(0, 1), share=hst.floats(1e-4, 0.3))
    def squeeze_threshold(self, i, share):
        """Move a threshold close below the next one: allowed, and with non-parallel effects the
        cut points then cross on one side of the data."""
        theta = self.st.theta
        self.st.set_threshold(i, theta[i + 1] - share * (theta[i + 1] - theta[i]))

    @rule(dose=hst.floats(-25, 25, allow_nan=False), group=hst.sampled_from(sorted(set(DATA.group))))
    def edit_scenario(self, dose, group):
        self.st.scenario = {"dose": dose, "group": group}

    @rule(link=hst.sampled_from(ow.link_names()))
    def change_link(self, link):
        self.st.link = link  # often while the link comparison or tests still run in the background

    @rule(free=hst.booleans())
    def toggle_nonparallel(self, free):
        self.st.nonparallel = ("dose",) if free else ()

    @precondition(lambda self: self.st.executor is not None)
    @rule()
    def close_state(self):
        self.st.close()
        assert self.st.busy == "" and self.st.executor is None

    # ---- after every step ---------------------------------------------------------------------------
    @invariant()
    def panels_equal_the_core(self):
        st = self.st
        assert st.wait(120) and st.busy == ""
        self.check_threshold_panel()
        self.check_explorer()
        self.check_residuals()
        self.check_link_table()

    def check_threshold_panel(self):
        st, tp = self.st, self.dash.threshold_panel
        ref = core_at(st, one_row(st.scenario))[0]
        if np.isnan(ref).any():
            assert "No probabilities at this scenario" in tp.refusal.value
            assert not tp.regions.visible and not tp.labels.visible
        else:
            assert list(tp.labels.text) == [f"{p:.1%}" for p in ref] and tp.regions.visible
            assert tp.refusal.value == ""

    def check_explorer(self):
        st, ex = self.st, self.dash.explorer
        both = np.vstack([core_at(st, one_row(st.baseline)), core_at(st, one_row(st.scenario))])
        np.testing.assert_allclose(ex.whatif_probabilities(), both, rtol=0, atol=1e-13)
        if np.isnan(both).any():
            assert "no probabilities for the" in ex.whatif.value
        values = grid_values(st.frame[st.focus], st.is_categorical(st.focus))
        grid = pd.concat([one_row(st.scenario)] * len(values), ignore_index=True)
        grid[st.focus] = values
        ref = core_at(st, grid)
        np.testing.assert_allclose(np.asarray(ex.lines.y), ref.T, rtol=0, atol=1e-13)
        if np.isnan(ref).any():
            assert "cumulative probabilities cross there" in ex.caution.value
        outside = not DATA.age.min() <= st.scenario["age"] <= DATA.age.max()
        assert ("scenario age" in ex.caution.value) == outside

    def check_residuals(self):
        st, rp = self.st, self.dash.residual_panel
        report = residual_diagnostics(st.fit, thresholds=st.theta if st.edited else None, draws=st.residual_draws,
                                      seed=st.residual_seed, max_points=5000)
        np.testing.assert_array_equal(np.asarray(rp.points.y), report.residuals[report.rows, 0])

    def check_link_table(self):
        st, table = self.st, self.st.link_table
        assert len(table) == 5  # the full table, never a stuck empty one
        current = [r for r in table if r["link"] == st.link][0]
        assert abs(current["loglik"] - st.fit.loglik) < 1e-6 * max(1.0, abs(st.fit.loglik))

    def teardown(self):
        self.dash.close()
        self.st.close()
        left = {t for t in threading.enumerate() if t.name.startswith(THREAD_PREFIX)} - self.threads_before
        assert not {t for t in left if t.is_alive()}


DashboardSequence.TestCase.settings = settings(max_examples=6, stateful_step_count=8, deadline=None,
                                               suppress_health_check=[HealthCheck.too_slow])
test_random_ui_sequences = DashboardSequence.TestCase

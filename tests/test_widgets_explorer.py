"""ProbabilityExplorer against the core's probabilities and a hand-built linear predictor."""
import numpy as np
import pytest

import ordwidgets as ow

from tests.ow_checks import *  # noqa: F403 - fixtures, data and reference checks


panel = pytest.fixture(name="panel")(lambda make_panel: make_panel(ow.ProbabilityExplorer))


def test_follows_link_thresholds_scenario_and_focus(panel):
    st = panel.state
    check_explorer(panel)
    snapshots = [np.asarray(panel.bands.y).copy()]
    for action in (lambda: setattr(st, "link", "probit"), lambda: st.set_threshold(0, st.theta[0] + 0.5),
                   lambda: setattr(st, "scenario", {"dose": 1.5})):
        action()
        check_explorer(panel)
        assert not np.allclose(panel.bands.y, snapshots[-1])
        snapshots.append(np.asarray(panel.bands.y).copy())
    st.focus = "group"
    check_explorer(panel)
    assert np.asarray(panel.bands.y).shape[1] == 3 and set(panel.x_axis.tick_labels.values()) == set(st.data.group)


def test_editors_set_scenario_and_baseline(panel):
    st = panel.state
    panel.editors["age"].value = 25.0
    assert st.scenario["age"] == 25.0 and st.baseline["age"] != 25.0
    panel.target.value = "baseline"
    assert panel.editors["age"].value == st.baseline["age"]
    panel.editors["group"].value = "plain"
    assert st.baseline["group"] == "plain"
    check_explorer(panel)
    panel.copy_button.click()
    assert st.baseline == st.scenario


def test_frontend_rounding_echo_is_not_an_edit(panel):
    st = panel.state
    editor, before = panel.editors["age"], dict(st.scenario)
    editor.set_state({"value": round(st.scenario["age"] / editor.step) * editor.step})
    assert st.scenario == before and st.scenario == st.baseline
    editor.set_state({"value": st.scenario["age"] + 3 * editor.step})
    assert st.scenario["age"] == editor.value != st.baseline["age"]


def test_focus_dropdown_sets_state(panel):
    panel.focus_dropdown.value = "dose"
    assert panel.state.focus == "dose"
    check_explorer(panel)


def test_lines_view_hides_the_stack(panel):
    panel.view.value = "curves"
    assert panel.lines.visible and not panel.bands.visible
    check_explorer(panel)


def test_dropping_the_focus_moves_it(panel):
    st = panel.state
    st.focus = "dose"
    st.dropped = ("dose",)
    assert st.focus in st.included and "dose" not in panel.editors
    check_explorer(panel)


def test_whatif_escapes_labels(panel):
    st = panel.state
    st.scenario = {"group": "<script>alert(1)</script>"}
    assert "<script>" not in panel.whatif.value and "&lt;script&gt;" in panel.whatif.value
    assert "<i>low</i>" not in panel.whatif.value and "&lt;i&gt;low&lt;/i&gt;" in panel.whatif.value


def test_interval_bands_equal_the_core_intervals(panel):
    panel.view.value = "curves"
    frame = panel.grid_frame()[3]
    ref = panel.state.fit.predict(frame, kind="probabilities", level=0.95)  # reference: the core
    bands = np.asarray(panel.ci.y)
    np.testing.assert_allclose(bands[0::2], ref["lower"].to_numpy().T, atol=1e-12)
    np.testing.assert_allclose(bands[1::2], ref["upper"].to_numpy().T, atol=1e-12)
    assert panel.ci.visible
    panel.state.set_threshold(0, panel.state.theta[0] + 0.2)
    assert not panel.ci.visible and "fitted thresholds only" in panel.note.value
    panel.view.value = "shares"
    assert panel.note.value == "" and not panel.ci.visible


def test_no_predictor_left_hides_the_curves(panel):
    panel.state.dropped = ("age", "dose", "group")
    assert panel.state.focus == "" and "nothing to explore" in panel.note.value
    assert not any(m.visible for m in (panel.bands, panel.lines, panel.ci, panel.marker))
    panel.state.dropped = ()
    assert panel.bands.visible and panel.marker.visible
    check_explorer(panel)


def test_non_parallel_fit_uses_the_core_predictions(panel):
    import inspect

    if "nonparallel" not in inspect.signature(ow.fit).parameters:
        pytest.skip("this core fits parallel models only")
    st = panel.state
    st.nonparallel = ("dose",)
    st.focus = "dose"
    frame = panel.grid_frame()[3]
    probs = st.fit.predict(frame).to_numpy()  # reference: the core's own prediction
    np.testing.assert_allclose(np.asarray(panel.bands.y)[1:], np.cumsum(probs, axis=1).T.clip(0, 1), atol=1e-12)
    ref = np.vstack([st.fit.predict(st.scenario_frame(w)).to_numpy() for w in ("baseline", "scenario")])
    np.testing.assert_allclose(panel.whatif_probabilities(), ref, atol=1e-12)


def test_legend_names_every_level_in_its_band_colour(panel):
    # One chip per level, in the colour of that level's band (the fill colours, in order).
    st = panel.state
    chips = panel.legend.value.split("</span>")[:-1]
    assert len(chips) == len(st.fit.levels)
    for chip, colour in zip(chips, panel.bands.fill_colors):
        assert f"background:{colour}" in chip
    panel.view.value = "curves"
    assert panel.legend.value.count("</span>") == len(st.fit.levels)

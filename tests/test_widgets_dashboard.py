"""The dashboard as a whole: every panel follows every edit; escaping; closing; files."""
import contextlib

import numpy as np
import pytest

import ordwidgets as ow
from ordwidgets.state import ThresholdEditError

from tests.ow_checks import *  # noqa: F403 - fixtures, data and reference checks

HOSTILE_RAW = ("<script>", "<b>bold</b>", "<i>low</i>")


@pytest.fixture
def dash(data):
    d = ow.dashboard(ow.fit(FORMULA, data), data=data)
    yield d
    d.close()


def check_all(d):
    """Every panel equals its outside reference; status and header agree with the state."""
    check_threshold_panel(d.threshold_panel)
    check_explorer(d.explorer)
    check_residual_panel(d.residual_panel)
    assert f"updates: {d.state.updates}" in d.status.value
    assert f"link <b>{d.state.fit.link.name}</b>" in d.header.value
    assert d.link_selector.dropdown.value == d.state.link


def marks(d):
    return [np.asarray(m).copy() for m in (d.threshold_panel.regions.y, d.explorer.bands.y, d.residual_panel.points.y)]


def test_header_states_model_n_and_sign_convention(dash):
    assert "n = 600 rows" in dash.header.value and "positive effect moves" in dash.header.value
    assert "associations, not causes" in dash.header.value.lower()
    check_all(dash)


@pytest.mark.parametrize("edit", ["link", "thresholds", "scenario"])
def test_every_panel_follows(dash, edit):
    st, before = dash.state, marks(dash)
    {"link": lambda: setattr(st, "link", "cloglog"),
     "thresholds": lambda: st.set_threshold(1, st.theta[1] - 0.4),
     "scenario": lambda: setattr(st, "scenario", {"dose": -1.2, "age": 60.0})}[edit]()
    check_all(dash)
    after = marks(dash)
    changed = [not np.array_equal(a, b) for a, b in zip(before, after)]
    # a scenario edit leaves the residuals alone (they do not depend on it); the rest all move
    assert changed == ([True, True, False] if edit == "scenario" else [True, True, True])


def test_focus_changes_the_explorer_only(dash):
    before = marks(dash)
    dash.state.focus = "dose"
    check_all(dash)
    after = marks(dash)
    assert [not np.array_equal(a, b) for a, b in zip(before, after)] == [False, True, False]


def test_random_edit_sequences_keep_views_consistent(dash):
    st, rng = dash.state, np.random.default_rng(20)
    for step in range(300):
        kind = rng.choice(["threshold", "scenario", "focus", "seed", "select", "link", "drop", "reset"],
                          p=[0.4, 0.2, 0.1, 0.1, 0.1, 0.03, 0.03, 0.04])
        if kind == "threshold":
            with contextlib.suppress(ThresholdEditError):  # refusals: tests/test_state.py
                st.set_threshold(int(rng.integers(st.fit.n_thresholds)), float(rng.normal(1.5, 3)))
        elif kind == "scenario":
            st.scenario = {"age": float(rng.uniform(20, 70)), "group": str(rng.choice(st.data.group.unique()))}
        elif kind == "focus":
            st.focus = str(rng.choice(st.included))
        elif kind == "seed":
            st.residual_seed = int(rng.integers(1000))
        elif kind == "select":
            st.selection = tuple(int(i) for i in rng.choice(st.fit.n_rows, size=int(rng.integers(0, 5))))
        elif kind == "link":
            st.link = str(rng.choice(ow.link_names()))
        elif kind == "drop":
            st.dropped = tuple(rng.choice(["dose", "age"], size=int(rng.integers(0, 2)), replace=False))
        else:
            st.reset()
        if step % 5 == 0 or kind in ("link", "drop"):
            check_all(dash)
    check_all(dash)


def test_batched_action_redraws_each_panel_once(dash, monkeypatch):
    counts = {}
    for panel in dash.panels:
        original = panel._on_update
        monkeypatch.setattr(panel, "_on_update", lambda c=None, p=panel, f=original: (
            counts.__setitem__(type(p).__name__, counts.get(type(p).__name__, 0) + 1), f(c)))
        dash.state.unobserve(original, names="updates")
        dash.state.observe(panel._on_update, names="updates")
    with dash.state.batch():
        dash.state.set_threshold(0, dash.state.theta[0] - 0.2)
        dash.state.scenario = {"age": 40.0}
        dash.state.focus = "dose"
        dash.state.residual_seed = 5
    assert counts == {"ThresholdPanel": 1, "LinkSelector": 1, "ProbabilityExplorer": 1, "ResidualPanel": 1}
    check_all(dash)


def test_hostile_labels_are_escaped_everywhere(dash):
    st = dash.state
    rows = np.flatnonzero(st.frame["group"].astype(str) == "<script>alert(1)</script>")[:3]
    st.selection = tuple(int(r) for r in rows)
    st.scenario = {"group": "<b>bold</b>"}
    texts = html_values(dash)
    joined = "\n".join(texts)
    for raw in HOSTILE_RAW:
        assert raw not in joined
    for escaped in ("&lt;script&gt;alert(1)&lt;/script&gt;", "&lt;b&gt;bold&lt;/b&gt;", "&lt;i&gt;low&lt;/i&gt;"):
        assert escaped in joined


def test_closing_unobserves_the_state(data):
    st = ow.FitState(data=data, formula=FORMULA)
    d = ow.dashboard(st)
    handlers = lambda: st._trait_notifiers.get("updates", {}).get("change", [])  # noqa: E731
    ours = [h for h in handlers() if getattr(h, "__self__", None) is not st]
    assert len(ours) == 5  # four panels and the dashboard header
    d.close()
    assert [h for h in handlers() if getattr(h, "__self__", None) is not st] == []
    assert all(not p.observing for p in d.panels)
    st.set_threshold(0, st.theta[0] - 0.3)  # the closed dashboard is not touched
    assert d.threshold_panel.curve.comm is None
    leftovers = [x for p in d.panels for x in (*p.children, *d.threshold_panel.sliders, *d.explorer.editors.values(),
                                               d.residual_panel.brush, d.explorer.x_axis) if x.comm is not None]
    assert leftovers == []  # sliders, editors, toolbars, selectors and axes are closed too


def test_dashboard_state_round_trips_through_a_file(dash, data, tmp_path):
    st = dash.state
    with st.batch():
        st.link = "probit"
        st.set_threshold(0, st.theta[0] + 0.05)
        st.scenario, st.focus, st.residual_seed = {"age": 35.5}, "group", 9
    st.save(tmp_path / "s.json")
    again = ow.dashboard(ow.FitState.load(tmp_path / "s.json", data))
    assert again.state.to_dict() == st.to_dict()
    np.testing.assert_array_equal(again.residual_panel.points.y, dash.residual_panel.points.y)
    np.testing.assert_array_equal(again.explorer.bands.y, dash.explorer.bands.y)
    again.close()


def test_background_choice(data):
    from ordwidgets.widgets.dashboard import BACKGROUND_ROWS

    res, big = ow.fit(FORMULA, data), simulate(n=BACKGROUND_ROWS, seed=2, hostile=False)
    made = [ow.dashboard(res, data=data), ow.dashboard(ow.FitState.from_fit(res, data=data), background=True),
            ow.dashboard(ow.fit(FORMULA, big), data=big)]
    assert [d.state.executor is not None for d in made] == [False, True, True]
    made[2].state.executor.shutdown(wait=True)
    check_all(made[2])
    for d in made:
        d.state.close()
        d.close()


def test_dashboard_refuses_other_objects():
    with pytest.raises(TypeError, match="FitState or a FitResult"):
        ow.dashboard("not a fit")


def test_background_mode_keeps_every_view_in_step(data):
    from concurrent.futures import ThreadPoolExecutor

    st = ow.FitState(data=data, formula=FORMULA, executor=ThreadPoolExecutor(2))
    seen = []
    st.observe(lambda c: seen.append(c["new"]), names="busy")
    d = ow.dashboard(st)
    for step in range(6):  # quick successive edits: only the latest residual refresh is drawn
        st.set_threshold(step % 3, st.theta[step % 3] + 0.05)
    st.executor.shutdown(wait=True)
    assert st.busy == "" and any("updating residuals" in b for b in seen)
    check_all(d)
    d.close()


@pytest.mark.parametrize("formula", ["rating ~ 1", "top ~ age + dose"])
def test_intercept_only_and_binary_models(data, formula):
    frame = data.assign(top=(data.rating.cat.codes == 3).astype(int))
    d = ow.dashboard(ow.FitState(data=frame, formula=formula))
    st = d.state
    st.set_threshold(0, st.theta[0] + 0.3)
    check_threshold_panel(d.threshold_panel)
    check_residual_panel(d.residual_panel)
    if st.focus:
        check_explorer(d.explorer)
    d.close()

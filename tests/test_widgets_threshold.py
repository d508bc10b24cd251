"""ThresholdPanel against references outside the widgets (scipy.stats, the core)."""
import html

import numpy as np
import pytest

import ordwidgets as ow

from tests.ow_checks import *  # noqa: F403 - fixtures, data and reference checks


panel = pytest.fixture(name="panel")(lambda make_panel: make_panel(ow.ThresholdPanel))


def test_marks_follow_link_threshold_and_scenario(panel):
    check_threshold_panel(panel)
    st, before = panel.state, panel.curve.y.copy()
    st.link = "cauchit"
    check_threshold_panel(panel)
    assert not np.allclose(panel.curve.y, before)
    labels = list(panel.labels.text)
    st.set_threshold(1, st.theta[1] + 0.4)
    check_threshold_panel(panel)
    assert list(panel.labels.text) != labels and "edited" in panel.readout.value
    eta_before = panel.scenario_eta()
    st.scenario = {"dose": 2.5}
    check_threshold_panel(panel)
    assert panel.scenario_eta() != eta_before


def test_slider_edits_set_the_state_and_crossing_is_refused_on_screen(panel):
    st = panel.state
    panel.sliders[0].value = st.theta[0] - 0.25
    assert st.thresholds[0] == panel.sliders[0].value and panel.message.value == ""
    before = st.thresholds
    panel.sliders[1].value = st.theta[2] + 3.0  # would cross threshold 3: refused (user guide)
    assert st.thresholds == before and panel.sliders[1].value == before[1]
    names = st.fit.threshold_names
    assert "not applied" in panel.message.value and html.escape(repr(names[2])) in panel.message.value
    panel.sliders[1].value = before[1] + 0.01  # an accepted edit clears the message
    assert panel.message.value == "" and st.thresholds[1] == before[1] + 0.01
    check_threshold_panel(panel)


def test_top_slider_stops_at_its_end_and_the_state_follows_the_slider(panel):
    """Found by the random UI sequences: the last slider sits at its maximum after a long move, and a
    further move past the end is clamped by the slider itself (ipywidgets behaviour), so it is no edit."""
    st = panel.state
    last = panel.sliders[-1]
    last.value = last.max
    assert st.thresholds[-1] == last.value == last.max and panel.message.value == ""
    before = st.thresholds
    last.value = before[-1] + 1.0
    assert st.thresholds == before and last.value == before[-1] and panel.message.value == ""


def test_frontend_rounding_echo_is_not_an_edit(panel):
    st, n0 = panel.state, panel.state.updates
    slider = panel.sliders[1]
    slider.set_state({"value": round(st.thresholds[1], 3)})  # what the browser sends after rendering
    assert not st.edited and st.updates == n0
    slider.set_state({"value": round(st.thresholds[1], 3) + 0.01})  # a real move of ten steps
    assert st.edited and st.thresholds[1] == slider.value


def test_reset_button_restores_fitted(panel):
    st = panel.state
    st.set_threshold(2, st.theta[2] + 1)
    panel.reset_button.click()
    assert not st.edited and st.lr_distance == 0
    check_threshold_panel(panel)


def test_one_redraw_per_batched_action(panel, monkeypatch):
    calls = []
    monkeypatch.setattr(panel, "_update_curve", lambda: calls.append(1))
    with panel.state.batch():
        panel.state.set_threshold(0, panel.state.theta[0] - 0.1)
        panel.state.set_threshold(1, panel.state.theta[1] - 0.1)
        panel.state.scenario = {"age": 33.0}
    assert calls == [1]


def test_close_unobserves_and_closes_marks(data):
    st = ow.FitState(data=data, formula=FORMULA)
    p = ow.ThresholdPanel(st)
    assert p.observing
    p.close()
    assert not p.observing and p.curve.comm is None
    st.set_threshold(0, st.theta[0] - 0.5)  # no error from a closed panel


@pytest.mark.parametrize("extra", [{"nonparallel": ("dose",)}, {"scale_by": ("age",)}])
def test_extended_fits_show_the_core_probabilities(panel, extra):
    import inspect

    st = panel.state
    if "nonparallel" not in inspect.signature(ow.fit).parameters:
        pytest.skip("this core fits parallel models only")
    with st.batch():
        for name, value in extra.items():
            setattr(st, name, value)
    assert st.error == "" and "cut points at this scenario" in panel.note.value
    probs = st.fit.predict(scenario_rows(st)).to_numpy()[0]  # reference: the core's own prediction
    assert list(panel.labels.text) == [f"{q:.1%}" for q in probs]
    cuts = np.atleast_2d(panel.rules.x)[:, 0]
    assert np.all(np.diff(cuts) > 0)
    # reference: the probability mass between the drawn rules under the drawn density
    eta, sigma = panel.scenario_cuts()[:2]
    mass = np.diff(np.concatenate([[0.0], st.fit.link.dist.cdf((cuts - eta) / sigma), [1.0]]))
    np.testing.assert_allclose(mass, probs, atol=1e-12)


def _contrast_to_white(hex_colour):
    """WCAG 2.1 contrast ratio against white, written from the W3C definition of relative
    luminance (https://www.w3.org/TR/WCAG21/#dfn-relative-luminance), independent of the panel."""
    channels = []
    for i in (1, 3, 5):
        c = int(hex_colour[i:i + 2], 16) / 255
        channels.append(c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4)
    lum = 0.2126 * channels[0] + 0.7152 * channels[1] + 0.0722 * channels[2]
    return 1.05 / (lum + 0.05)


def test_probability_labels_read_on_white_in_their_regions_hue(panel):
    regions, labels = list(panel.regions.colors), list(panel.labels.colors)
    assert len(labels) == len(regions) >= 4
    pale = [c for c in regions if _contrast_to_white(c) < 4.5]
    assert pale  # the ramp's yellow and teal are too pale for text as they are
    for region, label in zip(regions, labels):
        assert _contrast_to_white(label) >= 4.5  # WCAG 2.1 level AA for normal text
        r, l = (np.array([int(c[i:i + 2], 16) for i in (1, 3, 5)], float) for c in (region, label))
        # same hue: the label is the region's colour scaled towards black (to rounding)
        scale = l.sum() / r.sum()
        assert scale <= 1.0 and np.allclose(l, scale * r, atol=1.5)

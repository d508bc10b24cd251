"""The what-if table's intervals and the dashboard's "save report" button."""
import base64
import re

import numpy as np
import pytest

import ordwidgets as ow

from tests.ow_checks import *  # noqa: F403 - fixtures, data and reference checks


def test_whatif_table_shows_the_cores_difference_intervals(make_panel):
    panel = make_panel(ow.ProbabilityExplorer)
    st = panel.state
    st.scenario = {"dose": float(np.max(st.data["dose"]))}
    diff = st.fit.probability_difference(st.scenario_frame("scenario"), st.scenario_frame("baseline"))
    for lo, hi in zip(diff["low"][:-1], diff["high"][:-1]):
        assert f"{lo:+.1%} to {hi:+.1%}" in panel.whatif.value
    assert f"{diff['low'].iloc[-1]:+.3f} to {diff['high'].iloc[-1]:+.3f}" in panel.whatif.value
    assert np.all(diff["low"] <= diff["difference"]) and np.all(diff["difference"] <= diff["high"])
    st.set_threshold(0, st.theta[0] + 0.3)
    assert "No intervals while the thresholds are edited" in panel.whatif.value


def test_save_report_button_writes_the_report_and_offers_it(data, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    d = ow.dashboard(ow.fit(FORMULA, data), data=data, background=False)
    try:
        d.report_button.click()
        path = tmp_path / d.report_path
        assert path.exists()
        text = path.read_text(encoding="utf-8")
        assert "<section id='checks'>" in text and "<section id='whatif'>" in text
        href = re.search(r"href='data:text/html;base64,([A-Za-z0-9+/=]+)'", d.report_link.value).group(1)
        assert base64.b64decode(href) == path.read_bytes()
        assert d.state.busy == ""
    finally:
        d.close()

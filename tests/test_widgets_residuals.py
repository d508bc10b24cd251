"""ResidualPanel against the core's surrogate residuals, scipy quantiles and numpy."""
import numpy as np
import pytest
from bqplot.traits import array_to_json

import ordwidgets as ow

from tests.ow_checks import *  # noqa: F403 - fixtures, data and reference checks


panel = pytest.fixture(name="panel")(lambda make_panel: make_panel(ow.ResidualPanel))


def brush(panel, positions):
    """What the frontend does: write a uint32 index array into the mark, brushing over."""
    panel.brush.brushing = True
    panel.points.set_state({"selected": array_to_json(np.asarray(positions, np.uint32), None)})
    panel.brush.brushing = False


def test_follows_thresholds_link_seed_and_draws(panel):
    st = panel.state
    check_residual_panel(panel)
    before = np.asarray(panel.points.y).copy()
    for action in (lambda: st.set_threshold(1, st.theta[1] + 0.6), lambda: setattr(st, "link", "probit"),
                   lambda: setattr(st, "residual_seed", 11), lambda: setattr(st, "residual_draws", 3)):
        action()
        check_residual_panel(panel)
        assert not np.array_equal(panel.points.y, before)
        before = np.asarray(panel.points.y).copy()


def test_against_a_predictor_and_a_factor(panel):
    panel.x_choice.value = "age"
    np.testing.assert_array_equal(panel.points.x, panel.state.frame["age"].to_numpy())  # reference: the data
    check_residual_panel(panel)
    panel.x_choice.value = "group"
    assert set(panel.x_axis.tick_labels.values()) == set(panel.state.data.group)
    check_residual_panel(panel)
    assert "trend against group" in panel.summary.value


def test_summary_uses_all_rows(panel):
    from ordwidgets.core import diagnostics, residuals

    st = panel.state
    r = residuals.surrogate_residuals(st.fit, seed=st.residual_seed)
    ref = residuals.reference_distribution(st.fit.link)
    d, p = diagnostics.distance_test(r, ref)  # reference: the core's test on every row
    assert f"{d:.4g}" in panel.summary.value and "600 rows" in panel.count.value


def test_brushing_selects_rows_and_lists_them_escaped(panel):
    brush(panel, [0, 3, 7])
    assert panel.state.selection == (0, 3, 7)
    frame = panel.state.frame
    assert "3 selected rows" in panel.table.value
    labels = {str(frame.iloc[i]["group"]) for i in (0, 3, 7)} | {str(frame.iloc[i]["rating"]) for i in (0, 3, 7)}
    for label in labels:
        assert __import__("html").escape(label) in panel.table.value
    assert "<script>" not in panel.table.value and "<b>bold" not in panel.table.value
    panel.state.selection = ()
    assert panel.points.selected is None and "brush points" in panel.table.value


def test_mid_brush_moves_do_not_select(panel):
    panel.brush.brushing = True
    panel.points.set_state({"selected": array_to_json(np.array([1, 2], np.uint32), None)})
    assert panel.state.selection == ()
    panel.brush.brushing = False
    assert panel.state.selection == (1, 2)


def test_large_data_draws_at_most_5000_points():
    big = simulate(n=12_000, seed=4, hostile=False)
    p = ow.ResidualPanel(ow.FitState(data=big, formula=FORMULA))
    assert len(p.points.x) == 5000 and "showing 5,000 of 12,000 points" in p.count.value
    check_residual_panel(p)
    brush(p, [0, 4999])
    assert p.state.selection == (int(p._shown[0]), int(p._shown[4999]))
    p.close()


def test_no_trend_on_data_from_the_model_itself():
    """Surrogate residuals of a correct model are independent of x (Liu & Zhang 2018)."""
    sim = simulate(n=4000, seed=8, hostile=False)
    p = ow.ResidualPanel(ow.FitState(data=sim, formula=FORMULA))
    for name in ("fitted eta (x'beta)", "age", "dose"):
        p.x_choice.value = name
        assert p.view.tests["trend"][1] > 0.01 and p.view.tests["spread"][1] > 0.01
    assert abs(np.corrcoef(p.view.x, p.view.residuals[:, 0])[0, 1]) < 0.05
    p.close()

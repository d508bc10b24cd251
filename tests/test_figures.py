"""Static figures: the same data and colours as the panels' marks, deterministic SVG."""
import warnings

import numpy as np
import pytest
from matplotlib.collections import PathCollection, PolyCollection
from matplotlib.colors import to_rgba
from matplotlib.figure import Figure

import ordwidgets as ow
from ordwidgets.demo import street_trees
from ordwidgets.figures import svg_text
from ordwidgets.widgets import ProbabilityExplorer, ResidualPanel, ThresholdPanel


@pytest.fixture(scope="module")
def state():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        st = ow.FitState(data=street_trees(400, seed=21), formula="grade ~ diameter + years + species")
    st.scenario = {"species": "maple"}
    return st


def _fills(ax):
    return [c for c in ax.collections if isinstance(c, PolyCollection)]


def _same_colour(collection, hex_colour, alpha):
    np.testing.assert_allclose(collection.get_facecolor()[0], to_rgba(hex_colour, alpha), atol=1e-9)


def test_explorer_figure_draws_the_panels_bands(state):
    panel = ProbabilityExplorer(state)
    try:
        fig = state.figure("explorer")
        assert isinstance(fig, Figure)
        ax = fig.axes[0]
        ys = np.asarray(panel.bands.y, float)
        x = np.asarray(panel.bands.x, float)
        curves = [ln for ln in ax.lines if len(ln.get_xdata()) == len(x)]
        assert len(curves) == len(ys)  # K + 1 cumulative curves
        for line, y in zip(curves, ys):
            np.testing.assert_allclose(line.get_xdata(), x)
            np.testing.assert_allclose(line.get_ydata(), y)
        fills = _fills(ax)
        colours = [c for c in panel.bands.fill_colors if c is not None]
        assert len(fills) == len(colours) == len(state.fit.levels)
        for coll, colour in zip(fills, colours):
            _same_colour(coll, colour, 1.0)
        marker = [ln for ln in ax.lines if len(ln.get_xdata()) == 2][0]
        np.testing.assert_allclose(marker.get_xdata(), np.asarray(panel.marker.x, float)[0])
        assert ax.get_xlabel() == panel.x_axis.label
    finally:
        panel.close()


def test_explorer_lines_view_has_the_interval_bands(state):
    panel = ProbabilityExplorer(state)
    try:
        other = [v for v in panel.view.options if v != panel.view.value][0]
        panel.view.value = other
        fig = state.figure("explorer", view=other)
        ax = fig.axes[0]
        lines = [ln for ln in ax.lines if len(ln.get_xdata()) > 2]
        for line, y in zip(lines, np.asarray(panel.lines.y, float)):
            np.testing.assert_allclose(line.get_ydata(), y)
        ci = np.asarray(panel.ci.y, float)
        fills = _fills(ax)
        assert len(fills) == len(state.fit.levels)
        for k, coll in enumerate(fills):  # each band spans lower..upper of one level
            verts = coll.get_paths()[0].vertices
            assert verts[:, 1].min() == pytest.approx(ci[2 * k].min(), abs=1e-12)
            assert verts[:, 1].max() == pytest.approx(ci[2 * k + 1].max(), abs=1e-12)
    finally:
        panel.close()


def test_threshold_figure_draws_the_density_and_regions(state):
    panel = ThresholdPanel(state)
    try:
        ax = state.figure("thresholds").axes[0]
        curve = [ln for ln in ax.lines if len(ln.get_xdata()) == len(panel.curve.x)][0]
        np.testing.assert_allclose(curve.get_ydata(), np.asarray(panel.curve.y, float))
        fills = _fills(ax)
        assert len(fills) == len(panel.regions.fill_colors)
        for coll, colour, alpha in zip(fills, panel.regions.fill_colors, panel.regions.fill_opacities):
            _same_colour(coll, colour, alpha)
        labels = [t.get_text() for t in ax.texts]
        assert labels == list(panel.labels.text)
    finally:
        panel.close()


def test_residual_figure_draws_the_points_and_qq(state):
    panel = ResidualPanel(state)
    try:
        fig = state.figure("residuals")
        left, right = fig.axes[:2]
        pts = [c for c in left.collections if isinstance(c, PathCollection)][0]
        np.testing.assert_allclose(pts.get_offsets(), np.column_stack([panel.points.x, panel.points.y]))
        _same_colour(pts, panel.points.colors[0], panel.points.opacities[0])
        qq = [c for c in right.collections if isinstance(c, PathCollection)][0]
        np.testing.assert_allclose(qq.get_offsets(), np.column_stack([panel.qq.x, panel.qq.y]))
        trend = [ln for ln in left.lines if ln.get_color() == panel.trend.colors[0]][0]
        np.testing.assert_allclose(trend.get_ydata(), np.asarray(panel.trend.y, float))
    finally:
        panel.close()


def test_links_figure_bars_are_aic_above_the_best(state):
    table = ow.compare_links(state.model_formula, state.data)
    ax = state.figure("links").axes[0]
    widths = [p.get_width() for p in ax.patches]
    np.testing.assert_allclose(widths, table["aic"] - table["aic"].min(), rtol=1e-9)


def test_svg_is_deterministic_and_names_are_checked(state):
    assert svg_text(state.figure("thresholds")) == svg_text(state.figure("thresholds"))
    assert "Date" not in svg_text(state.figure("thresholds"))[:2000]
    with pytest.raises(ValueError, match="explorer"):
        state.figure("pie")

"""``ResidualPanel``: surrogate residuals against the fit or a predictor, QQ plot and tests."""
from __future__ import annotations

from dataclasses import dataclass

import bqplot as bq
import ipywidgets as w
import numpy as np

from .._spec import grid_values
from ..state import n_training
from ._common import PanelBase, esc, figure_toolbar, fmt, html_table, make_figure

__all__ = ["ResidualPanel", "ResidualView", "residual_view", "MAX_POINTS", "residual_tools"]

MAX_POINTS = 5000
_ETA = "fitted eta (x'beta)"
_TABLE_ROWS = 12


def residual_tools():
    """The residual and diagnostics modules of the core."""
    from ..core import diagnostics, residuals

    return residuals, diagnostics


@dataclass(frozen=True, eq=False)
class ResidualView:
    """Everything the residual panel draws, computed off the interaction path."""

    fit: object
    thresholds: object
    draws: int
    seed: int
    x: np.ndarray
    residuals: np.ndarray
    reference: object
    description: str
    trend: object
    qq: object
    tests: dict
    moments: object


def residual_view(tools, res, thresholds, draws, seed, x) -> ResidualView:
    """Surrogate residuals of ``res`` at ``thresholds`` with their trend, QQ points and tests.

    Every statistic uses all rows; ``x`` is the variable the trend and tests are taken against.
    """
    residuals, diag = tools
    drawn = residuals.draw_surrogate(res, draws=draws, seed=seed, thresholds=thresholds)
    r, ref, weights = drawn.residuals, drawn.reference, res.training.weights
    v = ref.cdf(r[:, 0]) - 0.5
    tests = {"distance": diag.distance_test(r[:, 0], ref, weights=weights),
             "trend": diag.trend_test(x, v, weights=weights), "spread": diag.spread_test(x, v, weights=weights)}
    return ResidualView(res, thresholds, draws, seed, x, r, ref, drawn.description,
                        diag.binned_means(x, r, bins=20, weights=weights),
                        diag.qq_points(r, ref, quantiles=200, weights=weights), tests, diag.moment_table(r, ref))


class ResidualPanel(PanelBase):
    """Surrogate residuals at the shown thresholds, with a binned trend, QQ plot and tests.

    At most :data:`MAX_POINTS` points are drawn, a reproducible sample (the count is shown);
    every statistic uses all rows.  Brushing points sets ``state.selection``; the selected
    rows are listed in a small table (``ow-selection-table``).
    """

    _dispatch = {
        "fit": ("_update_x_options", "_update_residuals", "_update_selection"),
        "thresholds": ("_update_residuals",),
        "residuals": ("_update_residuals",),
        "selection": ("_update_selection",),
    }

    def __init__(self, state, **kwargs):
        super().__init__(state, "ow-residual-panel", **kwargs)
        self.tools = residual_tools()
        self.x_choice = self.own(w.Dropdown(description="against"))
        self.x_choice.observe(self._x_chosen, names="value")
        self.seed = self.own(w.BoundedIntText(value=state.residual_seed, min=0, max=2**31 - 1,
                                              description="seed", layout=w.Layout(width="160px")))
        self.seed.observe(lambda c: self._set_trait("residual_seed", c["new"]), names="value")
        self.draws = self.own(w.BoundedIntText(value=state.residual_draws, min=1, max=50,
                                               description="draws", layout=w.Layout(width="160px")))
        self.draws.observe(lambda c: self._set_trait("residual_draws", c["new"]), names="value")
        self.count, self.summary, self.table = self.own(w.HTML(), w.HTML(), w.HTML())
        self.table.add_class("ow-selection-table")
        self._build_scatter()
        self._build_qq()
        self.children = [w.HTML("<b>Surrogate residuals</b>"), w.HBox([self.x_choice, self.draws, self.seed]),
                         self.count, w.HBox([w.VBox([self.figure, figure_toolbar(self.figure, "residuals")],
                                                    layout=w.Layout(width="60%")),
                                             w.VBox([self.qq_figure, figure_toolbar(self.qq_figure, "qq")],
                                                    layout=w.Layout(width="40%"))]),
                         self.summary, self.table]
        self.redraw_all()

    def _build_scatter(self):
        xs, ys = bq.LinearScale(), bq.LinearScale()
        sc = {"x": xs, "y": ys}
        self.points = bq.Scatter(x=[0.0], y=[0.0], scales=sc, default_size=8, colors=["#315f9b"],
                                 opacities=[0.45], selected_style={"fill": "#c84b31", "opacity": 1.0},
                                 unselected_style={"opacity": 0.3})
        self.band = bq.Lines(x=[0.0, 1.0], y=[[0.0, 0.0], [0.0, 0.0]], scales=sc, fill="between",
                             fill_colors=["#f2a93b", None], fill_opacities=[0.3, 0.0], stroke_width=0)
        self.trend = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=sc, colors=["#c84b31"], stroke_width=3)
        self.zero = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=sc, colors=["#777777"], line_style="dashed")
        self.brush = bq.interacts.BrushSelector(x_scale=xs, y_scale=ys, marks=[self.points], color="#c84b31")
        self.brush.observe(self._brushed, names="brushing")
        self.points.observe(self._brushed, names="selected")
        self.x_axis = bq.Axis(scale=xs, label=_ETA)
        axes = [self.x_axis, bq.Axis(scale=ys, side="left", label="surrogate residual")]
        self.figure = self.own(make_figure([self.band, self.points, self.zero, self.trend], axes,
                                           "ow-residual-figure", interaction=self.brush))
        self.own(self.points, self.band, self.trend, self.zero, self.brush, xs, ys, self.x_axis)

    def _build_qq(self):
        xs, ys = bq.LinearScale(), bq.LinearScale()
        sc = {"x": xs, "y": ys}
        self.qq = bq.Scatter(x=[0.0], y=[0.0], scales=sc, default_size=10, colors=["#315f9b"])
        self.qq_line = bq.Lines(x=[0.0, 1.0], y=[0.0, 1.0], scales=sc, colors=["#777777"], line_style="dashed")
        self.qq_axis = bq.Axis(scale=xs, label="reference quantile")
        axes = [self.qq_axis, bq.Axis(scale=ys, side="left", label="residual quantile")]
        self.qq_figure = self.own(make_figure([self.qq_line, self.qq], axes, "ow-qq-figure"))
        self.own(self.qq, self.qq_line, xs, ys, self.qq_axis)

    def _set_trait(self, name, value):
        if not self._syncing and getattr(self.state, name) != value:
            setattr(self.state, name, value)

    # ---- residuals -----------------------------------------------------------------------------------
    def _update_x_options(self):
        options = [_ETA] + list(self.state.included)
        with self._guard():
            keep = self.x_choice.value if self.x_choice.value in options else _ETA
            self.x_choice.options, self.x_choice.value = options, keep
            self.seed.value, self.draws.value = self.state.residual_seed, self.state.residual_draws
        res = self.state.fit
        self._eta = res.linear_predictor()
        self._shown = self.tools[1].display_rows(n_training(res), max_points=MAX_POINTS, seed=0)

    def _update_residuals(self):
        """Recompute residuals and diagnostics: inline on a refit, as long work on edits."""
        st = self.state
        with self._guard():
            self.seed.value, self.draws.value = st.residual_seed, st.residual_draws
        args = (st.fit, st.theta if st.edited else None, st.residual_draws, st.residual_seed, self.x_values()[0])
        if "fit" in st.changed or st.executor is None:
            self._draw(residual_view(self.tools, *args))
            return
        fit_then = st.fit
        st.run_long("updating residuals", lambda: residual_view(self.tools, *args), self._draw_result,
                    kind=("residuals", id(self)), wanted=lambda: st.fit is fit_then and not self.closed)

    def _draw_result(self, view):
        if isinstance(view, ResidualView):
            self._draw(view)
        else:
            self.count.value = f"<span style='color:#b3261e'>residuals failed: {esc(view)}</span>"

    def x_values(self):
        """Values of the chosen x variable for every fitted row, and tick labels if categorical."""
        name = self.x_choice.value
        if name in (None, _ETA):
            return self._eta, None
        column = self.state.frame[name]
        if self.state.is_categorical(name):
            levels = grid_values(column, True)
            lookup = {v: i for i, v in enumerate(levels)}
            return np.array([lookup[v] for v in column], float), {float(i): str(v) for i, v in enumerate(levels)}
        return column.to_numpy(float), None

    def _x_chosen(self, change):
        if not self._syncing:
            self._draw(residual_view(self.tools, self.view.fit, self.view.thresholds, self.view.draws,
                                     self.view.seed, self.x_values()[0]))

    def _draw(self, view):
        """Copy a computed :class:`ResidualView` onto the marks."""
        self.view = view
        ticks = self.x_values()[1]
        r, trend, qq, shown = view.residuals, view.trend, view.qq, self._shown
        with self.points.hold_sync(), self.trend.hold_sync(), self.band.hold_sync(), self.qq.hold_sync():
            self.points.x, self.points.y = view.x[shown], r[shown, 0]
            self.trend.x, self.trend.y = trend["center"].to_numpy(), trend["mean"].to_numpy()
            self.band.x, self.band.y = trend["center"].to_numpy(), trend[["lower", "upper"]].to_numpy().T
            self.zero.x, self.zero.y = [float(np.min(view.x)), float(np.max(view.x))], [0.0, 0.0]
            self.qq.x, self.qq.y = qq["theoretical"].to_numpy(), qq["sample"].to_numpy()
            ends = [float(qq["theoretical"].min()), float(qq["theoretical"].max())]
            self.qq_line.x, self.qq_line.y = ends, ends
            self.x_axis.label = str(self.x_choice.value)
            self.x_axis.tick_values = np.array(list(ticks)) if ticks else None
            self.x_axis.tick_labels = ticks
        self._update_summary(view)

    def _update_summary(self, view):
        name = self.x_choice.value
        rows = [[f"distance from {view.reference.name}", *view.tests["distance"]],
                [f"trend against {name}", *view.tests["trend"]], [f"spread against {name}", *view.tests["spread"]]]
        rows = [[label, fmt(s, 4), fmt(p, 3)] for label, s, p in rows]
        rows += [[f"{m['summary']}: observed / expected", f"{fmt(m['observed'], 4)} / {fmt(m['expected'], 4)}", ""]
                 for _, m in view.moments.iterrows()]
        res = view.fit
        n, kept = res.n_rows, n_training(res)
        scope = f"statistics use all {n:,} rows" if kept == n else \
            f"residual checks use {res.training.describe()} (the estimates use all {n:,})"
        self.count.value = (f"showing {len(self._shown):,} of {kept:,} points (reproducible sample); "
                            f"{esc(scope)}. {esc(view.description)}.")
        self.summary.value = html_table(["check", "statistic", "p-value"], rows)

    # ---- brushing and selection -----------------------------------------------------------------------
    def _brushed(self, change):
        if self._syncing or self.brush.brushing:
            return
        picked = self.points.selected
        rows = () if picked is None else tuple(int(self._shown[i]) for i in np.asarray(picked, int)
                                               if 0 <= i < len(self._shown))
        if rows != self.state.selection:
            self.state.selection = rows

    def _update_selection(self):
        rows = np.asarray(self.state.selection, int)
        with self._guard():
            pos = np.flatnonzero(np.isin(self._shown, rows))
            self.points.selected = pos if pos.size else None
        if not rows.size:
            self.table.value = "<i>brush points in the residual plot to list their rows here</i>"
            return
        frame = self.state.frame.iloc[rows[:_TABLE_ROWS]]  # by position: index labels may repeat
        cols = [self.state.fit.response] + [c for c in self.state.included if c in frame.columns]
        body = [[idx] + [frame[c].iat[k] for c in cols] + [fmt(self.view.residuals[p, 0], 4)]
                for k, (idx, p) in enumerate(zip(frame.index, rows[:_TABLE_ROWS]))]
        more = f" (first {_TABLE_ROWS} shown)" if rows.size > _TABLE_ROWS else ""
        self.table.value = (f"<b>{rows.size:,} selected rows</b>{more}"
                            + html_table(["row"] + cols + ["residual"], body))

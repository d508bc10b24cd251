"""``ResidualPanel``: surrogate residuals against the fit or a predictor, QQ plot and tests."""
from __future__ import annotations

from dataclasses import dataclass

import bqplot as bq
import ipywidgets as w
import numpy as np
import pandas as pd

from .._spec import grid_values
from ..state import n_training
from ._common import PanelBase, esc, figure_toolbar, fmt, html_table, make_figure, nice_ticks

__all__ = ["ResidualPanel", "ResidualView", "residual_view", "MAX_POINTS", "residual_tools"]

MAX_POINTS = 5000
_ETA = "fitted eta (x'beta)"
_TABLE_ROWS = 12


def residual_tools():
    """The core's one entry point for everything the panel shows (:func:`residual_diagnostics`)."""
    from ..core import residual_diagnostics

    return residual_diagnostics


@dataclass(frozen=True, eq=False)
class ResidualView:
    """Everything the residual panel draws, computed off the interaction path.

    A reading of the core's :class:`~ordwidgets.core.ResidualDiagnostics` (``report``):
    ``x`` and ``report.residuals`` have one entry per residual -- per row, or per counted
    unit of a fit with frequency weights (``report.units`` gives each one's fitted row).
    ``trend`` is the binned (or per-level) mean against the chosen x; ``tests`` maps
    ``"distance"``, ``"trend"``, ``"spread"`` to ``(statistic, p_value)`` and ``methods``
    names the trend and spread tests.
    """

    fit: object
    thresholds: object
    draws: int
    seed: int
    report: object
    x: np.ndarray
    trend: pd.DataFrame
    tests: dict
    methods: dict

    def __getattr__(self, name):  # residuals, units, rows, reference, description, qq, moments
        if name.startswith("_") or name == "report":
            raise AttributeError(name)
        return getattr(self.report, name)


def residual_view(tools, res, thresholds, draws, seed, x) -> ResidualView:
    """Surrogate residuals of ``res`` at ``thresholds`` with their trend, QQ points and tests.

    ``tools`` is :func:`residual_tools`; ``x`` is what the trend and tests are taken against
    (``None``: the fitted linear predictor; a Series of numbers; a categorical Series for a
    factor, summarised per level).  Every statistic uses all rows (all counted units).
    """
    report = tools(res, x=x, thresholds=thresholds, draws=draws, seed=seed, quantiles=200,
                   max_points=MAX_POINTS, display_seed=0)
    t = report.tests
    against = "fitted" if report.x is None else report.x_name
    picked = {"distance": t[t.test == "distance"]}
    picked.update({k: t[(t.test == k) & (t.against == against)] for k in ("trend", "spread")})
    tests = {k: (float(v.statistic.iloc[0]), float(v.p_value.iloc[0])) for k, v in picked.items()}
    methods = {k: str(picked[k].method.iloc[0]) for k in ("trend", "spread")}
    x_drawn, trend = (report.fitted, report.versus_fitted) if report.x is None else (report.x, report.versus_x)
    return ResidualView(res, thresholds, draws, seed, report, x_drawn, trend, tests, methods)


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
        "group": ("_update_group",),
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
        self.count, self.summary, self.table, self.group_note = self.own(w.HTML(), w.HTML(), w.HTML(), w.HTML())
        self.group_note.add_class("ow-group-rows-note")
        self.table.add_class("ow-selection-table")
        self._build_scatter()
        self._build_qq()
        self.children = [self.make_heading(), w.HBox([self.x_choice, self.draws, self.seed]),
                         self.count, self.group_note, w.HBox([w.VBox([self.figure, figure_toolbar(self.figure, "residuals")],
                                                    layout=w.Layout(width="60%")),
                                             w.VBox([self.qq_figure, figure_toolbar(self.qq_figure, "qq")],
                                                    layout=w.Layout(width="40%"))]),
                         self.summary, self.table]
        self.redraw_all()

    def title(self) -> str:
        return "Surrogate residuals"

    def _build_scatter(self):
        xs, ys = bq.LinearScale(), bq.LinearScale()
        sc = {"x": xs, "y": ys}
        self.points = bq.Scatter(x=[0.0], y=[0.0], scales=sc, default_size=8, colors=["#315f9b"],
                                 opacities=[0.45], selected_style={"fill": "#c84b31", "opacity": 1.0},
                                 unselected_style={"opacity": 0.3})
        self.band = bq.Lines(x=[0.0, 1.0], y=[[0.0, 0.0], [0.0, 0.0]], scales=sc, fill="between",
                             fill_colors=["#f2a93b", None], fill_opacities=[0.3, 0.0], stroke_width=0)
        self.trend = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=sc, colors=["#c84b31"], stroke_width=3)
        self.group_points = bq.Scatter(x=[0.0], y=[0.0], scales=sc, default_size=14, colors=["#111111"],
                                       stroke="#f2a93b", opacities=[0.9], visible=False)
        self.zero = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=sc, colors=["#777777"], line_style="dashed")
        self.brush = bq.interacts.BrushSelector(x_scale=xs, y_scale=ys, marks=[self.points], color="#c84b31")
        self.brush.observe(self._brushed, names="brushing")
        self.points.observe(self._brushed, names="selected")
        self.x_axis = bq.Axis(scale=xs, label=_ETA)
        axes = [self.x_axis, bq.Axis(scale=ys, side="left", label="surrogate residual")]
        self.figure = self.own(make_figure([self.band, self.points, self.group_points, self.zero, self.trend], axes,
                                           "ow-residual-figure", interaction=self.brush))
        self.own(self.points, self.group_points, self.band, self.trend, self.zero, self.brush, xs, ys, self.x_axis)

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
        self._eta = self.state.fit.linear_predictor()

    def _update_residuals(self):
        """Recompute residuals and diagnostics: inline on a refit, as long work on edits."""
        st = self.state
        with self._guard():
            self.seed.value, self.draws.value = st.residual_seed, st.residual_draws
        args = (st.fit, st.theta if st.edited else None, st.residual_draws, st.residual_seed, self.core_x())
        if "fit" in st.changed or st.executor is None or getattr(self, "view", None) is None:
            self._draw(residual_view(self.tools, *args))  # a refit, or the first drawing
            return
        fit_then = st.fit
        st.run_long("updating residuals", lambda: residual_view(self.tools, *args), self._draw_result,
                    kind=("residuals", id(self)), wanted=lambda: st.fit is fit_then and not self.closed,
                    stopped=lambda: self._draw(residual_view(self.tools, *args)))  # never left stale

    def _draw_result(self, view):
        if isinstance(view, ResidualView):
            self._draw(view)
        else:
            self.count.value = f"<span style='color:#b3261e'>residuals failed: {esc(view)}</span>"

    def core_x(self):
        """The chosen x as the core takes it: ``None`` (fitted), numbers, or a categorical factor."""
        name = self.x_choice.value
        if name in (None, _ETA):
            return None
        column = self.state.frame[name]
        if self.state.is_categorical(name):
            levels = grid_values(column, True)
            return pd.Series(pd.Categorical(column.to_numpy(), categories=levels), index=column.index, name=name)
        return pd.Series(column.to_numpy(float), index=column.index, name=name)

    def x_values(self):
        """Values of the chosen x variable for every fitted row, and tick labels if categorical."""
        name = self.x_choice.value
        if name in (None, _ETA):
            return self._eta, None
        column = self.state.frame[name]
        if self.state.is_categorical(name):
            levels = grid_values(column, True)
            lookup = {v: i for i, v in enumerate(levels)}
            return np.array([lookup[v] for v in column], float), {i: str(v) for i, v in enumerate(levels)}
        return column.to_numpy(float), None

    def _x_chosen(self, change):
        if not self._syncing:
            self._draw(residual_view(self.tools, self.view.fit, self.view.thresholds, self.view.draws,
                                     self.view.seed, self.core_x()))

    def _draw(self, view):
        """Copy a computed :class:`ResidualView` onto the marks."""
        self.view = view
        self._shown = view.units[view.rows]  # fitted row of each drawn point
        ticks = self.x_values()[1]
        r, trend, qq, drawn = view.residuals, view.trend, view.qq, view.rows
        with self.points.hold_sync(), self.trend.hold_sync(), self.band.hold_sync(), self.qq.hold_sync():
            self.points.x, self.points.y = view.x[drawn], r[drawn, 0]
            self.trend.x, self.trend.y = trend["center"].to_numpy(), trend["mean"].to_numpy()
            self.band.x, self.band.y = trend["center"].to_numpy(), trend[["lower", "upper"]].to_numpy().T
            self.zero.x, self.zero.y = [float(np.nanmin(view.x)), float(np.nanmax(view.x))], [0.0, 0.0]
            self.qq.x, self.qq.y = qq["theoretical"].to_numpy(), qq["sample"].to_numpy()
            ends = [float(qq["theoretical"].min()), float(qq["theoretical"].max())]
            self.qq_line.x, self.qq_line.y = ends, ends
            self.qq_axis.tick_values = nice_ticks(*ends, count=5)  # the QQ plot is narrower still
            self.x_axis.label = str(self.x_choice.value)
            # few round ticks on a number axis: the labels stay apart at 60% of a panel's width
            self.x_axis.tick_values = np.array(list(ticks)) if ticks else nice_ticks(np.min(view.x), np.max(view.x))
            self.x_axis.tick_labels = ticks
        self._update_group()
        self._update_summary(view)

    def _update_group(self):
        """Mark the drawn points of the picked group (random-intercept fits); say how many there are."""
        view, st = getattr(self, "view", None), self.state
        if view is None:
            return
        rows = st.group_rows()
        drawn = np.flatnonzero(np.isin(self._shown, rows)) if rows.size else np.zeros(0, int)
        with self.group_points.hold_sync():
            if drawn.size:
                picked = view.rows[drawn]
                self.group_points.x, self.group_points.y = view.x[picked], view.residuals[picked, 0]
            self.group_points.visible = bool(drawn.size)
        self.group_note.value = "" if not st.grouping else (
            "<div style='font-size:85%;color:#555'>Residuals are conditional on the estimated group effects "
            "(each row's group at its conditional mode, as if known; Liu &amp; Zhang 2018).</div>"
            + ("" if st.group is None else
               f"<div style='font-size:85%'>{esc(st.group_column)} {esc(st.group)}: {rows.size:,} rows, "
               f"{drawn.size:,} of them among the drawn points (dark, ringed)</div>"))

    def _update_summary(self, view):
        name, tests, methods = self.x_choice.value, view.tests, view.methods
        rows = [[f"distance from {view.reference.name}", *tests["distance"]],
                [f"trend against {name} ({methods['trend']})", *tests["trend"]],
                [f"spread against {name} ({methods['spread']})", *tests["spread"]]]
        rows = [[label, fmt(s, 4), fmt(p, 3)] for label, s, p in rows]
        if view.report.x_levels is not None:
            rows += [[f"mean residual, {name} = {lv}", fmt(m, 4), f"{c:,.10g} {view.report.counted}"]
                     for lv, m, c in zip(view.trend["level"], view.trend["mean"], view.trend["count"])]
        rows += [[f"{m['summary']}: observed / expected", f"{fmt(m['observed'], 4)} / {fmt(m['expected'], 4)}", ""]
                 for _, m in view.moments.iterrows()]
        self.count.value = (f"showing {len(view.rows):,} of {len(view.units):,} points (reproducible sample); "
                            f"{esc(_scope(view))}. {esc(view.description)}.")
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
        first = _first_residual(self.view.units)
        body = [[idx] + [frame[c].iat[k] for c in cols]
                + [fmt(self.view.residuals[first[p], 0], 4) if p in first else "- (weight 0)"]
                for k, (idx, p) in enumerate(zip(frame.index, rows[:_TABLE_ROWS]))]
        more = f" (first {_TABLE_ROWS} shown)" if rows.size > _TABLE_ROWS else ""
        self.table.value = (f"<b>{rows.size:,} selected rows</b>{more}"
                            + html_table(["row"] + cols + ["residual"], body))


def _scope(view) -> str:
    """What the statistics count: all rows, all counted units, or the sample a Dask fit kept."""
    res, counted = view.fit, view.report.counted
    n, kept = res.n_rows, n_training(res)
    if kept != n:
        return f"residual checks use {res.training.describe()} (the estimates use all {n:,})"
    if counted == "counted units":
        return (f"one point per counted unit: statistics count all {len(view.units):,} units "
                f"of the {n:,} weighted rows")
    if counted == "weighted rows":
        return (f"statistics weight the {n:,} rows; the weights are not whole counts, so the tests "
                "are not computed")
    return f"statistics use all {n:,} rows"


def _first_residual(units):
    """``{fitted row: position of its first residual}`` (rows of weight zero have none)."""
    rows, first = np.unique(units, return_index=True)
    return dict(zip(rows.tolist(), first.tolist()))

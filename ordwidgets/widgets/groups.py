"""``GroupEffectsPanel``: every group's estimated effect with its interval, and the SD of the groups.

For a fit with random intercepts (``ow.fit(..., random_intercepts=["inspector"])``) the panel
draws the core's conditional modes (``res.group_effects(column)``) sorted, each with the
interval ``estimate +- z * std_error`` (``z`` the normal quantile of the level; the std.
error is the SD of the Laplace approximation to the group's conditional distribution), and
shows the SD of the random intercept with its profile-likelihood interval
(``res.variance_components``).  Picking a group (a click on its point, or the picker) sets
``state.group``; the explorer, the what-if table, the threshold panel and the residual panel
then use it.  A positive group effect moves probability towards higher categories.
"""
from __future__ import annotations

import bqplot as bq
import ipywidgets as w
import numpy as np
import pandas as pd
from scipy import stats

from ..core import SIGN_CONVENTION
from ._common import PanelBase, esc, figure_toolbar, fmt, html_table, make_figure

__all__ = ["GroupEffectsPanel", "group_table", "binned_groups", "MAX_GROUPS"]

#: At most this many groups are drawn one by one; beyond, consecutive ranks are binned.
MAX_GROUPS = 2000
#: Up to this many groups the x axis names each group (beyond, it shows ranks).
NAMED_TICKS = 30
_NONE = "(none)"


def group_table(res, column, level=0.95) -> pd.DataFrame:
    """The core's group effects of ``column`` sorted by estimate, with their intervals.

    Columns ``estimate``, ``std_error``, ``n_rows`` (from ``res.group_effects(column)``),
    ``lower`` and ``upper`` (``estimate -+ z std_error``, ``z = norm.ppf((1 + level) / 2)``)
    and ``rank`` (0 = lowest estimate).  Ties keep the order of the group labels.
    """
    z = float(stats.norm.ppf(0.5 + level / 2.0))
    table = res.group_effects(column).sort_values("estimate", kind="stable")
    table = table.assign(lower=table["estimate"] - z * table["std_error"],
                         upper=table["estimate"] + z * table["std_error"])
    return table.assign(rank=np.arange(len(table)))


def binned_groups(table, max_points=MAX_GROUPS) -> pd.DataFrame:
    """Consecutive ranks of a sorted :func:`group_table` in at most ``max_points`` bins.

    Each bin: ``rank`` (middle rank), ``estimate`` (median estimate of its groups), ``lower``
    (lowest lower end), ``upper`` (highest upper end), ``n_groups``, ``first``, ``last``.
    """
    edges = np.linspace(0, len(table), min(max_points, len(table)) + 1).round().astype(int)
    rows = []
    for a, b in zip(edges[:-1], edges[1:]):
        part = table.iloc[a:b]
        rows.append({"rank": (a + b - 1) / 2.0, "estimate": float(part["estimate"].median()),
                     "lower": float(part["lower"].min()), "upper": float(part["upper"].max()),
                     "n_groups": b - a, "first": part.index[0], "last": part.index[-1]})
    return pd.DataFrame(rows)


class GroupEffectsPanel(PanelBase):
    """Sorted group effects with intervals, the SD of the random intercept, and the group picker.

    ``ow-group-panel``; figure ``ow-group-figure``; picker ``ow-group-picker``; SD table
    ``ow-group-sd``; notes ``ow-group-note``.  The panel never talks to another panel: it
    sets ``state.group`` (and ``state.group_column``) only.  At most ``max_groups`` points are
    drawn (default :data:`MAX_GROUPS`); beyond, consecutive ranks are binned and the caption
    says so.
    """

    _dispatch = {"fit": ("_update_groups",), "group": ("_update_column", "_update_pick")}

    def __init__(self, state, *, level=0.95, max_groups=MAX_GROUPS, **kwargs):
        super().__init__(state, "ow-group-panel", **kwargs)
        self.level, self.max_groups, self.table, self.bins = level, int(max_groups), None, None
        self.column = self.own(w.Dropdown(description="grouping"))
        self.column.observe(self._column_chosen, names="value")
        self.picker = self.own(w.Combobox(placeholder="type or choose a group", description="group",
                                          ensure_option=True))
        self.picker.add_class("ow-group-picker")
        self.picker.observe(self._picked_by_name, names="value")
        self.clear_button = self.own(w.Button(description="no group", layout=w.Layout(width="auto")))
        self.clear_button.on_click(lambda _: setattr(self.state, "group", None))
        self.note, self.sd_table, self.pick_text, self.caption = self.own(w.HTML(), w.HTML(), w.HTML(), w.HTML())
        self.note.add_class("ow-group-note")
        self.sd_table.add_class("ow-group-sd")
        self._build_figure()
        self.body = self.own(w.VBox([w.HBox([self.column, self.picker, self.clear_button]), self.pick_text,
                                     self.figure, figure_toolbar(self.figure, "group-effects"), self.caption,
                                     self.sd_table]))
        self.children = [self.make_heading(), self.note, self.body]
        self.redraw_all()

    def title(self) -> str:
        return "Group effects (random intercepts)"

    def _build_figure(self):
        xs, ys = bq.LinearScale(), bq.LinearScale()
        sc = {"x": xs, "y": ys}
        self.bars = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=sc, colors=["#8fa9c9"], stroke_width=1.5)
        self.points = bq.Scatter(x=[0.0], y=[0.0], scales=sc, default_size=16, colors=["#315f9b"],
                                 interactions={"click": "select"}, selected_style={"fill": "#c84b31"},
                                 unselected_style={"opacity": 0.8})
        self.points.observe(self._clicked, names="selected")
        self.picked = bq.Scatter(x=[0.0], y=[0.0], scales=sc, default_size=64, colors=["#c84b31"],
                                 marker="diamond", visible=False)
        self.zero = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=sc, colors=["#777777"], line_style="dashed")
        self.x_axis = bq.Axis(scale=xs, label="groups, sorted by estimated effect")
        axes = [self.x_axis, bq.Axis(scale=ys, side="left", label="group effect (latent scale)")]
        self.figure = self.own(make_figure([self.zero, self.bars, self.points, self.picked], axes, "ow-group-figure"))
        self.own(self.bars, self.points, self.picked, self.zero, xs, ys, self.x_axis)

    # ---- the groups of the fit ---------------------------------------------------------------------
    def _update_groups(self):
        st = self.state
        self.body.layout.display = "" if st.grouping else "none"
        if not st.grouping:
            self.table = self.bins = None
            self.note.value = ("<i>this fit has no random intercepts: switch one on in the model controls "
                               "(Link and model) to see the group effects</i>")
            return
        self.note.value = ""
        self._update_column()
        self._draw()
        self._request_sd()

    def _update_column(self):
        st = self.state
        if not st.grouping:
            return
        with self._guard():
            self.column.options = list(st.grouping)
            self.column.value = st.group_column
        self.column.layout.display = "" if len(st.grouping) > 1 else "none"
        if self.table is not None and self.table.index.name != st.group_column:
            self._draw()

    def _column_chosen(self, change):
        if not self._syncing and change["new"] and change["new"] != self.state.group_column:
            with self.state.batch():
                self.state.group = None
                self.state.group_column = change["new"]

    def _draw(self):
        """The sorted effects (or their bins) onto the marks; the picker's options."""
        st = self.state
        self.table = group_table(st.fit, st.group_column, self.level)
        shown = self.table if len(self.table) <= self.max_groups else binned_groups(self.table, self.max_groups)
        self.bins = None if shown is self.table else shown
        x = shown["rank"].to_numpy(float)
        with self.points.hold_sync(), self.bars.hold_sync(), self.zero.hold_sync():
            self.points.selected = None
            self.points.x, self.points.y = x, shown["estimate"].to_numpy(float)
            self.bars.x = np.column_stack([x, x])
            self.bars.y = shown[["lower", "upper"]].to_numpy(float)
            self.zero.x, self.zero.y = [float(x.min()) - 0.5, float(x.max()) + 0.5], [0.0, 0.0]
            self._draw_axis(shown)
        self._by_name = {str(g): g for g in self.table.index}
        with self._guard():  # a few thousand options at most; beyond, the picker takes typed labels
            self.picker.ensure_option = self.bins is None
            self.picker.options = [_NONE] + list(self._by_name) if self.bins is None else [_NONE]
        self._update_caption()
        self._update_pick()

    def _draw_axis(self, shown):
        """Group names under the points when there are few (SVG text, not HTML), else ranks from 0."""
        named = self.bins is None and len(shown) <= NAMED_TICKS
        x = shown["rank"].to_numpy(float)
        self.x_axis.tick_values = x if named else None
        # integer keys: the frontend looks labels up by the tick's text ("3", where a float key is sent as "3.0")
        self.x_axis.tick_labels = {int(r): str(g) for r, g in zip(x, shown.index)} if named else None
        self.x_axis.label = "groups, sorted by estimated effect" + ("" if named else " (rank, 0 = lowest)")

    def _update_caption(self):
        n, z = len(self.table), float(stats.norm.ppf(0.5 + self.level / 2.0))
        drawn = (f"all {n:,} groups drawn, sorted by estimate" if self.bins is None else
                 f"{n:,} groups: too many to draw one by one, so consecutive ranks are summarised in "
                 f"{len(self.bins):,} bins (point: median estimate of the bin; bar: lowest lower to highest upper "
                 "end); type a group's label to pick it")
        self.caption.value = (
            f"<div style='font-size:85%;color:#555'>{esc(drawn)}. Each point is a group's estimated effect (its "
            f"conditional mode, shrunk towards 0 most where the group has few rows); bars: estimate &plusmn; "
            f"{z:.3g} &times; std. error ({self.level:.0%}, normal approximation). A positive effect means higher "
            f"categories than a typical group with the same predictors. {esc(SIGN_CONVENTION)}</div>")

    # ---- the SD of the random intercept ------------------------------------------------------------
    def _request_sd(self):
        st = self.state
        self._show_sd(None)
        st.run_long("profiling the group SD", lambda res=st.fit: res.variance_components, self._show_sd,
                    kind=("group sd", id(self)), wanted=lambda fit=st.fit: st.fit is fit and not self.closed,
                    stopped=lambda: self._show_sd("not computed: long work was stopped by close()"))

    def _show_sd(self, components):
        """The SD of each grouping column, with its profile interval once computed."""
        sds = self.state.fit.group_sd
        if isinstance(components, pd.DataFrame):
            rows = [[g, fmt(r["sd"], 4), fmt(r["lower"], 4), fmt(r["upper"], 4), fmt(int(r["n_groups"]))]
                    for g, r in components.iterrows()]
            note = "95% profile-likelihood interval of the SD (lower end 0 when SD = 0 is inside)"
        else:
            rows = [[g, fmt(float(v), 4), "-", "-", fmt(len(self.state.fit.group_effects(g)))] for g, v in sds.items()]
            note = "interval: computing..." if components is None else f"interval {components}"
        self.sd_table.value = (f"<b>SD of the random intercept</b> (latent scale)"
                               + html_table(["grouping", "SD", "lower", "upper", "groups"], rows)
                               + f"<div style='font-size:85%;color:#555'>{esc(note)}</div>")

    # ---- picking ---------------------------------------------------------------------------------------
    def _clicked(self, change):
        if self._syncing or self.table is None or change["new"] is None or not len(change["new"]):
            return
        i = int(np.asarray(change["new"])[-1])
        if self.bins is not None:
            self.pick_text.value = ("<i>that point is a bin of groups "
                                    f"({esc(self.bins['first'].iloc[i])} to {esc(self.bins['last'].iloc[i])}); "
                                    "type a group's label to pick it</i>")
            return
        if 0 <= i < len(self.table):
            self.state.group = self.table.index[i]

    def _picked_by_name(self, change):
        if self._syncing or self.table is None:
            return
        text = change["new"]
        if text == _NONE:
            self.state.group = None
            return
        if text in self._by_name:
            self.state.group = self._by_name[text]

    def _update_pick(self):
        st = self.state
        if self.table is None:
            return
        group = st.group if st.group is not None and st.group in self.table.index else None
        with self._guard(), self.picked.hold_sync():
            self.picker.value = _NONE if group is None else str(group)
            self.picked.visible = group is not None
            if group is not None:
                row = self.table.loc[group]
                self.picked.x, self.picked.y = [float(row["rank"])], [float(row["estimate"])]
        if group is None:
            self.pick_text.value = "<i>no group picked: click a point or choose a group</i>"
            return
        row = self.table.loc[group]
        self.pick_text.value = (
            f"<b>{esc(st.group_column)} {esc(group)}</b>: effect {row['estimate']:+.3f} "
            f"({self.level:.0%}: {row['lower']:+.3f} to {row['upper']:+.3f}), rank {int(row['rank']) + 1:,} of "
            f"{len(self.table):,}, {int(row['n_rows']):,} rows")

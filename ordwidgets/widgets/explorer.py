"""``ProbabilityExplorer``: category probabilities across one predictor, and a what-if table."""
from __future__ import annotations

import bqplot as bq
import ipywidgets as w
import numpy as np

from .._spec import grid_values
from ._common import (PanelBase, category_colours, esc, figure_toolbar, fmt, html_table, is_echo, level_legend,
                      make_figure, rule_xy)

__all__ = ["ProbabilityExplorer", "expected_score", "interval_bands", "KIND_LABELS"]


def expected_score(probs):
    """Expected score with the levels scored ``1..J``: ``sum_k k * p_k`` per row."""
    probs = np.atleast_2d(probs)
    return probs @ np.arange(1, probs.shape[1] + 1)


#: Labels of the kinds of probability (``FitState.group_kind``) on the explorer's chooser.
KIND_LABELS = (("population-averaged", "population"), ("typical group", "typical"), ("this group", "conditional"))


def interval_bands(res, frame, level=0.95, **groups):
    """Lower and upper interval bounds of the category probabilities.

    From ``res.predict(frame, kind="probabilities", level=level, **groups)`` (delta method on
    the logit scale; ``groups=`` for a random-intercept fit); the bounds are only drawn at the
    fitted thresholds.
    """
    out = res.predict(frame, kind="probabilities", level=level, **groups)
    return out["lower"].to_numpy(float), out["upper"].to_numpy(float)


def _short(value):
    return fmt(value, 4) if isinstance(value, float) else value


def _pct(value, sign=""):
    """A probability as a percentage (``"-"`` where the core gives none)."""
    return f"{value:{sign}.1%}" if np.isfinite(value) else "-"


def _num(value):
    return f"{value:+.3f}" if np.isfinite(value) else "-"


def _interval_cells(diff, n):
    """"low to high" of each level's difference (percent) and of the expected score; "-" without."""
    if diff is None:
        return ["-"] * n
    low, high = diff["low"].to_numpy(), diff["high"].to_numpy()
    cells = [f"{_pct(a, '+')} to {_pct(b, '+')}" for a, b in zip(low[:-1], high[:-1])]
    return cells + [f"{_num(low[-1])} to {_num(high[-1])}"]


class ProbabilityExplorer(PanelBase):
    """Probabilities of every category across the focus predictor's observed range.

    Other predictors are held at the scenario values, editable with sliders (numbers) or
    dropdowns (levels).  A "shares" view (stacked bands) or a "curves" view (with interval bands when the
    core provides them at the fitted thresholds); a marker at the scenario value; a what-if
    table of baseline against scenario (``ow-whatif-table``).
    """

    _dispatch = {
        "fit": ("_update_focus", "_update_kind", "_update_editors", "_update_curves", "_update_whatif"),
        "thresholds": ("_update_curves", "_update_whatif"),
        "scenario": ("_update_editors", "_update_curves", "_update_whatif"),
        "focus": ("_update_focus", "_update_curves"),
        "group": ("_update_kind", "_update_curves", "_update_whatif"),
    }

    def __init__(self, state, **kwargs):
        super().__init__(state, "ow-explorer", **kwargs)
        self._cache, self.editors = (None, None), {}
        self.focus_dropdown = self.own(w.Dropdown(description="x-axis"))
        self.focus_dropdown.add_class("ow-focus-dropdown")
        self.focus_dropdown.observe(self._focus_chosen, names="value")
        self.view = self.own(w.ToggleButtons(options=["shares", "curves"], value="shares"))
        self.view.observe(lambda _: self._update_curves(), names="value")
        self.target = self.own(w.ToggleButtons(options=["scenario", "baseline"], value="scenario",
                                               tooltips=["edit the what-if case", "edit the comparison case"]))
        self.target.observe(lambda _: self._update_editors(), names="value")
        self.copy_button = self.own(w.Button(description="baseline = scenario"))
        self.copy_button.on_click(lambda _: setattr(self.state, "baseline", dict(self.state.scenario)))
        self.kind = self.own(w.ToggleButtons(options=list(KIND_LABELS), value="population",
                                             tooltips=["averaged over the groups", "group effect 0",
                                                       "the group picked in the group-effects panel"]))
        self.kind.add_class("ow-kind-choice")
        self.kind.observe(self._kind_chosen, names="value")
        self.kind_note = self.own(w.HTML())
        self.kind_note.add_class("ow-kind-note")
        self.editor_box, self.whatif, self.note, self.legend = self.own(w.VBox(), w.HTML(), w.HTML(), w.HTML())
        self.whatif.add_class("ow-whatif-table")
        self.caution = self.own(w.HTML())
        self.caution.add_class("ow-scenario-note")
        self._build_figure()
        self.children = [self.make_heading(), w.HBox([self.focus_dropdown, self.view]), self.kind, self.kind_note,
                         self.figure, self.legend, figure_toolbar(self.figure, "probabilities"), self.note, self.caution,
                         w.HBox([self.target, self.copy_button]), self.editor_box, self.whatif]
        self.redraw_all()

    def title(self) -> str:
        """``"Chances of each grade along diameter"``: the outcome's and the focus's own names."""
        st = self.state
        along = f" along {st.focus}" if st.focus else ""
        return f"Chances of each {st.fit.response}{along}"

    def _build_figure(self):
        self.xs, ys = bq.LinearScale(), bq.LinearScale(min=0.0, max=1.0)
        sc = {"x": self.xs, "y": ys}
        self.bands = bq.Lines(x=[0.0, 1.0], y=[[0.0, 0.0]], scales=sc, fill="between", stroke_width=0.5)
        self.ci = bq.Lines(x=[0.0, 1.0], y=[[0.0, 0.0]], scales=sc, fill="between", stroke_width=0,
                           visible=False)
        self.lines = bq.Lines(x=[0.0, 1.0], y=[[0.0, 0.0]], scales=sc, stroke_width=2, visible=False)
        self.marker = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 1.0]], scales=sc, colors=["#111111"],
                               line_style="dashed", stroke_width=2)
        self.x_axis = bq.Axis(scale=self.xs, label="")
        axes = [self.x_axis, bq.Axis(scale=ys, side="left", label="probability", tick_format=".0%")]
        self.figure = self.own(make_figure([self.bands, self.ci, self.lines, self.marker], axes,
                                           "ow-explorer-figure"))
        self.own(self.bands, self.ci, self.lines, self.marker, self.xs, ys, self.x_axis)

    # ---- focus ------------------------------------------------------------------------------------
    def _focus_chosen(self, change):
        if not self._syncing and change["new"]:
            self.state.focus = change["new"]

    def _update_focus(self):
        with self._guard():
            self.focus_dropdown.options = self.state.included
            self.focus_dropdown.value = self.state.focus or None

    def grid(self):
        """x positions, the focus values behind them, and whether the focus is categorical."""
        st = self.state
        categorical = st.is_categorical(st.focus)
        values = grid_values(st.frame[st.focus], categorical)
        positions = np.arange(len(values), dtype=float) if categorical else np.asarray(values, float)
        return positions, values, categorical

    def grid_frame(self):
        """Rows along the grid (cached until the fit, scenario or focus change)."""
        st = self.state
        key = (st.fit, st.focus, tuple(sorted((k, str(v)) for k, v in st.scenario.items() if k != st.focus)))
        if self._cache[0] != key:
            positions, values, categorical = self.grid()
            self._cache = (key, (positions, values, categorical, st.scenario_frame(focus_values=values)))
        return self._cache[1]

    # ---- kind of probability (random-intercept fits) ------------------------------------------------------
    def _kind_chosen(self, change):
        if self._syncing:
            return
        st = self.state
        if change["new"] == "conditional" and st.group is None:
            self.kind_note.value = ("<span style='color:#b3261e'>pick a group first (click it in the group-effects "
                                    "panel or choose it there)</span>")
            with self._guard():
                self.kind.value = st.group_kind
            return
        st.group_kind = change["new"]

    def _update_kind(self):
        st = self.state
        self.kind.layout.display = "" if st.grouping else "none"
        with self._guard():
            self.kind.value = st.group_kind
        text = st.kind_text()
        self.kind_note.value = (f"<div style='font-size:90%'><b>Shown:</b> {esc(text)}. Population-averaged and "
                                "group probabilities differ; say which one you report.</div>" if text else "")

    def _group_kwargs(self, frame):
        """``predict`` arguments and rows for the kind shown (the picked group's column added)."""
        st = self.state
        if not st.grouping:
            return frame, {}
        if st.group_kind == "conditional":
            frame = frame.assign(**{st.group_column: [st.group] * len(frame)})
        return frame, {"groups": st.group_kind}

    # ---- curves ---------------------------------------------------------------------------------------
    def _update_curves(self):
        st = self.state
        if not st.focus:
            self.note.value = "<i>no predictor in the model: nothing to explore</i>"
            for mark in (self.bands, self.lines, self.ci, self.marker):
                mark.visible = False
            return
        self.marker.visible = True
        positions, values, categorical, frame = self.grid_frame()
        probs = st.probabilities(frame)
        self._update_caution(values, probs)
        colours = category_colours(probs.shape[1])
        shares = self.view.value == "shares"
        bands = None if shares else self._interval_bands(frame)
        if shares:
            self.note.value = ""
        with self.bands.hold_sync(), self.lines.hold_sync(), self.ci.hold_sync(), self.marker.hold_sync():
            self._draw_bands(positions, probs, colours, shares)
            self._draw_lines(positions, probs, colours, shares)
            self._draw_ci(positions, bands, colours)
            self._draw_marker(positions, values, categorical)
            self._draw_axis(positions, values, categorical)

    def _draw_bands(self, x, probs, colours, visible):
        # the core's probabilities, not clipped; rows the core refuses are nan (drawn as gaps)
        cum = np.vstack([np.where(np.isnan(probs[:, 0]), np.nan, 0.0), np.cumsum(probs, axis=1).T])
        self.bands.x, self.bands.y = x, cum
        self.bands.fill_colors, self.bands.colors = colours + [None], colours + ["#444444"]
        self.bands.visible = visible

    def _draw_lines(self, x, probs, colours, shares):
        self.lines.x, self.lines.y, self.lines.colors = x, probs.T, colours
        self.lines.labels = [str(v) for v in self.state.fit.levels]
        legend = level_legend(self.state.fit.levels, colours)
        if self.legend.value != legend:
            self.legend.value = legend
        self.lines.visible = not shares

    def _draw_ci(self, x, bands, colours):
        self.ci.visible = bands is not None
        if bands is None:
            return
        lower, upper = bands
        self.ci.x, self.ci.y = x, np.vstack([np.vstack([lo, hi]) for lo, hi in zip(lower.T, upper.T)])
        self.ci.fill_colors = [c for col in colours for c in (col, None)]
        self.ci.fill_opacities = [0.25] * (2 * len(colours))

    def _interval_bands(self, frame):
        if self.state.edited:
            self.note.value = "<i>interval bands are drawn at the fitted thresholds only (thresholds edited)</i>"
            return None
        if len(self.state.grouping) > 1 and self.state.group_kind == "conditional":
            self.note.value = "<i>no interval bands for one group of several grouping columns</i>"
            return None
        rows, kwargs = self._group_kwargs(frame)
        try:
            bands = interval_bands(self.state.fit, rows, **kwargs)
        except Exception as exc:  # noqa: BLE001 - shown as a note, never breaks the panel
            self.note.value = f"<i>intervals failed: {esc(exc)}</i>"
            return None
        self.note.value = ""
        return bands

    def _draw_marker(self, positions, values, categorical):
        value = self.state.scenario.get(self.state.focus)
        x = positions[values.index(value)] if categorical and value in values else value
        self.marker.x, self.marker.y = rule_xy([float(x) if not categorical or value in values else np.nan])

    def _draw_axis(self, positions, values, categorical):
        self.x_axis.label = f"{self.state.focus} (others at the scenario values)"
        self.x_axis.tick_values = positions if categorical else None
        # int keys: the frontend looks a label up by the tick's text ("1"; a float key is sent as "1.0")
        self.x_axis.tick_labels = {int(p): str(v) for p, v in zip(positions, values)} if categorical else None
        pad = 0.5 if categorical else 0.0
        self.xs.min, self.xs.max = float(positions.min() - pad), float(positions.max() + pad)

    def _update_caution(self, values=None, probs=None):
        """On-screen notes: grid points the core refuses, scenario values outside the data."""
        st, notes = self.state, []
        if probs is not None and np.isnan(probs).any():
            bad = np.flatnonzero(np.isnan(probs[:, 0]))
            span = f"{_short(values[bad[0]])} to {_short(values[bad[-1]])}"
            notes.append(f"no probabilities for {len(bad)} of {len(values)} points ({st.focus} from {span}): the "
                         "cumulative probabilities cross there, so the model gives none; those points are gaps")
        for which in ("scenario", "baseline"):
            for name, value, lo, hi in st.outside_data(which):
                notes.append(f"{which} {name} = {_short(value)} is outside the data ({_short(lo)} to {_short(hi)}): "
                             "an extrapolation the data do not support")
        self.caution.value = "".join(f"<div style='color:#b3261e;font-size:90%'>{esc(n)}</div>" for n in notes)

    # ---- scenario editors -------------------------------------------------------------------------------
    def _editing(self):
        return self.state.scenario if self.target.value == "scenario" else self.state.baseline

    def _update_editors(self):
        if list(self.editors) != self.state.included:
            self._make_editors()
        with self._guard():
            for name, editor in self.editors.items():
                editor.value = self._editing()[name]

    def _make_editors(self):
        for editor in self.editors.values():
            editor.close()
        self.editors = {name: self._editor(name) for name in self.state.included}
        self.editor_box.children = list(self.editors.values())

    def _editor(self, name):
        st = self.state
        column = st.frame[name]
        style = {"description_width": "110px"}
        if st.is_categorical(name):
            levels = grid_values(column, True)
            editor = w.Dropdown(options=[(str(v), v) for v in levels], description=str(name), style=style)
        else:
            lo, hi = float(column.min()), float(column.max())
            editor = w.FloatSlider(min=lo, max=hi, step=(hi - lo) / 200 or 1.0, description=str(name),
                                   readout_format=".3g", style=style, layout=w.Layout(width="95%"))
        editor.observe(lambda change, n=name: self._edited(n, change["new"]), names="value")
        return editor

    def _edited(self, name, value):
        which = self.target.value
        if self._syncing or (isinstance(self.editors[name], w.FloatSlider)
                             and is_echo(self.editors[name], value, getattr(self.state, which)[name])):
            return
        setattr(self.state, which, {**getattr(self.state, which), name: value})

    # ---- what-if --------------------------------------------------------------------------------------
    def whatif_probabilities(self):
        """Category probabilities of the baseline and the scenario, shape (2, J)."""
        st = self.state
        return np.vstack([st.probabilities(st.scenario_frame(which)) for which in ("baseline", "scenario")])

    def whatif_intervals(self):
        """Scenario - baseline with 95% delta-method intervals (core), or None when thresholds are edited."""
        st = self.state
        if st.edited or st.grouping and st.group_kind != "typical":
            return None
        try:
            return st.fit.probability_difference(st.scenario_frame("scenario"), st.scenario_frame("baseline"))
        except Exception:  # noqa: BLE001 - the table then shows no interval, never breaks the panel
            return None

    def _with_intervals(self, rows, refused):
        """The rows with a "95% interval" cell each, and the note saying where the intervals hold."""
        diff = None if refused else self.whatif_intervals()
        note = " Intervals: 95% delta method, at the fitted thresholds only." if diff is not None else \
            " No intervals while the thresholds are edited." if self.state.edited else \
            (" No intervals: the core gives intervals of a difference for a typical group only (choose "
             "'typical group')." if self.state.grouping else "")
        return [row + [c] for row, c in zip(rows, _interval_cells(diff, len(rows)))], note

    def _update_whatif(self):
        probs = self.whatif_probabilities()
        rows = [[lv, _pct(b), _pct(s), _pct(s - b, "+")] for lv, b, s in zip(self.state.fit.levels, *probs)]
        score = expected_score(probs)
        rows.append(["expected score (1..J)", fmt(score[0], 4), fmt(score[1], 4), _num(score[1] - score[0])])
        refused = [which for which, row in zip(("baseline", "scenario"), probs) if np.isnan(row).any()]
        changed = [k for k in self.state.scenario if self.state.scenario[k] != self.state.baseline.get(k)]
        what = ", ".join(f"{k} = {_short(v)}" for k, v in self.state.scenario.items() if k in changed) or "no difference"
        frames = [self.state.scenario_frame(which) for which in refused]
        crossed = ["; ".join(f"{a} lies above {b}" for a, b in self.state.crossings(f)[0]) for f in frames]
        refusal = "".join(f"<div style='color:#b3261e'>no probabilities for the {esc(which)}: its cumulative "
                          f"probabilities cross ({esc(why)}); the model gives none there (shown as -)</div>"
                          for which, why in zip(refused, crossed))
        rows, note = self._with_intervals(rows, refused)
        kind = f"<div style='font-size:85%'>{esc(self.state.kind_text())}</div>" if self.state.grouping else ""
        self.whatif.value = (f"<b>What if</b> (scenario: {esc(what)})" + kind + refusal
                             + html_table(["level", "baseline", "scenario", "difference", "95% interval"], rows)
                             + "<div style='font-size:85%;color:#555'>Differences are associations, not "
                               f"effects of changing a person's values.{note}</div>")

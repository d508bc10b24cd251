"""``ThresholdPanel``: the latent distribution at the scenario, cut by editable thresholds."""
from __future__ import annotations

import bqplot as bq
import ipywidgets as w
import numpy as np

from ..state import ThresholdEditError
from ._common import (PanelBase, category_colours, esc, figure_toolbar, fmt, is_echo, level_legend, make_figure,
                      rule_xy, text_colours)

__all__ = ["ThresholdPanel", "latent_range"]

_GRID, _REGION_POINTS = 241, 40


def latent_range(res):
    """Fixed x range of the latent scale for one fit: thresholds and most linear predictors."""
    theta = res.thresholds.to_numpy()
    q = np.quantile(res.linear_predictor(), [0.01, 0.99]) if res.coef_names else np.zeros(2)
    span = float(res.link.ppf(0.98) - res.link.median)
    return float(min(theta.min(), q[0]) - span), float(max(theta.max(), q[1]) + span)


class ThresholdPanel(PanelBase):
    """Latent density ``f(t - eta)`` at the scenario's linear predictor with the thresholds.

    One slider per threshold (``ow-threshold-slider``); the thresholds are vertical rules over
    the density, each category's region shaded and labelled with its probability; the
    log-likelihood at the shown thresholds and its likelihood-ratio distance from the fit;
    a reset button (``ow-reset``).
    """

    _dispatch = {
        "fit": ("_update_range", "_update_sliders", "_update_curve", "_update_readout"),
        "thresholds": ("_update_sliders", "_update_curve", "_update_readout"),
        "scenario": ("_update_curve",),
        "group": ("_update_note", "_update_curve"),
    }

    def __init__(self, state, **kwargs):
        super().__init__(state, "ow-threshold-panel", **kwargs)
        self.sliders = []
        self._build_figure()
        self.slider_box = self.own(w.VBox())
        self.readout = self.own(w.HTML())
        self.readout.add_class("ow-loglik-readout")
        self.reset_button = self.own(w.Button(description="reset thresholds", icon="undo",
                                              layout=w.Layout(width="auto", min_width="150px")))
        self.reset_button.add_class("ow-reset")
        self.reset_button.on_click(lambda _: self.state.reset_thresholds())
        self.legend, self.note, self.message, self.refusal = self.own(w.HTML(), w.HTML(), w.HTML(), w.HTML())
        self.message.add_class("ow-threshold-message")
        self.refusal.add_class("ow-crossing-note")
        self.children = [self.make_heading(), self.figure,
                         figure_toolbar(self.figure, "latent"), self.legend, self.note, self.refusal,
                         self.slider_box, self.message,
                         w.HBox([self.reset_button, self.readout])]
        self.redraw_all()

    def _build_figure(self):
        self.xs, ys, yr = bq.LinearScale(), bq.LinearScale(min=0.0), bq.LinearScale(min=0.0, max=1.0)
        self.curve = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales={"x": self.xs, "y": ys}, colors=["#333333"])
        self.regions = bq.Lines(x=[[0.0, 1.0]], y=[[0.0, 0.0]], scales={"x": self.xs, "y": ys},
                                fill="bottom", stroke_width=0)
        self.rules = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 1.0]], scales={"x": self.xs, "y": yr},
                              colors=["#111111"], line_style="dashed")
        self.labels = bq.Label(x=[0.0], y=[0.0], text=[""], scales={"x": self.xs, "y": ys},
                               align="middle", font_weight="bold", default_size=13)
        self.ys = ys
        axes = [bq.Axis(scale=self.xs, label="latent scale y* = x'beta + error"),
                bq.Axis(scale=ys, side="left", label="density", tick_format=".2f")]
        self.figure = self.own(make_figure([self.regions, self.curve, self.rules, self.labels], axes,
                                           "ow-density-figure"))
        self.own(self.curve, self.regions, self.rules, self.labels, self.xs, ys, yr)

    def title(self) -> str:
        return "Thresholds on the latent scale"

    # ---- updates ---------------------------------------------------------------------------------
    def _update_range(self):
        lo, hi = latent_range(self.state.fit)
        self.xs.min, self.xs.max = lo, hi
        self._grid = np.linspace(lo, hi, _GRID)
        colours = category_colours(len(self.state.fit.levels))
        self.regions.colors, self.regions.fill_colors = colours, colours
        self.regions.fill_opacities = [0.5] * len(colours)
        self.labels.colors = text_colours(colours)  # each probability in its region's hue, dark enough to read
        self._update_note()
        self.legend.value = level_legend(self.state.fit.levels, colours)

    def _update_note(self):
        """What the density is: cut points of an extended fit; which group's latent scale."""
        st = self.state
        if not st.fit.layout.is_parallel:
            self.note.value = ("<i>non-parallel or scale effects: the rules are the cut points at this scenario; "
                               "the sliders move the base thresholds</i>")
        elif st.grouping:
            self.note.value = (f"<i>{esc(st.kind_text())}; the density is that of y* = x'beta + group effect + "
                               f"error{' averaged over the groups' if st.group_kind == 'population' else ''}</i>")
        else:
            self.note.value = ""

    def _update_sliders(self):
        res = self.state.fit
        if len(self.sliders) != res.n_thresholds:
            self._make_sliders(res.n_thresholds)
        lo, hi = self.xs.min, self.xs.max
        with self._guard():
            for slider, name, value in zip(self.sliders, res.threshold_names, self.state.thresholds):
                slider.description = str(name)
                slider.min, slider.max = min(lo, value), max(hi, value)
                if slider.value != value:
                    slider.value = value

    def _make_sliders(self, m):
        for s in self.sliders:
            s.close()
        self.sliders = []
        for i in range(m):
            s = w.FloatSlider(min=-1e6, max=1e6, step=0.001, readout_format=".3f", continuous_update=True,
                              layout=w.Layout(width="95%"), style={"description_width": "120px"})
            s.add_class("ow-threshold-slider")
            s.observe(self._slider_moved(i), names="value")
            self.sliders.append(s)
        self.slider_box.children = self.sliders

    def _slider_moved(self, i):
        def moved(change):
            if self._syncing or is_echo(self.sliders[i], change["new"], self.state.thresholds[i]):
                return
            try:
                self.state.set_threshold(i, change["new"])
            except ThresholdEditError as exc:  # refused (the order rule): say so, put the slider back
                self.message.value = f"<span style='color:#b3261e'>{esc(exc)}</span>"
                with self._guard():
                    self.sliders[i].value = self.state.thresholds[i]
                return
            self.message.value = ""
        return moved

    def scenario_cuts(self):
        """``eta``, the scale ``sigma`` and the thresholds on the latent scale at the scenario.

        For a parallel fit the latent thresholds are the shown ones; with non-parallel or
        scale effects they are ``eta + sigma * U_j`` (the effective cut points of this case).
        """
        eta, U, sigma = self.state.cuts_of(self.state.scenario_frame())
        if self.state.fit.layout.is_parallel:  # random intercepts: the picked group's effect shifts eta
            return float(eta[0]) + self.state.group_offset, 1.0, self.state.theta
        return float(eta[0]), float(sigma[0]), eta[0] + sigma[0] * U[0]

    def scenario_eta(self) -> float:
        """Linear predictor of the current scenario."""
        return self.scenario_cuts()[0]

    def _update_curve(self):
        link, st = self.state.fit.link, self.state
        eta, sigma, theta = self.scenario_cuts()

        def density(t):
            if st.grouping and st.group_kind == "population":  # averaged over the group effects
                return st.fit.latent_density(t, eta)
            return link.pdf((t - eta) / sigma) / sigma

        cuts = np.clip(np.concatenate([[self.xs.min], theta, [self.xs.max]]), self.xs.min, self.xs.max)
        xs = np.array([np.linspace(a, b, _REGION_POINTS) for a, b in zip(cuts[:-1], np.maximum(cuts[1:], cuts[:-1]))])
        probs = self.state.probabilities(self.state.scenario_frame())[0]
        self._show_refusal(probs)
        curve = density(self._grid)
        peak = float(curve.max())
        rx, ry = rule_xy(theta)
        with self.curve.hold_sync(), self.regions.hold_sync(), self.rules.hold_sync(), self.labels.hold_sync():
            self.ys.max = 1.18 * peak
            self.curve.x, self.curve.y = self._grid, curve
            self.regions.x, self.regions.y = xs, density(xs)
            self.rules.x, self.rules.y = rx, ry
            self.labels.x, self.labels.y = xs.mean(axis=1), np.full(len(probs), 1.08 * peak)
            self.labels.text = [f"{p:.1%}" for p in probs]
            self.regions.visible = self.labels.visible = bool(np.all(np.isfinite(probs)))

    def _show_refusal(self, probs):
        """Where the core gives no probabilities (cut points cross), say which and why."""
        if np.all(np.isfinite(probs)):
            self.refusal.value = ""
            return
        pairs = self.state.crossings(self.state.scenario_frame())[0]
        which = "; ".join(f"{a} lies above {b}" for a, b in pairs)
        self.refusal.value = (
            "<span style='color:#b3261e'><b>No probabilities at this scenario:</b> the cumulative "
            f"probabilities cross ({esc(which)}), so the model gives no valid category probabilities here "
            "(non-parallel effects outside the data, or edited thresholds). Regions and percentages are not "
            "drawn.</span>")

    def _update_readout(self):
        st = self.state
        edited = " <i>(edited)</i>" if st.edited else ""
        res = st.fit
        rows = "" if res.n_training == res.n_rows else f" (on {esc(res.training.describe())})"
        marginal = "marginal (over the group effects) " if st.grouping else ""
        self.readout.value = (
            f"{marginal}log-likelihood at shown thresholds <b>{fmt(st.loglik, 8)}</b> &middot; fitted "
            f"{fmt(st.fitted_loglik, 8)} &middot; LR distance <b>{fmt(st.lr_distance, 4)}</b>{rows}{edited}")

"""Pieces every panel shares: the panel base class, escaping, colours, figure toolbar.

A panel observes exactly one trait of the state, :attr:`FitState.updates`, and dispatches
on :attr:`FitState.changed` to its ``_update_*`` methods, each called at most once per
processed change.  It never talks to another panel.  ``close()`` unobserves the state and
closes every widget and mark the panel made.
"""
from __future__ import annotations

import contextlib
import html

import bqplot as bq
import ipywidgets as w
import numpy as np

from ..core.html_table import html_table as core_html_table
from ..core.summary import weighting_text

__all__ = ["PanelBase", "esc", "category_colours", "heading_html", "make_figure", "figure_toolbar", "html_table",
           "fmt", "rule_xy", "is_echo", "nice_ticks"]


def esc(value) -> str:
    """Text of ``value`` escaped for an HTML widget."""
    return html.escape(str(value), quote=True)


def fmt(value, digits=4) -> str:
    """Short number text (``"-"`` for missing)."""
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return "-"
    if isinstance(value, (int, np.integer)):
        return f"{value:,}"
    return f"{value:.{digits}g}"


_RAMP = np.array([[0x31, 0x5f, 0x9b], [0x8f, 0xc3, 0xb0], [0xf2, 0xd4, 0x7a], [0xc8, 0x4b, 0x31]], float)


def category_colours(k) -> list:
    """``k`` colours from low (blue) to high (red) categories."""
    pos = np.linspace(0, len(_RAMP) - 1, max(k, 1))
    lo = np.floor(pos).astype(int).clip(0, len(_RAMP) - 2)
    rgb = _RAMP[lo] + (pos - lo)[:, None] * (_RAMP[lo + 1] - _RAMP[lo])
    return ["#%02x%02x%02x" % tuple(int(round(c)) for c in row) for row in rgb][:k]


def _relative_luminance(rgb) -> float:
    """WCAG 2.x relative luminance of an sRGB colour given as 0..255 numbers."""
    c = np.asarray(rgb, float) / 255.0
    lin = np.where(c <= 0.03928, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    return float(lin @ [0.2126, 0.7152, 0.0722])


def text_colours(colours, ratio=4.5) -> list:
    """Each colour darkened (towards black, same hue) until text in it reads on white.

    The contrast ratio to white, (1.05) / (L + 0.05) with L the WCAG 2.x relative luminance, is at
    least ``ratio`` (4.5 is WCAG's level for normal text).  Labels drawn over or beside a shaded region
    then keep the region's hue without the pale yellows and teals of the ramp fading into the page.
    """
    out = []
    for colour in colours:
        rgb = np.array([int(colour[i:i + 2], 16) for i in (1, 3, 5)], float)
        shade = rgb
        for k in range(101):
            shade = rgb * (1.0 - k / 100.0)
            if 1.05 / (_relative_luminance(shade) + 0.05) >= ratio:
                break
        out.append("#%02x%02x%02x" % tuple(int(round(v)) for v in shade))
    return out


def level_legend(levels, colours) -> str:
    """HTML chips naming each level in its colour (labels escaped)."""
    return " ".join(
        f"<span style='background:{c};padding:0 6px;margin-right:4px;opacity:0.8'>{esc(lv)}</span>"
        for c, lv in zip(colours, levels))


def heading_html(title, res) -> str:
    """A panel heading: the title in bold, then whether and by which column the fit is weighted."""
    return (f"<b>{esc(title)}</b> <span class='ow-weighting' style='font-size:85%;color:#555'>"
            f"&middot; fit {esc(weighting_text(res))}</span>")


def make_figure(marks, axes, css, title="", height="300px", **kwargs):
    """A bqplot figure with an explicit layout and our CSS class."""
    fig = bq.Figure(marks=marks, axes=axes, title=title, animation_duration=0,
                    layout=w.Layout(width="100%", height=height),
                    fig_margin={"top": 30, "bottom": 45, "left": 55, "right": 15}, **kwargs)
    fig.add_class(css)
    return fig


def figure_toolbar(figure, name):
    """Two small buttons saving ``figure`` as PNG or SVG (works once it has rendered)."""
    png = w.Button(description="PNG", tooltip=f"save {name}.png", layout=w.Layout(width="56px"))
    svg = w.Button(description="SVG", tooltip=f"save {name}.svg", layout=w.Layout(width="56px"))
    png.on_click(lambda _: figure.save_png(f"{name}.png"))
    svg.on_click(lambda _: figure.save_svg(f"{name}.svg"))
    bar = w.HBox([png, svg])
    bar.add_class("ow-save-toolbar")
    return bar


def html_table(columns, rows, css="") -> str:
    """A panel's HTML table (the core's one builder); every header and cell is escaped."""
    return core_html_table(columns, rows, css=css, style="border-collapse:collapse;font-size:90%",
                           cell="padding:1px 6px;text-align:right")


def nice_ticks(lo, hi, count=6) -> np.ndarray:
    """At most ``count`` round tick values in ``[lo, hi]``: the finest step 1, 2, 2.5 or 5 times a
    power of ten that gives no more than ``count`` ticks."""
    lo, hi = float(lo), float(hi)
    if not (np.isfinite(lo) and np.isfinite(hi)) or hi <= lo:
        return np.array([lo]) if np.isfinite(lo) else np.array([])
    e = int(np.floor(np.log10((hi - lo) / count)))
    steps = [m * 10.0 ** p for p in (e, e + 1, e + 2) for m in (1, 2, 2.5, 5)]
    step = next(s for s in steps if np.floor(hi / s) - np.ceil(lo / s) + 1 <= count)
    ticks = np.arange(np.ceil(lo / step), np.floor(hi / step) + 1) * step
    return np.round(ticks, 12) + 0.0  # no -0.0 labels


def is_echo(slider, new, current) -> bool:
    """Whether a slider change is the frontend rounding a value we sent to the slider step.

    A browser slider snaps the value it receives to its step and sends it back; a move of
    at most half a step is that echo, not a user's edit.
    """
    return isinstance(current, float) and abs(new - current) <= 0.5001 * slider.step


def rule_xy(xs):
    """x and y arrays of vertical rules at ``xs`` on a 0..1 y scale."""
    xs = np.asarray(xs, float)
    return np.column_stack([xs, xs]), np.tile([0.0, 1.0], (len(xs), 1))


def _descendants(widget):
    """Every widget below ``widget``: box children, and a figure's marks, axes and interaction."""
    out = []
    parts = list(getattr(widget, "children", ()))
    if isinstance(widget, bq.Figure):
        parts += list(widget.marks) + list(widget.axes) + [widget.interaction, widget.scale_x, widget.scale_y]
    for part in parts:
        if isinstance(part, w.Widget):
            out += [part, *_descendants(part)]
    return out


class PanelBase(w.VBox):
    """Base of the panels: one observer on the state, dispatch on what changed.

    Subclasses set ``_dispatch``: a mapping from change kind to the names of their
    ``_update_*`` methods (called in the order first met, each once per update).
    """

    _dispatch: dict = {}

    def __init__(self, state, css, **kwargs):
        super().__init__(**kwargs)
        self.state = state
        self.add_class(css)
        self._syncing = False
        self._owned = []
        self.closed = False
        state.observe(self._on_update, names="updates")

    def _on_update(self, change=None):
        names = []
        for kind in self.state.changed:
            names += [n for n in self._dispatch.get(kind, ()) if n not in names]
        for name in names:
            getattr(self, name)()
        self._update_heading()

    def make_heading(self):
        """The panel's heading widget (``ow-panel-heading``), kept up to date on every update."""
        self.heading = self.own(w.HTML())
        self.heading.add_class("ow-panel-heading")
        self._update_heading()
        return self.heading

    def title(self) -> str:
        """The heading's title (panels override it)."""
        return ""

    def _update_heading(self):
        heading = getattr(self, "heading", None)
        if heading is not None:
            value = heading_html(self.title(), self.state.fit)
            if heading.value != value:
                heading.value = value

    def redraw_all(self):
        """Run every ``_update_*`` method once (used at construction)."""
        names = []
        for group in self._dispatch.values():
            names += [n for n in group if n not in names]
        for name in names:
            getattr(self, name)()

    @contextlib.contextmanager
    def _guard(self):
        """Mark changes made by the panel itself so its widget observers ignore them."""
        self._syncing, old = True, self._syncing
        try:
            yield
        finally:
            self._syncing = old

    def own(self, *widgets):
        """Register widgets and marks for closing with the panel."""
        self._owned.extend(widgets)
        return widgets[0] if len(widgets) == 1 else widgets

    def close(self):
        """Unobserve the state and close everything the panel made (widgets, marks, scales)."""
        self.closed = True
        with contextlib.suppress(ValueError, AttributeError):
            self.state.unobserve(self._on_update, names="updates")
        for item in [*_descendants(self), *self._owned]:
            item.close()
        self._owned = []
        super().close()

    @property
    def observing(self) -> bool:
        """Whether this panel still observes its state."""
        return any(getattr(h, "__self__", None) is self
                   for h in self.state._trait_notifiers.get("updates", {}).get("change", []))

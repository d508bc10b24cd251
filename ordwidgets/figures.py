"""Static pictures of the panels, drawn with matplotlib from the panels' own marks.

A panel is built on the state without a browser (widgets work without a frontend), and its
bqplot marks -- the very arrays and colours the browser would draw -- are copied onto a
matplotlib :class:`~matplotlib.figure.Figure` made with the object API on the Agg canvas (no
``pyplot``, no global state).  So a figure shows what the panel shows, in the same colours,
and cannot drift from it.

Saved SVG is deterministic when written through :func:`svg_text` (fixed ``svg.hashsalt``, no
date in the metadata).
"""
from __future__ import annotations

import io

import numpy as np
import pandas as pd

from .state import FitState

__all__ = ["FIGURES", "state_figure", "panel_figure", "links_figure", "svg_text", "png_bytes"]

#: Names accepted by :func:`state_figure` (and ``FitState.figure``).
FIGURES = ("explorer", "thresholds", "residuals", "links")
_SVG_SALT = "ordwidgets"


# ---- bqplot marks -> matplotlib --------------------------------------------------------------
def _rows(values):
    """A mark's x or y as a list of 1-D arrays (one per curve)."""
    arr = np.asarray(values, float)
    return [arr] if arr.ndim == 1 else list(arr)


def _cycle(colours, i, default="#333333"):
    colours = [c for c in (colours or [])]
    if not colours:
        return default
    return colours[i % len(colours)]


def _linestyle(mark):
    return {"dashed": "--", "dotted": ":", "dash_dotted": "-."}.get(mark.line_style, "-")


def draw_lines(ax, mark):
    """Copy a ``bqplot.Lines`` onto ``ax``: curves, fills between or to the bottom, dashes."""
    ys = _rows(mark.y)
    xs = _rows(mark.x)
    xs = xs * len(ys) if len(xs) == 1 else xs
    fills = list(mark.fill_colors or [])
    opac = list(mark.fill_opacities or [])
    if mark.fill == "between":
        for i, colour in enumerate(fills[: len(ys) - 1]):
            if colour is not None:
                ax.fill_between(xs[i], ys[i], ys[i + 1], color=colour, alpha=opac[i] if i < len(opac) else 1.0,
                                linewidth=0)
    elif mark.fill == "bottom":
        for i, colour in enumerate(fills[: len(ys)]):
            if colour is not None:
                ax.fill_between(xs[i], 0.0, ys[i], color=colour, alpha=opac[i] if i < len(opac) else 1.0,
                                linewidth=0)
    if mark.stroke_width > 0:
        for i, (x, y) in enumerate(zip(xs, ys)):
            ax.plot(x, y, color=_cycle(mark.colors, i), linewidth=0.75 * mark.stroke_width,
                    linestyle=_linestyle(mark), gid=f"line{i}")


def draw_scatter(ax, mark):
    """Copy a ``bqplot.Scatter`` (one colour, one size, one opacity)."""
    opacity = float(mark.opacities[0]) if len(mark.opacities) else 1.0
    ax.scatter(np.asarray(mark.x, float), np.asarray(mark.y, float), s=0.8 * mark.default_size,
               color=_cycle(mark.colors, 0), alpha=opacity, linewidths=0)


def draw_label(ax, mark):
    """Copy a ``bqplot.Label`` (texts at data positions)."""
    align = {"start": "left", "middle": "center", "end": "right"}.get(mark.align, "center")
    for x, y, text in zip(np.asarray(mark.x, float), np.asarray(mark.y, float), mark.text):
        ax.text(x, y, text, ha=align, va="center", fontsize=0.7 * mark.default_size,
                fontweight=mark.font_weight if mark.font_weight in ("bold", "normal") else "normal")


_DRAW = {"Lines": draw_lines, "Scatter": draw_scatter, "Label": draw_label}


def _formatter(tick_format):
    from matplotlib.ticker import FuncFormatter, PercentFormatter

    if tick_format and tick_format.endswith("%"):
        return PercentFormatter(1.0, decimals=0)
    if tick_format and tick_format.startswith(".") and tick_format.endswith("f"):
        digits = int(tick_format[1:-1])
        return FuncFormatter(lambda v, _: f"{v:.{digits}f}")
    return None


def _apply_axis(ax, axis):
    scale = axis.scale
    lo, hi = getattr(scale, "min", None), getattr(scale, "max", None)
    vertical = axis.orientation == "vertical" or axis.side in ("left", "right")
    setter, target = (ax.set_ylim, ax.yaxis) if vertical else (ax.set_xlim, ax.xaxis)
    (ax.set_ylabel if vertical else ax.set_xlabel)(axis.label)
    if lo is not None or hi is not None:
        setter(lo, hi)
    fmt = _formatter(axis.tick_format)
    if fmt is not None:
        target.set_major_formatter(fmt)
    if axis.tick_labels:
        ticks = sorted(float(k) for k in axis.tick_labels)
        target.set_ticks(ticks, labels=[str(axis.tick_labels.get(t, axis.tick_labels.get(str(t), t))) for t in ticks])


def draw_figure(ax, figure):
    """Copy every visible mark and the axes of a ``bqplot.Figure`` onto ``ax``."""
    for mark in figure.marks:
        if mark.visible and type(mark).__name__ in _DRAW:
            _DRAW[type(mark).__name__](ax, mark)
    for axis in figure.axes:
        _apply_axis(ax, axis)
    if figure.title:
        ax.set_title(figure.title)
    ax.grid(True, color="#dddddd", linewidth=0.5)
    ax.set_axisbelow(True)


def _level_legend(ax, levels, colours):
    from matplotlib.patches import Patch

    handles = [Patch(facecolor=c, alpha=0.8, label=str(lv)) for lv, c in zip(levels, colours)]
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=min(len(handles), 6),
              frameon=False, fontsize=8)


def new_figure(width=7.0, height=3.6, ncols=1, **kwargs):
    """A matplotlib figure on the Agg canvas (object API) and its axes."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig, fig.subplots(1, ncols, **kwargs)


# ---- the panels ---------------------------------------------------------------------------------
def panel_figure(panel, *, title=None):
    """The static picture of an existing panel (explorer, thresholds or residuals)."""
    from .widgets import ProbabilityExplorer, ResidualPanel, ThresholdPanel

    levels = panel.state.fit.levels
    if isinstance(panel, ResidualPanel):
        fig, (left, right) = new_figure(9.0, 3.6, ncols=2, width_ratios=[3, 2])
        draw_figure(left, panel.figure)
        draw_figure(right, panel.qq_figure)
        left.set_title("surrogate residuals", fontsize=10)
        right.set_title("QQ plot against the link distribution", fontsize=10)
    else:
        fig, ax = new_figure()
        draw_figure(ax, panel.figure)
        if isinstance(panel, ProbabilityExplorer):
            _level_legend(ax, levels, list(panel.bands.fill_colors)[: len(levels)])
        elif isinstance(panel, ThresholdPanel):
            _level_legend(ax, levels, list(panel.regions.fill_colors))
    if title:
        fig.suptitle(title, fontsize=11)
    return fig


def links_figure(state, table=None):
    """Bars of AIC above the best link for every link (the link panel's comparison as a picture).

    ``table`` is a :func:`~ordwidgets.core.compare_links` frame; by default the state's link
    table, computed when the state has none yet.
    """
    from .core import compare_links
    from .widgets._common import category_colours

    if table is None and state.link_table:
        table = pd.DataFrame([r for r in state.link_table if r.get("link")]).set_index("link")
    if table is None or "aic" not in table:
        kwargs = {k: v for k, v in state.options.items() if k in ("weights", "levels")}
        table = compare_links(state.model_formula, state.data, **kwargs)
    aic = table["aic"].astype(float)
    aic = aic[np.isfinite(aic)]
    names, delta = [str(n) for n in aic.index], (aic - aic.min()).to_numpy()
    fig, ax = new_figure(6.0, 0.5 + 0.45 * len(names))
    low, high = category_colours(4)[0], category_colours(4)[-1]
    ax.barh(np.arange(len(names)), delta, color=[high if n == state.link else low for n in names])
    ax.set_yticks(np.arange(len(names)), labels=[("\u25b6 " if n == state.link else "") + n for n in names])
    ax.invert_yaxis()
    ax.set_xlabel("AIC above the best link (0 = best; under 2 = no real difference)")
    for i, d in enumerate(delta):
        ax.text(d, i, f" {d:.2f}", va="center", fontsize=8)
    ax.set_xlim(0, max(float(delta.max()) * 1.25, 1.0))
    return fig


def state_figure(state, name, *, view=None):
    """The static picture of one panel for ``state``.

    Parameters
    ----------
    state : FitState
    name : {"explorer", "thresholds", "residuals", "links"}
    view : str, optional
        The explorer's view (one of its view toggle's options; default the panel's default).

    Returns
    -------
    matplotlib.figure.Figure
        Save with ``fig.savefig("x.svg")`` / ``.png`` / ``.pdf``; :func:`svg_text` gives
        deterministic SVG.
    """
    from .widgets import ProbabilityExplorer, ResidualPanel, ThresholdPanel

    if name == "links":
        return links_figure(state)
    panels = {"explorer": ProbabilityExplorer, "thresholds": ThresholdPanel, "residuals": ResidualPanel}
    if name not in panels:
        raise ValueError(f"figure name must be one of {', '.join(FIGURES)}, got {name!r}")
    panel = panels[name](state)
    try:
        if view is not None:
            panel.view.value = view
        return panel_figure(panel)
    finally:
        panel.close()


# ---- output -------------------------------------------------------------------------------------
def svg_text(fig) -> str:
    """SVG of ``fig`` without date or random ids (identical for identical figures)."""
    from matplotlib import rc_context

    buf = io.StringIO()
    with rc_context({"svg.hashsalt": _SVG_SALT, "svg.fonttype": "path"}):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    text = buf.getvalue()
    return text[text.index("<svg"):]


def png_bytes(fig, *, dpi=110) -> bytes:
    """PNG of ``fig`` (no date or software metadata)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


FitState.figure_drawer = staticmethod(state_figure)

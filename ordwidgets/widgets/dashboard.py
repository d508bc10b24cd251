"""``dashboard``: the panels around one state, with header, status and busy indicator.

Four panels always; the group-effects panel too when the state has grouping columns (a fit
with random intercepts, or candidates the model controls can switch on).
"""
from __future__ import annotations

import base64
import contextlib
import ipywidgets as w
import numpy as np

from ..core import SIGN_CONVENTION, FitResult
from ..state import FitState, n_training
from ._common import esc
from .explorer import ProbabilityExplorer
from .groups import GroupEffectsPanel
from .links import LinkSelector
from .residuals import ResidualPanel
from .threshold import ThresholdPanel

__all__ = ["Dashboard", "dashboard", "CAUTION", "BACKGROUND_ROWS"]

#: From this many fitted rows on, :func:`dashboard` runs long work in a background thread.
BACKGROUND_ROWS = 20_000

CAUTION = ("These are associations, not causes. Check the fit (residuals, proportional-odds tests) "
           "before acting on a prediction, and defer to domain experts, local rules and licensed "
           "practice wherever predictions could be acted on about people.")


class Dashboard(w.VBox):
    """All panels on one :class:`FitState` (``ow-dashboard``): thresholds, link and model,
    explorer, residuals, and the group effects (:attr:`group_panel`, ``None`` for a state
    without grouping columns).

    The status widget (``ow-status``) shows ``updates: N`` and is refreshed by an observer
    registered after the panels', so it changes once every panel has redrawn.
    """

    def __init__(self, state, *, owns_threads=False, **kwargs):
        super().__init__(**kwargs)
        self.state, self.owns_threads = state, owns_threads
        self.add_class("ow-dashboard")
        self.header, self.status, self.busy = w.HTML(), w.HTML(), w.HTML()
        self.status.add_class("ow-status")
        self.busy.add_class("ow-busy")
        self.threshold_panel, self.link_selector = ThresholdPanel(state), LinkSelector(state)
        self.explorer, self.residual_panel = ProbabilityExplorer(state), ResidualPanel(state)
        self.panels = [self.threshold_panel, self.link_selector, self.explorer, self.residual_panel]
        self.group_panel = None
        if state.grouping or state.group_candidates:
            self.group_panel = GroupEffectsPanel(state)
            self.panels.append(self.group_panel)
        grid = w.GridBox(self.panels, layout=w.Layout(grid_template_columns="repeat(2, minmax(0, 1fr))",
                                                       grid_gap="12px 18px"))
        self.children = [self.header, w.HBox([self.status, self.busy]), grid, self._report_bar()]
        state.observe(self._update_header, names="updates")
        state.observe(self._update_busy, names="busy")
        self._update_header()
        self._update_busy()

    def _report_bar(self):
        self.report_path = "model-report.html"
        self.report_button = w.Button(description="save report", icon="file", layout=w.Layout(width="auto"))
        self.report_button.add_class("ow-save-report")
        self.report_link = w.HTML()
        self.report_link.add_class("ow-report-link")
        self.report_button.on_click(lambda _: self.save_report())
        return w.HBox([self.report_button, self.report_link])

    #: Function ``(state, path) -> pathlib.Path`` behind "save report"; installed by
    #: :mod:`ordwidgets.report` (which draws the panels, so the panels do not import it).
    report_writer = None

    def save_report(self, path=None):
        """Write :func:`ordwidgets.write_report` of the state to ``path`` and offer it for download."""
        write = Dashboard.report_writer
        target = self.state.run_inline("writing the report", lambda: write(self.state, path or self.report_path))
        data = base64.b64encode(target.read_bytes()).decode("ascii")
        self.report_link.value = (f"saved <code>{esc(target)}</code> &middot; <a download='{esc(target.name)}' "
                                  f"href='data:text/html;base64,{data}'>download</a>")
        return target

    def _update_header(self, change=None):
        st, res = self.state, self.state.fit
        edited = " &middot; <i>thresholds edited</i>" if st.edited else ""
        shown = "" if res.n_training == res.n_rows else f" (panels show {esc(res.training.describe())})"
        self.header.value = (
            f"<div style='font-size:115%'><b>Cumulative link model</b> &middot; {esc(st.model_formula)} "
            f"&middot; link <b>{esc(res.link.name)}</b> ({esc(res.link.latent)} latent error) &middot; "
            f"n = {res.n_rows:,} rows, {esc(res.weighting)}{units_text(res)}{shown}{edited}</div>"
            f"<div style='font-size:90%'>{esc(SIGN_CONVENTION)}</div>"
            f"<div class='ow-caution' style='font-size:95%;color:#6b4500;background:#fff4dc;"
            f"border-left:4px solid #d08a00;padding:4px 8px;margin:4px 0'>{esc(CAUTION)}</div>")
        self.status.value = f"<span style='color:#777;font-size:85%'>updates: {st.updates}</span>"

    def _update_busy(self, change=None):
        busy = self.state.busy
        self.busy.value = f"<span style='color:#b35c00'>&#8987; {esc(busy)}&hellip;</span>" if busy else ""

    def close(self):
        """Close the panels, stop observing the state and end the threads the dashboard started.

        A dashboard that gave its state background threads (``background=True``, or a large
        fit) stops them here: queued work is cancelled, ``busy`` clears and the state runs
        later long work inline.  Threads of an executor the caller supplied are the caller's.
        """
        for name, handler in (("updates", self._update_header), ("busy", self._update_busy)):
            with contextlib.suppress(ValueError):
                self.state.unobserve(handler, names=name)
        for panel in getattr(self, "panels", ()):
            panel.close()
        if getattr(self, "owns_threads", False):
            self.state.close()
        super().close()


def units_text(res) -> str:
    """``", 1,681 weighted units"`` for a weighted fit (the total frequency weight), else ``""``."""
    if res.training is None or res.training.weights is None:
        return ""
    return f", {float(np.sum(res.training.weights)):,.10g} weighted units"


def dashboard(state_or_fit, *, data=None, background=None):
    """Compose the panels on one state (the group-effects panel for a fit with random intercepts).

    Parameters
    ----------
    state_or_fit : FitState or FitResult
        An existing state, or a fit to wrap (see :meth:`FitState.from_fit`).
    data : pandas.DataFrame, optional
        The data of a fit that does not hold its own frame.
    background : bool, optional
        Run long work (link comparison, proportional-odds tests, the residual refresh after
        an edit) in a background thread, with the busy indicator shown meanwhile.  Default:
        when the fit holds at least :data:`BACKGROUND_ROWS` rows or the state already has an
        ``executor``.  ``True`` gives a state without one a background executor; ``False``
        runs everything inline (deterministic, as in tests).

    Returns
    -------
    Dashboard
    """
    if isinstance(state_or_fit, FitResult):
        state_or_fit = FitState.from_fit(state_or_fit, data=data)
    if not isinstance(state_or_fit, FitState):
        raise TypeError(f"dashboard needs a FitState or a FitResult, got {type(state_or_fit).__name__}")
    if background is None:
        background = state_or_fit.executor is not None or n_training(state_or_fit.fit) >= BACKGROUND_ROWS
    owns = bool(background and state_or_fit.executor is None)
    if owns:
        state_or_fit.jobs.start_threads(2)
    elif background is False:
        state_or_fit.executor = None
    return Dashboard(state_or_fit, owns_threads=owns)

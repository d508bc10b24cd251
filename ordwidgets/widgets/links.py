"""``LinkSelector``: the link, a comparison of all links, and the model controls."""
from __future__ import annotations

import ipywidgets as w
import numpy as np

from ..core import SIGN_CONVENTION, link_names
from ..core.html_table import html_table as core_html_table
from ..core.summary import covariance_fact
from ._common import PanelBase, esc, fmt, html_table

__all__ = ["LinkSelector", "po_test_rows", "po_verdict", "po_figures_html", "SLIGHT_CHANGE"]


#: Below this largest change in any predicted probability (when the predictor's effect is freed
#: to differ by threshold) a significant departure from parallel effects is called "slight"
#: (common practice, no source: two percentage points rarely changes a reading of the fit).
SLIGHT_CHANGE = 0.02

#: Columns of the per-predictor test figures: (header, width in px, tooltip).
_PO_COLUMNS = (("verdict", 58, "holds: no evidence against one shared effect (LR p >= 0.05); slight: significant, "
                "but freeing it moves no probability by 2 points; drifts: significant and larger"),
               ("χ²", 58, "likelihood-ratio statistic against freeing this effect by threshold"),
               ("df", 30, "degrees of freedom of the LR test"), ("p", 62, "LR p-value"),
               ("Brant p", 62, "Brant (1990) Wald test p-value"),
               ("moves", 62, "largest change of a predicted probability when the effect is freed"))


def po_test_rows(res) -> dict:
    """``{name: figures}`` from ``res.proportional_odds_test()`` (one dict of figures per row)."""
    table = res.proportional_odds_test()
    return {str(name): {k: row.get(k, np.nan) for k in ("statistic", "df", "p_value", "brant_p_value",
                                                         "max_prob_change")}
            for name, row in table.iterrows()}


def po_verdict(row) -> str:
    """``"holds"``, ``"slight"`` or ``"drifts"`` from the LR p-value and the largest change."""
    p, change = row.get("p_value", np.nan), row.get("max_prob_change", np.nan)
    if not np.isfinite(p):
        return "-"
    if p >= 0.05:
        return "holds"
    return "slight" if np.isfinite(change) and change < SLIGHT_CHANGE else "drifts"


def _po_text(row) -> str:
    """LR figures, then Brant's p and the largest probability change where the table has them.

    With many rows a trivial departure is significant, so the size of the change in predicted
    probabilities is shown beside the p-values (see ``FitResult.proportional_odds_test``).
    """
    text = f"χ² = {fmt(row['statistic'], 4)} ({fmt(row['df'], 3)} df), p = {fmt(row['p_value'], 3)}"
    brant = row.get("brant_p_value", np.nan)
    if np.isfinite(brant):
        text += f"; Brant p = {fmt(brant, 3)}"
    change = row.get("max_prob_change", np.nan)
    if np.isfinite(change):
        text += f"; freed, probabilities move {100 * change:.1f} points at most"
    return text


def _po_cells(row) -> list:
    change = row.get("max_prob_change", np.nan)
    return [po_verdict(row), fmt(row["statistic"], 4), fmt(row["df"], 3), fmt(row["p_value"], 3),
            fmt(row.get("brant_p_value", np.nan), 3), f"{100 * change:.1f} pts" if np.isfinite(change) else "-"]


def _po_table(header, rows, css="", style="font-size:90%;font-variant-numeric:tabular-nums") -> str:
    """The figures' columns (fixed widths, tooltips) and the term last, left-aligned."""
    return core_html_table(header, rows, css=css, style=f"border-collapse:collapse;table-layout:fixed;{style}",
                           cell="padding:0 4px;text-align:right", label_style="padding:0 4px;text-align:left",
                           labels=-1, bold_first=True, widths=[c[1] for c in _PO_COLUMNS],
                           titles=[c[2] for c in _PO_COLUMNS])


def po_figures_html(rows) -> str:
    """Aligned figures of one or more test rows ``[(term, figures)]`` with the sentences on demand."""
    body = [_po_cells(r) + [term] for term, r in rows]
    sentences = "<br>".join(esc(f"{term}: {_po_text(r)}" if term else _po_text(r)) for term, r in rows)
    return (_po_table(None, body, css="ow-po-figures")
            + f"<details style='font-size:85%;color:#555'><summary>details</summary>{sentences}</details>")


def po_header_html() -> str:
    """The column headers of :func:`po_figures_html` (same widths, so the figures line up)."""
    return _po_table([c[0] for c in _PO_COLUMNS] + [""], [], style="font-size:80%;color:#555")


class LinkSelector(PanelBase):
    """Pick the link; compare loglik / AIC / BIC of every link; free or drop predictors.

    The comparison (``ow-link-table``) is computed once per model spec, through the state's
    long-work runner (a background executor in the dashboard, inline in tests).  The model
    controls (``ow-model-controls``) hold, per predictor: in or out of the model, parallel or
    non-parallel, with or without a scale effect, and the proportional-odds test beside it.
    """

    _dispatch = {
        "fit": ("_update_dropdown", "_update_controls", "_update_effects", "_request_tables"),
        "error": ("_update_dropdown", "_update_controls"),
        "link_table": ("_update_table",),
    }

    def __init__(self, state, **kwargs):
        super().__init__(state, "ow-link-selector", **kwargs)
        self.dropdown = self.own(w.Dropdown(options=list(link_names()), description="link"))
        self.dropdown.add_class("ow-link-dropdown")
        self.dropdown.observe(self._link_chosen, names="value")
        self.table = self.own(w.HTML())
        self.table.add_class("ow-link-table")
        self.controls = self.own(w.VBox())
        self.controls.add_class("ow-model-controls")
        self.message, self.po_overall, self.effects = self.own(w.HTML(), w.HTML(), w.HTML())
        self.po_overall.layout.margin = "0 0 0 16px"  # under the same column headers as the predictors
        self.effects.add_class("ow-effects-table")
        self.grouping = self.own(w.HBox())
        self.grouping.add_class("ow-grouping-controls")
        self._rows, self._po, self._groups = {}, {}, {}
        self.children = [self.make_heading(), self.dropdown, self.table,
                         w.HTML("<b>Predictors</b> (in model &middot; non-parallel &middot; scale effect "
                                "&middot; proportional-odds test)"),
                         w.HTML(po_header_html(), layout=w.Layout(margin="0 0 0 16px")), self.controls, self.po_overall,
                         self.grouping, self.message, self.effects]
        self.redraw_all()

    def title(self) -> str:
        return "Link and model"

    # ---- link -----------------------------------------------------------------------------------
    def _link_chosen(self, change):
        if not self._syncing:
            self.state.link = change["new"]

    def _update_dropdown(self):
        with self._guard():
            self.dropdown.value = self.state.link
        self.message.value = f"<span style='color:#b3261e'>{esc(self.state.error)}</span>" if self.state.error else ""

    def _request_tables(self):
        self.state.request_link_table()
        self._po = {}
        if self.state.grouping:  # the core has no such test for these fits: say so, never another model's
            self._set_po({"": "proportional-odds tests: not available for random-intercept fits (the core does "
                              "not compute them yet)"})
            self._update_table()
            return
        self.state.run_long("testing proportional odds", lambda res=self.state.fit: po_test_rows(res),
                            self._set_po, kind=("proportional odds", id(self)),
                            wanted=lambda fit=self.state.fit: self.state.fit is fit and not self.closed,
                            stopped=lambda: self._set_po({"": "not run: long work was stopped by close()"}))
        self._update_table()

    def _set_po(self, rows):
        self._po = rows if isinstance(rows, dict) else {"": f"test failed: {rows}"}
        self._update_po()

    def _update_table(self):
        rows = self.state.link_table
        if not rows:
            self.table.value = "<i>comparing links...</i>"
            return
        cells = [[("\u25b6 " if r["link"] == self.state.link else "") + r["link"], fmt(r.get("loglik"), 8),
                  fmt(r.get("aic"), 8), fmt(r.get("bic"), 8), r.get("error", "")[:80]] for r in rows]
        groups = self.state.grouping
        same = (f", each with a random intercept per {', '.join(map(str, groups))} (marginal log-likelihoods)"
                if groups else "")
        self.table.value = (html_table(["link", "loglik", "AIC", "BIC", "note"], cells)
                            + f"<div style='font-size:85%;color:#555'>every link fitted "
                              f"{esc(self.state.fit.weighting)}{esc(same)}</div>" + self._sample_note())

    def _sample_note(self):
        res = self.state.fit
        if res.n_training == res.n_rows:
            return ""
        return (f"<div style='font-size:85%;color:#8a5a00'>links compared on {esc(res.training.describe())} "
                f"(the fit on all rows: log-likelihood {fmt(res.loglik, 8)})</div>")

    def _update_effects(self):
        table = self.state.fit.table()
        rows = [[name, fmt(r["estimate"], 4), fmt(r["std_error"], 3), fmt(r["p_value"], 3)]
                for name, r in table.loc[list(self.state.fit.coef_names)].iterrows()]
        errors = "".join(f"; std. errors: {v}" for v in covariance_fact(self.state.fit).values())
        self.effects.value = (f"<b>Effects</b> (positive = towards higher categories; fit "
                              f"{esc(self.state.fit.weighting)}{esc(errors)})"
                              + html_table(["effect", "estimate", "SE", "p-value"], rows)
                              + f"<div style='font-size:85%;color:#555'>{esc(SIGN_CONVENTION)}</div>")

    # ---- model controls ------------------------------------------------------------------------------
    def _update_controls(self):
        names = self.state.predictors
        if list(self._rows) != names:
            self._make_rows(names)
        with self._guard():
            for name, (inc, nonpar, scale, _) in self._rows.items():
                inc.value = name not in self.state.dropped
                nonpar.value, scale.value = name in self.state.nonparallel, name in self.state.scale_by
                nonpar.disabled = scale.disabled = not inc.value
        self._update_grouping()
        self._update_po()

    def _update_grouping(self):
        """One "random intercept" box per candidate grouping column (none: nothing shown)."""
        names = list(self.state.group_candidates)
        if list(self._groups) != names:
            for box in self._groups.values():
                box.close()
            self._groups = {n: w.Checkbox(description=f"random intercept per {n}", indent=False,
                                          layout=w.Layout(width="auto", margin="0 10px 0 0")) for n in names}
            for box in self._groups.values():
                box.observe(self._grouping_changed, names="value")
            self.grouping.children = list(self._groups.values())
        with self._guard():
            for name, box in self._groups.items():
                box.value = name in self.state.random_intercepts

    def _grouping_changed(self, change):
        if not self._syncing:
            self.state.random_intercepts = tuple(n for n, box in self._groups.items() if box.value)

    def _make_rows(self, names):
        for widgets in self._rows.values():
            for widget in widgets:
                widget.close()
        for row in self.controls.children:
            row.close()
        self._rows = {name: self._row_widgets() for name in names}
        self.controls.children = [self._row_box(n, r) for n, r in self._rows.items()]

    def _row_widgets(self):
        boxes = [w.Checkbox(description=d, indent=False, layout=w.Layout(width="auto", margin="0 10px 0 0"))
                 for d in ("in model", "non-parallel", "scale effect")]
        for box in boxes:
            box.observe(self._control_changed, names="value")
        return (*boxes, w.HTML(layout=w.Layout(margin="0 0 4px 16px")))

    @staticmethod
    def _row_box(name, widgets):
        label = w.Label(str(name), layout=w.Layout(width="auto", min_width="90px", margin="0 10px 0 0"))
        label.style.font_weight = "bold"
        return w.VBox([w.HBox([label, *widgets[:3]]), widgets[3]])

    def _control_changed(self, change):
        if self._syncing:
            return
        pick = {k: tuple(n for n, r in self._rows.items() if r[i].value)
                for i, k in enumerate(("included", "nonparallel", "scale_by"))}
        with self.state.batch():
            self.state.dropped = tuple(n for n in self._rows if n not in pick["included"])
            self.state.nonparallel, self.state.scale_by = pick["nonparallel"], pick["scale_by"]

    def _update_po(self):
        failed, overall = self._po.get(""), self._po.get("(overall)")
        if failed:  # the test itself failed
            self.po_overall.value = f"<span style='color:#b3261e'>{esc(failed)}</span>"
        else:
            self.po_overall.value = "all predictors together" + po_figures_html([("", overall)]) if overall else ""
        for name, (*_, text) in self._rows.items():
            if name in self.state.dropped:
                text.value = "<i>out of the model</i>"
            else:
                text.value = self._match_po(name) if self._po else "<i>testing...</i>"

    def _match_po(self, name):
        if name in self._po and isinstance(self._po[name], dict):
            return po_figures_html([("", self._po[name])])
        hits = [(k, v) for k, v in self._po.items()
                if isinstance(v, dict) and k.startswith((f"C({name})", f"{name}["))]
        return po_figures_html(hits) if hits else "-"

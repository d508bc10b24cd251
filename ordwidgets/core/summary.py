"""How a fit describes itself: a data line, a fit line and one sentence about the solver.

Used by :class:`~ordwidgets.core.results.FitResult` for ``__str__`` and ``_repr_html_`` and by
the panels' captions (:func:`weighting_text`).  Every data-derived string in the HTML is
escaped.
"""
from __future__ import annotations

import html

import numpy as np

from .html_table import Section, html_table
from .layout import effect_groups, model_facts

__all__ = ["weighting_text", "weighting_of", "level_counts", "data_line", "fit_line", "solver_sentence", "summary_facts",
           "render_text", "render_html", "curvature_words", "fmt_value", "covariance_fact"]

#: Condition numbers of the curvature ``-H`` up to which the fit is called "well conditioned",
#: then "poorly conditioned" (common practice, no source: about half and three quarters of the
#: 16 significant digits of double precision lost in solving with ``H``).
WELL_CONDITIONED, POORLY_CONDITIONED = 1e8, 1e12


def weighting_text(res) -> str:
    """``"unweighted"``, ``"weighted by column 'count'"`` or ``"weighted by a weights array"``."""
    return weighting_of((getattr(res, "options", None) or {}).get("weights"))


def weighting_of(weights) -> str:
    """The caption text of a ``weights=`` argument (``None``, a column name or an array)."""
    if weights is None:
        return "unweighted"
    if isinstance(weights, str):
        return f"weighted by column {weights!r}"
    return "weighted by a weights array"


def level_counts(res):
    """``{level: count}`` of the fitted rows (weighted units when weighted), or ``None``.

    ``None`` when the result holds no training rows or only a display sample of them.
    """
    tr = res.training
    if tr is None or tr.is_sample:
        return None
    counts = np.bincount(tr.y, weights=tr.weights, minlength=len(res.levels))
    return dict(zip(res.levels, counts))


def data_line(res) -> str:
    """Rows, weighted units and the outcome levels with their counts."""
    if weighting_text(res) == "unweighted":
        rows = f"{res.n_rows:,} rows, unweighted"
    else:
        rows = f"{res.n_rows:,} rows, {weighting_text(res)} ({fmt_value(_count(res.n_obs))} units)"
    counts = level_counts(res)
    if counts is None:
        levels = ", ".join(str(v) for v in res.levels)
    else:
        levels = " · ".join(f"{v} {fmt_value(_count(c))}" for v, c in counts.items())
    return f"{rows}; {res.response}: {levels}"


def _count(c):
    return int(round(c)) if float(c).is_integer() else float(c)


def fit_line(res) -> str:
    """Log-likelihood, AIC and BIC."""
    return f"log-likelihood {fmt_value(res.loglik)} · AIC {fmt_value(res.aic)} · BIC {fmt_value(res.bic)}"


def curvature_words(condition) -> str:
    """Plain words for the condition number of the curvature ``-H`` at the estimate."""
    if not np.isfinite(condition):
        return "curvature not negative definite"
    if condition <= WELL_CONDITIONED:
        return "curvature well conditioned"
    if condition <= POORLY_CONDITIONED:
        return "curvature poorly conditioned"
    return "curvature nearly singular"


def solver_sentence(res) -> str:
    """``"converged in 3 Newton steps; largest score 2.6e-04; curvature well conditioned"``."""
    head = res.message if res.converged else f"NOT converged: {res.message}"
    return (f"{head}; largest score {res.largest_score:.2g}; {curvature_words(res.curvature_condition)} "
            f"(condition number {res.curvature_condition:.3g})")


def summary_facts(res) -> dict:
    """The summary's labelled lines, in order (extension facts and a display sample included)."""
    sample = {} if res.training is None or not res.training.is_sample else {
        "rows shown": res.training.describe()}
    return {"link": f"{res.link.name} (latent {res.link.latent})", **model_facts(res), "data": data_line(res),
            **sample, "fit": fit_line(res), **covariance_fact(res), "solver": solver_sentence(res)}


def covariance_fact(res) -> dict:
    """``{"std. errors": ...}`` when the covariance is not the model-based one (else empty)."""
    kind = getattr(res, "covariance_type", "model")
    if kind == "cluster":
        return {"std. errors": f"cluster-robust sandwich, {res.options.get('n_clusters'):,} clusters"}
    if kind == "sampling":
        return {"std. errors": "sandwich for sampling weights (Binder 1983)"}
    return {}


def render_text(res, sign_convention) -> str:
    """Plain-text summary: the labelled lines, notes, the table and the sign convention."""
    facts = summary_facts(res)
    width = max(len(k) for k in facts)
    lines = "\n".join(f"  {k:<{width}}  {v}" for k, v in facts.items())
    notes = "".join(f"\n  note: {n}" for n in res.notes)
    table = res.table().to_string(float_format=fmt_value)
    return (f"Cumulative link fit: {res.formula}\n{lines}{notes}\n\n{table}\n"
            f"(wald_low, wald_high: 95% Wald interval)\n\n{sign_convention}")


def fmt_value(v) -> str:
    """Short text of a number (``yes``/``no`` for booleans, thousands separators for integers)."""
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return f"{v:,}"
    if isinstance(v, (float, np.floating)):
        if not np.isfinite(v):
            return str(v)
        return f"{v:.4g}" if (abs(v) >= 1e5 or (abs(v) < 1e-3 and v != 0)) else f"{v:.4f}"
    return str(v)




def _facts_html(res) -> str:
    e = html.escape
    rows = []
    for k, v in summary_facts(res).items():
        colour = "" if k != "solver" else f";color:{'#1b7f3b' if res.converged else '#b3261e'}"
        rows.append(f"<div style='margin:1px 0{colour}'><b style='display:inline-block;min-width:4.5em'>"
                    f"{e(k)}</b> {e(str(v))}</div>")
    return "".join(rows)


def _interval_head(tab, level=0.95) -> list:
    """Heading over the ``wald_low`` / ``wald_high`` columns naming the interval method."""
    before = list(tab.columns).index("wald_low") + 1
    return [("", before), (f"{level:.0%} Wald interval", 2)]


def render_html(res, sign_convention) -> str:
    """HTML summary of our own design; every data-derived string is escaped."""
    e = html.escape
    tab = res.table()

    def rows(names, title):
        return [Section(title)] + [[str(n)] + [fmt_value(v) for v in tab.loc[n]] for n in names]

    body = rows(res.threshold_names, "Thresholds (cut points on the latent scale)")
    scale = effect_groups(res)["scale"]
    location = [n for n in res.coef_names if n not in scale]
    if location:
        body += rows(location, "Effects (positive = towards higher categories)")
    if scale:
        body += rows(scale, "Scale effects (positive = wider latent spread, more mass in the extremes)")
    notes = "".join(f"<div style='color:#8a5a00'>note: {e(n)}</div>" for n in res.notes)
    return (
        "<div class='ow-fit-result'>"
        f"<div style='font-weight:bold'>Cumulative link fit &middot; {e(res.formula)}</div>"
        f"<div style='font-size:90%;margin:4px 0'>{_facts_html(res)}</div>{notes}"
        f"{html_table([''] + list(tab.columns), body, labels=1, above=_interval_head(tab))}"
        f"<div style='font-size:85%;color:#555;margin-top:4px'>{e(sign_convention)}</div></div>"
    )

"""What a report says, as plain blocks (text, tables, figures, verdicts), built once.

The renderers in :mod:`ordwidgets.report` turn the blocks into HTML and Markdown and do all
the escaping; nothing here writes markup.
"""
from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from . import _spec
from .core import SIGN_CONVENTION, compare_links
from .core.oddsscale import exp_beta_meaning
from .core.potest import OVERALL

__all__ = ["Para", "Table", "Picture", "Verdict", "Section", "report_sections", "CAUTIONS", "P_ALERT"]

#: p-values below this are flagged in the verdicts (common practice, no source).
P_ALERT = 0.05
#: Largest probability change (points on the 0..1 scale) we call small (common practice, no source).
SMALL_CHANGE = 0.05
#: AIC differences below this are "no real difference" (Burnham & Anderson 2002, sec. 2.6).
AIC_CLOSE = 2.0

CAUTIONS = (
    "The comparisons in this report are associations in the data, not causes: a what-if row says how the "
    "predicted shares differ between two kinds of case, not what would happen if a case were changed.",
    "Check the fit before acting on a prediction: read every check above, and treat a 'look' or 'fail' "
    "verdict as a reason to revise the model before using its numbers.",
    "Defer to domain experts, local rules and licensed practice wherever predictions could be acted on "
    "about people, property or safety; a statistical model does not replace them.",
)


@dataclass
class Para:
    text: str
    kind: str = "p"  # "p", "code", "note"


@dataclass
class Table:
    frame: pd.DataFrame
    caption: str = ""
    index_label: str = ""


@dataclass
class Picture:
    figure: object
    caption: str


@dataclass
class Verdict:
    check: str
    grade: str  # "pass", "look", "fail"
    text: str


@dataclass
class Section:
    key: str
    title: str
    blocks: list = field(default_factory=list)


# ---- model and data --------------------------------------------------------------------------------
def model_section(state):
    res = state.fit
    levels = " < ".join(str(v) for v in res.levels)
    blocks = [Para(f"An ordinal (cumulative link) model of {res.response} with the ordered levels {levels}, "
                   f"the {res.link.name} link ({res.link.latent} latent error)."),
              Para(f"{res.response} ~ {state.model_formula.split('~', 1)[1].strip()}", "code"),
              Para(SIGN_CONVENTION)]
    extra = [f"{k.replace('_', ' ')}: {', '.join(v)}" for k, v in
             (("per-threshold effects", state.nonparallel), ("scale effects", state.scale_by)) if v]
    if extra:
        blocks.append(Para("; ".join(extra) + "."))
    if state.edited:
        blocks.append(Para("The thresholds were edited in the dashboard; the threshold figure shows the edited "
                           "cut points, every table uses the fitted ones.", "note"))
    blocks.append(Picture(state.figure("thresholds"), "The latent distribution at the scenario, cut by the "
                          "thresholds; each region is the probability of one level."))
    return Section("model", "The model", blocks)


def _level_counts(res):
    tr = res.training
    counts = np.bincount(tr.y, minlength=len(res.levels))
    w = np.ones(len(tr.y)) if tr.weights is None else tr.weights
    weighted = np.bincount(tr.y, weights=w, minlength=len(res.levels))
    return pd.DataFrame({"rows": counts.astype(np.int64), "weighted units": weighted,
                         "share": weighted / weighted.sum()}, index=[str(v) for v in res.levels])


def dropped_rows(notes) -> int:
    """Rows the fit dropped, read from its notes ("dropped N rows with ...")."""
    return sum(int(m.group(1)) for n in notes for m in [re.search(r"dropped (\d+) rows", n)] if m)


def data_section(state):
    res = state.fit
    dropped = dropped_rows(res.notes)
    weights = state.options.get("weights")
    weights = weights if isinstance(weights, str) else "none" if weights is None else "given as an array"
    facts = pd.DataFrame({"value": [res.n_rows + dropped, res.n_rows, dropped, float(res.n_obs), weights]},
                         index=["rows in the data", "rows used", "rows dropped", "weighted units", "weights"])
    facts["value"] = facts["value"].astype(object)
    blocks = [Table(facts, "The rows"), Table(_level_counts(res), f"Levels of {res.response}", "level")]
    if res.training.is_sample:
        blocks.append(Para(f"Level counts are of {res.training.describe()}.", "note"))
    why = list(res.notes) or ["No row was dropped and no level was empty."]
    blocks += [Para(n, "note") for n in why]
    return Section("data", "The data", blocks)


# ---- estimates ----------------------------------------------------------------------------------
def estimates_section(state, level):
    res = state.fit
    pct = f"{level:.0%}"
    blocks = [Table(res.table(level), f"Estimates on the latent scale with {pct} Wald intervals "
                    "(wald_low, wald_high); thresholds first, then effects (positive = towards higher categories)",
                    "parameter")]
    if res.link.name == "logit":
        blocks.append(Table(res.odds_scale(level=level), f"Odds scale: exp(beta) with {pct} intervals. "
                            + exp_beta_meaning("logit"), "effect"))
    else:
        blocks.append(Para(f"No odds-scale table: {exp_beta_meaning(res.link.name)}", "note"))
    if res.training.is_sample:
        blocks.append(Table(res.term_tests(likelihood_ratio=False), "Wald tests by term (a factor's levels "
                            "jointly)", "term"))
    else:
        blocks.append(Table(res.term_tests(), "Tests by term (a factor's levels jointly): likelihood ratio "
                            "from a refit without the term, and Wald", "term"))
    blocks += contrast_blocks(res, level)
    return Section("estimates", "The estimates", blocks)


def _factor_terms(res):
    from .core.terms import term_columns

    return [t for t, cols in term_columns(res).items() if any(c.startswith(f"{t}[") for c in cols)]


def contrast_blocks(res, level):
    blocks = []
    for term in _factor_terms(res):
        try:
            con = res.contrasts(term, level=level)
        except ValueError as exc:
            blocks.append(Para(f"Levels of {term}: {exc}", "note"))
            continue
        blocks.append(Table(con.differences, f"Levels of {term} compared on the latent scale (positive = "
                            "the first level sits towards higher categories); p_holm adjusted for all pairs "
                            "(Holm 1979)", "pair"))
        blocks.append(Table(con.probabilities["estimate"], f"Predicted shares with {term} set to each level "
                            "for every row (others as observed), averaged", term))
    return blocks


# ---- checks -------------------------------------------------------------------------------------------
def convergence_verdict(res):
    if res.converged:
        text = (f"A verified maximum ({res.message}): the score is zero and the information is positive "
                "definite, so no effect runs away (no separation).")
        return Verdict("convergence and separation", "pass", text)
    return Verdict("convergence and separation", "fail", f"Not a verified maximum: {res.message}. "
                   "Estimates and intervals cannot be trusted.")


def link_verdict(state, table):
    ok = table[table["converged"].astype(bool) & np.isfinite(table["aic"])]
    if ok.empty or state.link not in ok.index:
        return Verdict("link comparison", "look", "The chosen link could not be compared with the others.")
    gap = float(ok.loc[state.link, "aic"] - ok["aic"].min())
    best = str(ok["aic"].idxmin())
    if gap < AIC_CLOSE:
        return Verdict("link comparison", "pass", f"No link fits clearly better than {state.link} "
                       f"(AIC within {AIC_CLOSE:g} of the best, {best}).")
    return Verdict("link comparison", "look", f"The {best} link fits better than {state.link} by {gap:.2f} "
                   "in AIC: consider refitting with it.")


def po_verdicts(res):
    try:
        table = res.proportional_odds_test()
    except ValueError as exc:
        return [Para(f"Proportional odds not tested: {exc}", "note")], None
    out = []
    for name, row in table.iterrows():
        p, change = row["p_value"], row["max_prob_change"]
        if not np.isfinite(p):
            out.append(Verdict(f"proportional odds: {name}", "look", f"not testable: {row['note']}"))
        elif p >= P_ALERT:
            out.append(Verdict(f"proportional odds: {name}", "pass", f"no evidence of non-parallel effects "
                               f"(p = {p:.3g})"))
        elif change < SMALL_CHANGE:
            out.append(Verdict(f"proportional odds: {name}", "look", f"significant (p = {p:.3g}) but freeing it "
                               f"moves probabilities by {100 * change:.1f} points at most: likely too small to matter"))
        else:
            out.append(Verdict(f"proportional odds: {name}", "fail", f"the effect differs across thresholds "
                               f"(p = {p:.3g}; probabilities move up to {100 * change:.1f} points): consider a "
                               "per-threshold effect"))
    return out, table


def residual_blocks(state):
    from .figures import panel_figure
    from .widgets import ResidualPanel

    panel = ResidualPanel(state)
    try:
        view, figure = panel.view, panel_figure(panel)
    finally:
        panel.close()
    names = {"distance": f"distance from the {view.reference.name} distribution", "trend": "trend against the fit",
             "spread": "spread against the fit"}
    rows, verdicts = [], []
    for key, label in names.items():
        stat, p = view.tests[key]
        rows.append([label, stat, p])
        grade = "pass" if not np.isfinite(p) or p >= P_ALERT else "look"
        verdicts.append(Verdict(f"residuals: {label}", grade, "consistent with a correct model" if grade == "pass"
                                else f"p = {p:.3g}: the residuals depart from what a correct model gives"))
    table = pd.DataFrame(rows, columns=["check", "statistic", "p_value"]).set_index("check")
    caption = (f"Surrogate residuals (Liu & Zhang 2018; {view.description}; seed {view.seed}, {view.draws} "
               "draw(s)): against the fitted linear predictor with a binned mean and band, and a QQ plot.")
    return [Table(table, "Residual tests", "check"), *verdicts, Picture(figure, caption)]


def _link_table(state):
    kwargs = state.fit_kwargs()  # the same random part and covariance under each link
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return compare_links(state.model_formula, state.data, **kwargs)


def checks_section(state):
    from .figures import links_figure

    res = state.fit
    blocks = [convergence_verdict(res)]
    blocks.append(Table(pd.DataFrame({"value": list(res.facts().values())}, index=list(res.facts()))
                        .astype(object), "Facts of the fit", "fact"))
    if not res.training.is_sample:
        table = _link_table(state)
        blocks += [link_verdict(state, table), Table(table.drop(columns=["message"]), "All links on the same "
                   "model (best first)", "link"), Picture(links_figure(state, table), "AIC of each link above "
                   "the best one (the chosen link marked).")]
        verdicts, po = po_verdicts(res)
        blocks += verdicts
        if po is not None:
            cols = ["statistic", "df", "p_value", "brant_p_value", "max_prob_change"]
            blocks.append(Table(po[cols], f"Proportional-odds tests (likelihood ratio per predictor; "
                                f"'{OVERALL}' frees all at once; Brant 1990)", "predictor"))
    blocks += residual_blocks(state)
    return Section("checks", "The checks", blocks)


# ---- what-ifs and cautions ------------------------------------------------------------------------------
def _describe_case(values, other):
    changed = [f"{k} = {v}" for k, v in values.items() if other.get(k) != v]
    return ", ".join(changed) or "the same as the baseline"


def whatif_section(state, whatifs, level):
    res = state.fit
    cases = [("current scenario", dict(state.scenario), dict(state.baseline))]
    for i, item in enumerate(whatifs or ()):
        scen = _spec.complete_scenario(item.get("scenario", {}), state.data, state.formula)
        base = _spec.complete_scenario(item.get("baseline", {}), state.data, state.formula)
        cases.append((str(item.get("name", f"comparison {i + 1}")), scen, base))
    blocks = [Para("Each table compares the predicted shares of a scenario with a baseline case (scenario "
                   f"minus baseline, with {level:.0%} delta-method intervals of the difference, at the fitted "
                   "thresholds).")]
    if state.grouping:  # the core's difference intervals are those of a typical group
        blocks.append(Para(f"Random intercepts per {', '.join(map(str, state.grouping))}: the tables are for a "
                           "typical group (group effect 0), the kind of probability the core gives difference "
                           f"intervals for; the figure shows {state.kind_text()}. Population-averaged and "
                           "group probabilities differ."))
    for name, scen, base in cases:
        frames = [_spec.match_dtypes(pd.DataFrame({k: [v] for k, v in case.items()}), state.data)
                  for case in (scen, base)]
        diff = res.probability_difference(*frames, level=level)
        blocks.append(Para(f"{name}: scenario {_describe_case(scen, base)}; baseline "
                           + ", ".join(f"{k} = {v}" for k, v in base.items()) + "."))
        blocks.append(Table(diff, f"What if: {name}", "level"))
    blocks.append(Picture(state.figure("explorer"), f"Predicted shares across {state.focus}, other predictors "
                          "at the scenario values (dashed line: the scenario)."))
    return Section("whatif", "What-if comparisons", blocks)


def cautions_section():
    return Section("cautions", "Cautions", [Para(text) for text in CAUTIONS])


def report_sections(state, *, whatifs=(), level=0.95):
    """Every section of the report for ``state``, in order."""
    return [model_section(state), data_section(state), estimates_section(state, level), checks_section(state),
            whatif_section(state, whatifs, level), cautions_section()]

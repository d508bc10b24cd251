"""LinkSelector: the link table equals direct fits; model controls refit through the state."""
import re
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

import ordwidgets as ow

from tests.ow_checks import *  # noqa: F403 - fixtures, data and reference checks


panel = pytest.fixture(name="panel")(lambda make_panel: make_panel(ow.LinkSelector))


def test_link_table_equals_direct_fits(panel, data):
    rows = {r["link"]: r for r in panel.state.link_table}
    assert set(rows) == set(ow.link_names())
    for name in ow.link_names():
        ref = ow.fit(FORMULA, data, link=name)  # reference: the core fitter, one link at a time
        assert rows[name]["loglik"] == pytest.approx(ref.loglik, abs=1e-7)
        assert f"{ref.aic:.8g}" in panel.table.value
    assert "\u25b6 logit" in panel.table.value


def test_dropdown_switches_link_and_marks_it(panel):
    panel.dropdown.value = "loglog"
    assert panel.state.fit.link.name == "loglog"
    assert "\u25b6 loglog" in panel.table.value and "\u25b6 logit" not in panel.table.value


def test_model_controls_drop_and_restore(panel, data):
    inc = panel._rows["dose"][0]
    inc.value = False
    ref = ow.fit("rating ~ age + C(group)", data)  # reference: direct fit without dose
    np.testing.assert_allclose(panel.state.fit.params, ref.params, atol=1e-8)
    assert panel._rows["dose"][1].disabled and "out of the model" in panel._rows["dose"][3].value
    rows = {r["link"]: r for r in panel.state.link_table}
    assert rows["logit"]["loglik"] == pytest.approx(ref.loglik, abs=1e-7)
    inc.value = True
    assert "dose" in panel.state.fit.coef_names


def test_non_parallel_box_refits(panel, data):
    box = panel._rows["dose"][1]
    assert not box.disabled
    box.value = True
    ref = ow.fit(FORMULA, data, nonparallel=["dose"])  # reference: direct fit with the same option
    np.testing.assert_allclose(panel.state.fit.params, ref.params, atol=1e-7)
    assert panel.state.nonparallel == ("dose",) and panel._rows["dose"][1].value


def test_po_figures_beside_each_predictor(panel):
    texts = {name: row[3].value for name, row in panel._rows.items()}
    table = panel.state.fit.proportional_odds_test()  # reference: the core's test table
    assert f"{table.loc['dose', 'statistic']:.4g}" in texts["dose"]
    # a factor is tested jointly (one row per formula term); nothing data-derived unescaped
    assert f"C(group): χ² = {table.loc['C(group)', 'statistic']:.4g}" in texts["group"]
    assert "<script>" not in texts["group"] and "<script>" not in panel.po_overall.value
    overall = table.loc["(overall)"]
    assert f"χ² = {overall['statistic']:.4g} ({overall['df']:.3g} df)" in panel.po_overall.value
    # Brant's p and the largest probability change (the large-n caution) sit beside the LR figures.
    assert f"Brant p = {table.loc['dose', 'brant_p_value']:.3g}" in texts["dose"]
    assert f"move {100 * table.loc['dose', 'max_prob_change']:.1f} points at most" in texts["dose"]


def test_po_figures_are_aligned_cells_with_a_verdict_word(panel):
    table = panel.state.fit.proportional_odds_test()  # reference: the core's test table
    html = panel._rows["dose"][3].value
    row = table.loc["dose"]
    # The verdict rule as documented: p >= 0.05 holds; else slight below a 2-point change, else drifts.
    word = "holds" if row["p_value"] >= 0.05 else "slight" if row["max_prob_change"] < 0.02 else "drifts"
    assert f">{word}</td>" in html and "<details" in html and "class='ow-po-figures'" in html
    assert f">{row['statistic']:.4g}</td>" in html and f">{row['p_value']:.3g}</td>" in html
    widths = [c[1] for c in ow.widgets.links._PO_COLUMNS]
    for text in [r[3].value for r in panel._rows.values()] + [panel.po_overall.value]:
        # every row uses the header's fixed column widths, so the figures line up
        assert [int(x) for x in re.findall(r"width:(\d+)px", text)[:len(widths)]] == widths


@pytest.mark.parametrize("p, change, word", [(0.2, 0.5, "holds"), (0.05, 0.5, "holds"), (0.01, 0.019, "slight"),
                                             (0.01, 0.02, "drifts"), (0.01, np.nan, "drifts"), (np.nan, 0.1, "-")])
def test_po_verdict_rule(p, change, word):
    assert ow.widgets.links.po_verdict({"p_value": p, "max_prob_change": change}) == word


def test_background_link_table_shows_busy_then_rows(data):
    st = ow.FitState(data=data, formula=FORMULA, executor=ThreadPoolExecutor(1))
    seen = []
    st.observe(lambda c: seen.append(c["new"]), names="busy")
    p = ow.LinkSelector(st)
    st.executor.shutdown(wait=True)
    assert any("comparing links" in b for b in seen) and st.busy == ""
    assert len(st.link_table) == 5 and "loglik" in p.table.value
    p.close()


def test_effects_table_states_the_sign_convention(panel):
    table = panel.state.fit.table()  # reference: the core's estimate table
    assert f"{table.loc['dose', 'estimate']:.4g}" in panel.effects.value
    assert "positive = towards higher categories" in panel.effects.value
    assert "&lt;script&gt;" in panel.effects.value and "<script>" not in panel.effects.value
    panel.state.link = "probit"
    assert f"{panel.state.fit.table().loc['dose', 'estimate']:.4g}" in panel.effects.value

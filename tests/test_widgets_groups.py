"""The group-effects panel and the random part in the other panels.

References, named beside each check: the core's ``group_effects`` and ``predict(groups=...)``
(themselves tested against scipy.integrate in tests/test_random_intercepts.py); the interval
ends against ``scipy.stats.norm.ppf``; the conditional probabilities against the closed form
with scipy.stats CDFs; the population density's areas against scipy.integrate.quad; direct
``ow.fit`` calls for what the model controls and the link dropdown must refit.
"""
import html

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

import ordwidgets as ow
from ordwidgets.demo import inspected_trees
from ordwidgets.widgets import groups as group_module
from ordwidgets.widgets.groups import GroupEffectsPanel, binned_groups, group_table

from tests.ow_grouped import FORMULA, POINTS, mixed, state, trees  # noqa: F401 - fixtures


@pytest.fixture
def panel(state):
    p = GroupEffectsPanel(state)
    yield p
    p.close()


def test_panel_numbers_are_the_cores_group_effects_sorted(panel, mixed):
    core = mixed.group_effects("inspector")
    order = np.argsort(core["estimate"].to_numpy(), kind="stable")
    np.testing.assert_array_equal(panel.points.y, core["estimate"].to_numpy()[order])
    np.testing.assert_array_equal(panel.points.x, np.arange(len(core)))
    z = stats.norm.ppf(0.975)  # scipy's normal quantile, not the panel's
    se = core["std_error"].to_numpy()[order]
    np.testing.assert_allclose(np.asarray(panel.bars.y)[:, 0], panel.points.y - z * se, rtol=0, atol=1e-12)
    np.testing.assert_allclose(np.asarray(panel.bars.y)[:, 1], panel.points.y + z * se, rtol=0, atol=1e-12)
    assert list(panel.table.index) == list(core.index[order])
    assert [panel.x_axis.tick_labels[float(k)] for k in range(len(core))] == [str(g) for g in core.index[order]]


def test_sd_with_its_profile_interval_is_shown(panel, mixed):
    vc = mixed.variance_components.loc["inspector"]
    text = panel.sd_table.value
    for value in (vc["sd"], vc["lower"], vc["upper"]):
        assert f"{value:.4g}" in text
    assert "profile-likelihood" in text
    assert vc["lower"] < vc["sd"] < vc["upper"]


def test_interval_level_follows_the_normal_quantile(mixed):
    table = group_table(mixed, "inspector", level=0.8)
    z = stats.norm.ppf(0.9)  # scipy.stats
    np.testing.assert_allclose(table["upper"] - table["estimate"], z * table["std_error"], atol=1e-12)


def test_click_picks_the_group_and_the_explorer_shows_its_conditional_probabilities(panel, state, mixed):
    explorer = ow.ProbabilityExplorer(state)
    i = 4
    panel.points.set_state({"selected": [i]})  # what the frontend sends on a click
    group = panel.table.index[i]
    assert state.group == group and group in panel.pick_text.value
    explorer.kind.value = "conditional"
    assert state.group_kind == "conditional"
    # a real row of that group: its predictors as the scenario, the focus grid through the core
    row = mixed.training.frame[mixed.training.frame["inspector"] == group].iloc[[0]]
    state.scenario = {"diameter": float(row["diameter"].iloc[0]), "years": int(row["years"].iloc[0])}
    positions, values, _, frame = explorer.grid_frame()
    core = mixed.predict(frame.assign(inspector=group), groups="conditional").to_numpy()
    np.testing.assert_allclose(np.asarray(explorer.lines.y).T, core, atol=1e-12)
    whatif = explorer.whatif_probabilities()
    np.testing.assert_allclose(whatif[1], mixed.predict(row, groups="conditional").to_numpy()[0], atol=1e-12)
    # closed form (scipy.stats): F(theta_j - x'beta - u_g) at the group's estimate
    u = mixed.group_effects("inspector").loc[group, "estimate"]
    eta = float((mixed.design(row) @ mixed.params[mixed.n_thresholds:])[0])
    cum = stats.logistic.cdf(mixed.thresholds.to_numpy() - eta - u)
    np.testing.assert_allclose(whatif[1], np.diff(np.concatenate([[0], cum, [1]])), atol=1e-12)
    assert "for inspector" in explorer.kind_note.value and "differ" in explorer.kind_note.value
    assert "No intervals" in explorer.whatif.value  # the core gives difference intervals for u = 0 only
    explorer.close()


def test_population_and_typical_views_equal_the_core(state, mixed):
    explorer = ow.ProbabilityExplorer(state)
    _, _, _, frame = explorer.grid_frame()
    for kind in ("population", "typical"):
        state.group_kind = kind
        np.testing.assert_allclose(np.asarray(explorer.lines.y).T, mixed.predict(frame, groups=kind).to_numpy(),
                                   atol=1e-12)
    assert "typical" in explorer.kind_note.value
    assert "95% interval" in explorer.whatif.value and "No intervals" not in explorer.whatif.value
    explorer.view.value = "curves"  # bands from the core's predict(groups="typical", level=0.95)
    band = mixed.predict(frame, groups="typical", level=0.95)
    np.testing.assert_allclose(np.asarray(explorer.ci.y)[0], band["lower"].to_numpy()[:, 0], atol=1e-12)
    explorer.close()


def test_threshold_panel_population_density_areas_are_the_population_probabilities(state, mixed):
    panel = ow.ThresholdPanel(state)
    eta = panel.scenario_eta()
    theta = np.concatenate([[-30.0], mixed.thresholds.to_numpy(), [30.0]])
    areas = [integrate.quad(lambda t: mixed.latent_density(t, eta), a, b, epsabs=1e-12)[0]  # scipy.integrate
             for a, b in zip(theta[:-1], theta[1:])]
    core = mixed.predict(state.scenario_frame(), groups="population").to_numpy()[0]
    np.testing.assert_allclose(areas, core, atol=1e-7)
    assert list(panel.labels.text) == [f"{p:.1%}" for p in core]
    assert "population-averaged" in panel.note.value and "marginal" in panel.readout.value
    panel.close()


def test_residual_panel_marks_the_picked_groups_rows(state, mixed):
    panel = ow.ResidualPanel(state)
    assert not panel.group_points.visible and "conditional on the estimated group effects" in panel.group_note.value
    group = mixed.group_effects("inspector").index[2]
    state.group = group
    rows = np.flatnonzero(mixed.training.frame["inspector"].to_numpy() == group)
    view = panel.view
    drawn = [k for k, r in zip(view.rows, view.units[view.rows]) if r in set(rows)]
    assert panel.group_points.visible and len(drawn) == len(rows)  # all rows drawn (240 < MAX_POINTS)
    np.testing.assert_array_equal(panel.group_points.y, view.residuals[drawn, 0])
    assert f"{len(rows):,} rows" in panel.group_note.value
    panel.close()


def test_dashboard_shows_the_panel_and_the_controls_toggle_the_random_intercept(mixed, trees):
    d = ow.dashboard(mixed, background=False)
    assert isinstance(d.group_panel, GroupEffectsPanel) and d.group_panel in d.panels
    box = d.link_selector._groups["inspector"]
    assert box.value
    box.value = False
    plain = ow.fit(FORMULA, trees)
    assert not d.state.grouping and d.state.loglik == pytest.approx(plain.loglik, abs=1e-8)
    assert "no random intercepts" in d.group_panel.note.value
    assert d.group_panel.body.layout.display == "none"
    box.value = True
    assert d.state.loglik == pytest.approx(mixed.loglik, abs=1e-8)
    assert d.group_panel.body.layout.display == ""
    d.close()


def test_link_dropdown_keeps_the_random_part(state, trees):
    selector = ow.LinkSelector(state)
    selector.dropdown.value = "cloglog"
    direct = ow.fit(FORMULA, trees, link="cloglog", random_intercepts=["inspector"], quadrature=POINTS)
    assert state.fit.groups == ("inspector",) and state.loglik == pytest.approx(direct.loglik, abs=1e-8)
    assert "random intercept per inspector" in selector.table.value
    assert "not available for random-intercept fits" in selector.po_overall.value
    selector.close()


def test_plain_state_with_candidates_offers_the_switch(trees, mixed):
    st = ow.FitState(data=trees, formula=FORMULA, group_candidates=("inspector",))
    d = ow.dashboard(st, background=False)
    assert d.group_panel is not None and "no random intercepts" in d.group_panel.note.value
    st.options = {"quadrature": POINTS}
    d.link_selector._groups["inspector"].value = True
    assert st.grouping == ("inspector",) and st.loglik == pytest.approx(mixed.loglik, abs=1e-8)
    assert len(d.group_panel.points.y) == 6
    d.close()
    assert ow.dashboard(ow.FitState.from_fit(ow.fit(FORMULA, trees)), background=False).group_panel is None


def test_hostile_group_names_are_escaped(trees):
    hostile = "<b>x</b>&"
    df = trees.assign(inspector=trees["inspector"].replace({"I01": hostile}))
    res = ow.fit(FORMULA, df, random_intercepts=["inspector"], quadrature=POINTS)
    st = ow.FitState.from_fit(res)
    panel = GroupEffectsPanel(st)
    residuals = ow.ResidualPanel(st)
    explorer = ow.ProbabilityExplorer(st)
    panel.picker.value = hostile  # picked by its label
    assert st.group == hostile
    st.group_kind = "conditional"
    for widget in (panel.pick_text, residuals.group_note, explorer.kind_note, explorer.whatif):
        assert hostile not in widget.value and html.escape(hostile) in widget.value
    for p in (panel, residuals, explorer):
        p.close()


def test_many_groups_are_binned_and_the_panel_says_so(state):
    panel = GroupEffectsPanel(state, max_groups=4)
    assert group_module.MAX_GROUPS >= 1000  # the default draws a few thousand groups
    table = panel.table
    assert len(panel.points.y) == 4 and "summarised in 4 bins" in panel.caption.value
    bins = binned_groups(table, 4)
    np.testing.assert_array_equal(panel.points.y, bins["estimate"].to_numpy())
    panel.points.set_state({"selected": [1]})
    assert state.group is None and "bin of groups" in panel.pick_text.value
    panel.picker.value = str(table.index[0])  # typed labels still pick
    assert state.group == table.index[0]
    panel.close()


def test_binned_groups_against_numpy():
    """Bins of consecutive ranks: median estimate, lowest lower and highest upper (numpy)."""
    rng = np.random.default_rng(0)
    est = np.sort(rng.normal(size=103))
    se = rng.uniform(0.1, 0.5, size=103)
    table = pd.DataFrame({"estimate": est, "lower": est - se, "upper": est + se, "rank": np.arange(103)},
                         index=[f"g{i}" for i in range(103)])
    bins = binned_groups(table, 10)
    edges = np.linspace(0, 103, 11).round().astype(int)
    assert bins["n_groups"].sum() == 103 and len(bins) == 10
    for k, (a, b) in enumerate(zip(edges[:-1], edges[1:])):
        assert bins["estimate"].iloc[k] == np.median(est[a:b])
        assert bins["lower"].iloc[k] == (est - se)[a:b].min() and bins["upper"].iloc[k] == (est + se)[a:b].max()


def test_report_says_which_probabilities_its_what_if_tables_hold(state, tmp_path, mixed):
    """The what-if tables use the core's difference of a typical group (u = 0): said in words."""
    from ordwidgets._report_content import whatif_section

    section = whatif_section(state, (), 0.95)
    text = " ".join(str(getattr(b, "text", "")) for b in section.blocks)
    assert "typical group (group effect 0)" in text and "population-averaged probabilities" in text
    table = next(b for b in section.blocks if type(b).__name__ == "Table")
    frame = state.scenario_frame()
    typical = mixed.predict(frame, groups="typical").to_numpy()[0]
    np.testing.assert_allclose(table.frame["scenario"].to_numpy()[:-1], typical, atol=1e-12)

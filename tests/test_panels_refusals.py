"""Panels show the core's numbers or say on screen why there are none; edits and refits that
cannot be honoured are refused clearly; background work ends cleanly."""
import dataclasses
import re
import threading
import warnings

import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow
from ordwidgets._jobs import THREAD_PREFIX
from ordwidgets.core import CrossingWarning

from tests.ow_checks import *  # noqa: F403 - fixtures, data and reference checks


def crossing_fit(n=500, seed=1):
    """The recipe of the report: a non-parallel fit whose cut points cross far out."""
    rng = np.random.default_rng(seed)
    x1 = rng.normal(size=n)
    y = np.digitize(0.8 * x1 + rng.logistic(size=n), [-1.5, -0.5, 0.6])
    frame = pd.DataFrame({"x1": x1, "y": y})
    return ow.fit("y ~ x1", frame, nonparallel=["x1"]), frame


def core_probabilities(st, frame):
    """Reference: the core's public ``predict`` on a result carrying the shown thresholds."""
    res = st.fit
    shown = dataclasses.replace(res, params=np.concatenate([st.theta, res.params[res.n_thresholds:]]))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CrossingWarning)
        return shown.predict(frame).to_numpy(float)


@pytest.fixture
def crossed():
    res, frame = crossing_fit()
    d = ow.dashboard(res, background=False)
    st = d.state
    st.scenario = {"x1": -1.0}
    st.set_threshold(1, st.theta[2] - 1e-6)  # allowed (order kept), but the cut points cross at x1 = -1
    yield d
    d.close()


def test_crossing_scenario_shows_the_core_refusal_everywhere(crossed):
    st, tp, ex = crossed.state, crossed.threshold_panel, crossed.explorer
    ref = core_probabilities(st, st.scenario_frame())
    assert np.isnan(ref).all()  # the core refuses this case (the reference has a nan row)
    # threshold panel: no regions or percentages, and the reason on screen naming the cuts
    assert not tp.regions.visible and not tp.labels.visible
    names = st.fit.threshold_names
    assert "No probabilities at this scenario" in tp.refusal.value
    assert f"{names[1]} lies above {names[2]}".replace(">", "&gt;") in tp.refusal.value
    # what-if table: '-' instead of numbers, and why
    cells = re.findall(r"<td[^>]*>([^<]*)</td>", ex.whatif.value)
    assert cells[1:4] == ["-", "-", "-"] and "no probabilities for the scenario" in ex.whatif.value
    np.testing.assert_array_equal(np.isnan(ex.whatif_probabilities()[1]), True)


def test_explorer_curves_equal_the_core_and_gaps_where_it_refuses(crossed):
    st, ex = crossed.state, crossed.explorer
    *_, frame = ex.grid_frame()
    ref = core_probabilities(st, frame)
    bad = np.isnan(ref).any(axis=1)
    assert 0 < bad.sum() < len(bad)  # some grid points refused, others not
    bands = np.asarray(ex.bands.y)
    np.testing.assert_allclose(bands[1:, ~bad], np.cumsum(ref[~bad], axis=1).T, rtol=0, atol=1e-14)
    assert np.isnan(bands[:, bad]).all()  # gaps, not clipped values
    np.testing.assert_allclose(np.asarray(ex.lines.y)[:, ~bad], ref[~bad].T, rtol=0, atol=1e-14)
    assert f"no probabilities for {bad.sum()} of {len(bad)} points" in ex.caution.value
    for view in ("curves", "shares", "lines", "stacked"):  # whichever names the toggle has
        if view in ex.view.options:
            ex.view.value = view
            assert np.isnan(np.asarray(ex.lines.y)[:, bad]).all()


def test_unedited_far_scenario_matches_predict(crossed):
    st, ex = crossed.state, crossed.explorer
    st.reset_thresholds()
    for x in (-9.0, -1.0, 0.0, 4.0):
        st.scenario = {"x1": x}
        with warnings.catch_warnings(record=True):
            warnings.simplefilter("always")
            ref = st.fit.predict(st.scenario_frame()).to_numpy(float)[0]  # the core's own answer
        np.testing.assert_array_equal(np.isnan(ex.whatif_probabilities()[1]), np.isnan(ref))
        np.testing.assert_allclose(ex.whatif_probabilities()[1], ref, rtol=0, atol=1e-14)
        assert ("outside the data" in ex.caution.value) == (not st.frame.x1.min() <= x <= st.frame.x1.max())


# ---- scenario edits (merge, documented in FitState.scenario) --------------------------------------
def test_partial_scenario_changes_only_what_it_names(data):
    st = ow.FitState(data=data, formula=FORMULA)
    st.scenario = {"age": 30.0, "dose": 1.5}
    st.scenario = {"dose": -0.5}
    assert st.scenario["age"] == 30.0 and st.scenario["dose"] == -0.5
    st.baseline = {"group": "plain"}
    assert st.baseline["age"] == pytest.approx(np.median(data.age))  # reference: numpy median
    st.reset()
    assert st.scenario == st.baseline == ow.FitState(data=data, formula=FORMULA).scenario


def test_out_of_range_scenario_gets_a_note(make_panel):
    ex = make_panel(ow.ProbabilityExplorer)
    st = ex.state
    st.scenario = {"age": 150.0}
    assert st.outside_data() == [("age", 150.0, float(st.frame.age.min()), float(st.frame.age.max()))]
    assert "scenario age = 150 is outside the data" in ex.caution.value
    st.scenario = {"age": 40.0}
    assert "outside" not in ex.caution.value


# ---- refits that cannot give a valid fit ---------------------------------------------------------
def test_refit_without_a_valid_fit_is_refused_and_the_old_fit_stays(data, monkeypatch):
    d = ow.dashboard(ow.FitState(data=data, formula=FORMULA), background=False)
    st, good = d.state, d.state.fit
    real = ow.state.core_fit

    def broken(*args, **kwargs):  # a fit whose thresholds came out non-finite
        res = real(*args, **kwargs)
        return dataclasses.replace(res, params=np.where(np.arange(res.n_params) == 1, np.nan, res.params))

    monkeypatch.setattr(ow.state, "core_fit", broken)
    st.formula = "rating ~ age + dose"
    assert st.fit is good and st.formula == FORMULA and "non-finite" in st.error
    assert "previous fit is kept" in st.error and "error" in st.changed
    assert "rating ~ age + dose + C(group)" in d.header.value  # the header keeps the current formula
    assert "refit refused" in d.link_selector.message.value
    bad = broken("rating ~ age", data)
    with pytest.raises(ow.OrdinalDataError, match="non-finite"):
        ow.FitState.from_fit(bad, data=data)
    d.close()


# ---- background work: supersession and lifecycle -----------------------------------------------------
def ours():
    return [t for t in threading.enumerate() if t.name.startswith(THREAD_PREFIX)]


def test_dashboard_close_leaves_no_thread_and_later_edits_work(data):
    before = len(ours())
    d = ow.dashboard(ow.fit(FORMULA, data), data=data, background=True)
    st = d.state
    st.set_threshold(0, st.theta[0] - 0.2)
    assert st.wait(30)
    assert len(ours()) > before
    d.close()
    assert len(ours()) == before and st.busy == "" and st.executor is None
    st.set_threshold(0, st.theta[0] - 0.1)  # the closed dashboard is not touched; the state still works
    assert st.busy == ""


def test_state_close_with_a_dashboard_attached(data):
    d = ow.dashboard(ow.fit(FORMULA, data), data=data, background=True)
    st = d.state
    st.close()
    assert st.busy == "" and st.executor is None
    st.set_threshold(1, st.theta[1] + 0.1)  # runs inline now: no "cannot schedule new futures"
    st.link = "probit"
    assert st.busy == "" and len(st.link_table) == 5
    check_all_panels(d)
    d.close()


def test_close_during_background_work_leaves_nothing_stale(data, monkeypatch):
    """Jobs dropped by close() answer anyway: residuals inline, the tables with a message."""
    gate = threading.Event()

    def in_worker():
        return threading.current_thread().name.startswith(THREAD_PREFIX)

    real_rows = ow._spec.link_rows
    monkeypatch.setattr(ow._spec, "link_rows", lambda **kw: (gate.wait(3) if in_worker() else True) and real_rows(**kw))
    d = ow.dashboard(ow.fit(FORMULA, data), data=data, background=True)
    st, rp = d.state, d.residual_panel
    real_tools = rp.tools
    rp.tools = lambda *a, **k: (gate.wait(3) if in_worker() else True) and real_tools(*a, **k)
    st.set_threshold(1, st.theta[1] + 0.3)  # the residual refresh now waits in a thread
    st.close()  # drops it (and the link comparison, still waiting)
    check_residual_panel(rp)  # redrawn inline at the edited thresholds, not left stale
    assert "stopped by close()" in d.link_selector.table.value and st.busy == ""
    st.link = "probit"  # runs the comparison again, inline
    assert len(st.link_table) == 5 and "stopped" not in d.link_selector.table.value
    d.close()


def check_all_panels(d):
    check_threshold_panel(d.threshold_panel)
    check_explorer(d.explorer)
    check_residual_panel(d.residual_panel)


def test_link_change_during_the_comparison_ends_with_the_full_table(data, monkeypatch):
    from concurrent.futures import ThreadPoolExecutor

    gate, real = threading.Event(), ow._spec.link_rows
    monkeypatch.setattr(ow._spec, "link_rows", lambda **kw: gate.wait(30) and real(**kw))
    st = ow.FitState(data=data, formula=FORMULA, executor=ThreadPoolExecutor(2))
    p = ow.LinkSelector(st)
    assert st.link_table == [] and "comparing links" in st.busy
    st.link = "cloglog"  # while the comparison still runs
    gate.set()
    assert st.wait(60)
    # reference: compare_links of the core for the same spec
    table = ow.compare_links(FORMULA, data)
    assert [r["link"] for r in st.link_table] == list(map(str, table.index))
    np.testing.assert_allclose([r["loglik"] for r in st.link_table], table["loglik"].to_numpy(), rtol=1e-10)
    assert "\u25b6 cloglog" in p.table.value and st.busy == ""
    p.close()
    st.close()


def test_superseded_proportional_odds_jobs_do_not_pile_up(data, monkeypatch):
    from concurrent.futures import ThreadPoolExecutor

    from ordwidgets.widgets import links

    gate, started, real = threading.Event(), [], links.po_test_rows

    def slow(res):
        started.append(res)
        gate.wait(30)
        return real(res)

    monkeypatch.setattr(links, "po_test_rows", slow)
    st = ow.FitState(data=data, formula=FORMULA, executor=ThreadPoolExecutor(1))
    p = ow.LinkSelector(st)
    for link in ("probit", "cloglog", "loglog", "cauchit", "logit"):
        st.link = link  # each refit asks for new tests; the queued ones are cancelled
    gate.set()
    assert st.wait(60)
    # the first job (already running) and the last one ran; the three in between never started
    assert len(started) <= 3 and started[-1] is st.fit
    table = st.fit.proportional_odds_test()  # reference: the core's tests of the current fit
    assert f"{table.loc['dose', 'statistic']:.4g}" in p._rows["dose"][3].value  # the figures shown beside dose
    assert st.busy == ""
    p.close()
    st.close()


# ---- repeated index, weights ----------------------------------------------------------------------
def test_repeated_index_works_on_positions(data):
    twice = pd.concat([data.iloc[:300], data.iloc[:300]])  # every index label appears twice
    assert not twice.index.is_unique
    d = ow.dashboard(ow.FitState(data=twice, formula=FORMULA), background=False)
    st, rp = d.state, d.residual_panel
    assert len(st.frame) == st.fit.n_rows == 600
    pd.testing.assert_frame_equal(st.frame.reset_index(drop=True), twice.reset_index(drop=True))
    st.selection = (5, 305)
    cells = re.findall(r"<td[^>]*>([^<]*)</td>", rp.table.value)
    width = len(cells) // 2
    assert cells[width + 1] == str(twice.iloc[305]["rating"]).replace("<", "&lt;").replace(">", "&gt;")
    assert cells[width + 2] == f"{twice.iloc[305]['age']}"[: len(cells[width + 2])]
    rp.x_choice.value = "age"  # used to fail with a broadcasting error
    np.testing.assert_array_equal(rp.view.x, twice.age.to_numpy(float))
    check_residual_panel(rp)
    d.close()


def aggregated(data):
    """One row per (rating, group, rounded dose) cell with its count, and the expanded rows."""
    cells = (data.assign(dose=data.dose.round(0)).groupby(["rating", "group", "dose"], observed=True)
             .size().rename("count").reset_index())
    expanded = cells.loc[cells.index.repeat(cells["count"])].reset_index(drop=True)
    return cells, expanded


def test_weighted_defaults_and_header(data):
    cells, expanded = aggregated(data)
    st = ow.FitState(data=cells, formula="rating ~ dose + C(group)", options={"weights": "count"})
    # reference: plain numpy / pandas summaries of the data expanded to one row per unit
    assert st.scenario["dose"] == pytest.approx(np.median(expanded.dose))
    assert st.scenario["group"] == expanded.group.value_counts().index[0]
    d = ow.dashboard(st, background=False)
    assert f"{len(cells):,} rows" in d.header.value and f"{len(expanded):,} weighted units" in d.header.value
    d.close()


@pytest.mark.parametrize("values, weights", [([1, 2, 3, 4], [1, 1, 1, 1]), ([3, 1, 2], [2, 5, 1]),
                                             ([0.5, 9.0, 2.0, 7.0], [4, 0, 1, 3])])
def test_weighted_median_is_the_median_of_the_expanded_values(values, weights):
    from ordwidgets._spec import weighted_median

    expected = np.median(np.repeat(values, weights))  # reference: numpy on the expanded values
    assert weighted_median(np.array(values, float), np.array(weights, float)) == expected

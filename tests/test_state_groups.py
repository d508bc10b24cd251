"""The state carries random-intercept fits and sandwich covariances through every refit.

References, named beside each check: the marginal likelihood integrated per group by
scipy.integrate.quad (tests/reference_grouped.py, written from Hedeker & Gibbons 1994, none of
ordwidgets' code); the model's probabilities written with scipy.stats CDFs (closed form for a
known group effect, scipy.integrate.quad over the normal group effect for the population
average); direct ``ow.fit`` calls with the same arguments for what a refit must reproduce;
the invariance of sampling-weight standard errors to rescaling the weights (Binder 1983).
"""
import numpy as np
import pandas as pd
import pytest
import traitlets as tl
from scipy import integrate, stats

import ordwidgets as ow
from ordwidgets.demo import inspected_trees
from tests import reference_grouped as ref

from tests.ow_grouped import FORMULA, POINTS, mixed, state, trees  # noqa: F401 - fixtures


def _reference_loglik(res, thresholds=None):
    """Marginal loglik by scipy.integrate.quad per group (tests/reference_grouped.py)."""
    theta = res.thresholds.to_numpy() if thresholds is None else np.asarray(thresholds, float)
    params = np.concatenate([theta, res.params[res.n_thresholds:], res.sds])
    return ref.loglik(params, res.design(), res.training.y, res.group_codes[0], res.n_thresholds, res.link.name)


def test_from_fit_carries_the_random_part(state, mixed):
    assert state.random_intercepts == ("inspector",) and state.options == {"quadrature": POINTS}
    assert state.group_candidates == ("inspector",) and state.group_column == "inspector"
    assert state.fit is mixed and state.loglik == mixed.loglik


def test_link_switch_keeps_the_random_part(state, trees):
    state.link = "probit"
    direct = ow.fit(FORMULA, trees, link="probit", random_intercepts=["inspector"], quadrature=POINTS)
    assert type(state.fit).__name__ == "RandomInterceptFit" and state.fit.groups == ("inspector",)
    assert state.loglik == pytest.approx(direct.loglik, abs=1e-8)  # the same fit, called directly
    np.testing.assert_allclose(state.fit.sds, direct.sds, atol=1e-6)


def test_dropping_a_predictor_keeps_the_random_part(state, trees):
    state.dropped = ("years",)
    direct = ow.fit("grade ~ diameter", trees, random_intercepts=["inspector"], quadrature=POINTS)
    assert state.fit.groups == ("inspector",)
    assert state.loglik == pytest.approx(direct.loglik, abs=1e-8)


def test_switching_the_random_intercept_off_gives_the_plain_fit_and_back(state, trees, mixed):
    state.random_intercepts = ()
    plain = ow.fit(FORMULA, trees)
    assert not state.grouping and state.error == ""
    assert state.loglik == pytest.approx(plain.loglik, abs=1e-8)
    assert state.group_kind == "population" and state.group is None
    state.random_intercepts = ("inspector",)  # quadrature kept in the options for this
    assert state.loglik == pytest.approx(mixed.loglik, abs=1e-8)


def test_threshold_edit_is_a_recompute_of_the_marginal_loglik():
    """Edited thresholds: the marginal loglik, against scipy.integrate.quad per group."""
    df = inspected_trees(n=160, n_inspectors=5, seed=8)
    res = ow.fit(FORMULA, df, random_intercepts=["inspector"], quadrature=20)
    st = ow.FitState.from_fit(res)
    assert st.loglik == pytest.approx(_reference_loglik(res), abs=1e-4)
    st.set_threshold(1, st.thresholds[1] + 0.3)
    assert st.fit is res  # no refit
    expected = _reference_loglik(res, st.theta)  # scipy.integrate.quad, effects and SD at the fit
    assert st.loglik == pytest.approx(expected, abs=1e-4)
    assert st.lr_distance == pytest.approx(2 * (res.loglik - st.loglik), abs=1e-10)
    assert st.lr_distance > 0


def test_picked_group_probabilities_equal_the_model_with_that_groups_effect(state, mixed, trees):
    row = mixed.training.frame.iloc[[7]]
    group = row["inspector"].iloc[0]
    state.scenario = {"diameter": float(row["diameter"].iloc[0]), "years": int(row["years"].iloc[0])}
    state.group = group
    state.group_kind = "conditional"
    shown = state.probabilities(state.scenario_frame())[0]
    np.testing.assert_allclose(shown, mixed.predict(row, groups="conditional").to_numpy()[0], atol=1e-12)
    # closed form with scipy.stats: P(Y <= j) = F(theta_j - x'beta - u_g), u_g the group's estimate
    u = mixed.group_effects("inspector").loc[group, "estimate"]
    eta = float((mixed.design(row) @ mixed.params[mixed.n_thresholds:])[0])
    cum = stats.logistic.cdf(mixed.thresholds.to_numpy() - eta - u)
    np.testing.assert_allclose(shown, np.diff(np.concatenate([[0], cum, [1]])), atol=1e-12)


def test_population_probabilities_are_averaged_over_the_group_effects(state, mixed):
    state.group_kind = "population"
    frame = state.scenario_frame()
    shown = state.probabilities(frame)[0]
    eta, sd = float(state.eta_of(frame)[0]), float(mixed.sds[0])
    theta = np.concatenate([[-np.inf], mixed.thresholds.to_numpy(), [np.inf]])

    def averaged(j):  # scipy.integrate.quad over u ~ N(0, sd^2)
        f = lambda u: (stats.logistic.cdf(theta[j + 1] - eta - u) - stats.logistic.cdf(theta[j] - eta - u)) \
            * stats.norm.pdf(u, scale=sd)
        return integrate.quad(f, -12 * sd, 12 * sd, epsabs=1e-12)[0]

    np.testing.assert_allclose(shown, [averaged(j) for j in range(len(shown))], atol=1e-8)
    typical = state.fit.predict(frame, groups="typical").to_numpy()[0]
    assert np.abs(shown - typical).max() > 1e-3  # they differ: the captions must say which is shown


def test_group_traits_refuse_what_the_fit_does_not_have(state, trees):
    with pytest.raises(tl.TraitError, match="not a group of 'inspector'"):
        state.group = "nobody"
    with pytest.raises(tl.TraitError, match="needs a picked group"):
        state.group_kind = "conditional"
    with pytest.raises(tl.TraitError, match="grouping columns must be columns of the data"):
        state.random_intercepts = ("no such column",)
    plain = ow.FitState.from_fit(ow.fit(FORMULA, trees))
    with pytest.raises(tl.TraitError, match="needs a fit with random intercepts"):
        plain.group_kind = "typical"


def test_a_refit_keeps_the_picked_group_when_the_new_fit_has_it(state):
    state.group, state.group_kind = "I03", "conditional"
    state.link = "cloglog"
    assert state.group == "I03" and state.group_kind == "conditional"
    u = state.fit.group_effects("inspector").loc["I03", "estimate"]
    assert state.group_offset == u


def test_incompatible_options_are_refused_by_name_and_the_fit_kept(state, mixed):
    state.nonparallel = ("diameter",)
    assert state.fit is mixed and "nonparallel" in state.error


def test_cluster_robust_fit_is_carried_through_a_link_switch(trees):
    res = ow.fit(FORMULA, trees, cluster="inspector")
    st = ow.FitState.from_fit(res)
    assert st.options == {"cluster": "inspector"}
    st.link = "probit"
    direct = ow.fit(FORMULA, trees, link="probit", cluster="inspector")
    assert st.fit.covariance_type == "cluster"
    np.testing.assert_allclose(st.fit.cov, direct.cov, rtol=1e-8)  # not the model-based covariance
    assert not np.allclose(st.fit.cov, ow.fit(FORMULA, trees, link="probit").cov, rtol=1e-3)


def test_sampling_weight_errors_survive_refits_and_ignore_the_weight_scale(trees):
    """Binder (1983): sampling-weight standard errors do not change when all weights are scaled."""
    df = trees.assign(w=np.random.default_rng(1).uniform(0.5, 2.0, len(trees)))
    df = df.assign(w10=10 * df["w"])
    states = [ow.FitState.from_fit(ow.fit(FORMULA, df, weights=col, weight_kind="sampling")) for col in ("w", "w10")]
    for st in states:
        st.link = "loglog"
        assert st.fit.covariance_type == "sampling"
    np.testing.assert_allclose(states[0].fit.cov, states[1].fit.cov, rtol=1e-6)


def test_clusters_given_as_an_array_are_refused_by_name(trees):
    res = ow.fit(FORMULA, trees, cluster=trees["inspector"].to_numpy())
    with pytest.raises(ow.OrdinalDataError, match="cluster='<column>'"):
        ow.FitState.from_fit(res)


def test_link_table_fits_the_same_random_part_under_each_link(state, trees):
    state.request_link_table()
    rows = {r["link"]: r for r in state.link_table}
    for link in ("logit", "cauchit"):
        direct = ow.fit(FORMULA, trees, link=link, random_intercepts=["inspector"], quadrature=POINTS)
        assert rows[link]["loglik"] == pytest.approx(direct.loglik, abs=1e-6)
    # and the core's own ranking from the fit agrees
    table = ow.compare_links(state.fit)
    np.testing.assert_allclose(table.loc[list(rows), "loglik"], [rows[k]["loglik"] for k in rows], atol=1e-8)


def test_state_files_refuse_what_they_cannot_hold_yet(state, tmp_path):
    """A file without the random part would load back as the plain model: refused by name."""
    with pytest.raises(ow.StateFileError, match="random_intercepts=\\['inspector'\\]"):
        state.save(tmp_path / "s.json")


def test_term_tests_of_a_random_intercept_fit_give_wald_only(mixed):
    """The report's tests by term: no LR against a plain refit; Wald = b' V^-1 b (closed form)."""
    table = mixed.term_tests()
    assert table["lr_statistic"].isna().all() and table["note"].str.contains("Wald only").all()
    j = list(mixed.names).index("diameter")
    b, v = mixed.params[j], mixed.cov[j, j]
    assert table.loc["diameter", "wald_statistic"] == pytest.approx(b * b / v, rel=1e-10)

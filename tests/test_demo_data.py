"""The demo generator against its own documented truth.

The truth is the model written in ``ordwidgets.demo``'s docstring.  Checks use outside facts:
maximum likelihood is consistent with asymptotically normal errors (McCullagh 1980), each
cumulative split of a cumulative logit model is a binary logit (McCullagh 1980, sec. 2;
the basis of Brant 1990), and sample frequencies converge to probabilities (multinomial
sampling, standard error sqrt(p(1-p)/n)).
"""
import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LogisticRegression

import ordwidgets as ow
from ordwidgets.demo import GRADES, street_tree_truth, street_trees, true_parameters, true_probabilities

N_LARGE = 20_000


@pytest.fixture(scope="module")
def plain():
    """A large sample with both planted departures switched off: the fitted model is right."""
    return street_trees(N_LARGE, seed=11, nonparallel=False, heteroscedastic=False)


def _max_wald_z(res, truth):
    """Largest |estimate - truth| / SE over every parameter (each must have a true value)."""
    true = true_parameters(res, truth)
    assert true.notna().all(), true[true.isna()]
    return float(np.max(np.abs((res.params - true.to_numpy()) / res.std_errors.to_numpy())))


def test_columns_levels_and_ranges():
    trees = street_trees(500, seed=3)
    assert list(trees.columns) == ["tree_id", "diameter", "years", "pit_area", "species", "arterial", "grade"]
    assert trees["grade"].cat.ordered and tuple(trees["grade"].cat.categories) == GRADES
    assert trees["years"].between(1, 40).all() and trees["pit_area"].between(0.5, 9).all()
    assert set(trees["arterial"]) == {0, 1} and trees["tree_id"].is_unique
    # every grade occurs: a demo with an empty grade would not show four bands
    assert (trees["grade"].value_counts() > 20).all()


def test_same_seed_same_frame_other_seed_differs():
    pd.testing.assert_frame_equal(street_trees(300, seed=5), street_trees(300, seed=5))
    assert not street_trees(300, seed=5)["grade"].equals(street_trees(300, seed=6)["grade"])


@pytest.mark.parametrize("n", [0, -3, 2.5, "10"])
def test_bad_size_is_refused(n):
    with pytest.raises(ValueError, match="positive integer"):
        street_trees(n)


def test_fit_recovers_true_parallel_effects(plain):
    # MLE consistency and asymptotic normality (McCullagh 1980): each estimate lies within
    # 4 standard errors of its true value (two-sided chance of failure per parameter ~6e-5).
    truth = street_tree_truth(nonparallel=False, heteroscedastic=False)
    res = ow.fit(truth.formula, plain)
    assert res.converged
    assert _max_wald_z(res, truth) < 4


def test_grade_frequencies_match_true_probabilities(plain):
    # Multinomial sampling: the share of each grade within the arterial groups converges to
    # the mean true probability, with standard error sqrt(p(1 - p) / n).
    truth = street_tree_truth(nonparallel=False, heteroscedastic=False)
    probs = true_probabilities(plain, truth)
    np.testing.assert_allclose(probs.sum(axis=1), 1.0, atol=1e-12)
    for _, rows in plain.groupby("arterial"):
        p = probs.loc[rows.index].mean().to_numpy()
        share = rows["grade"].value_counts(normalize=True).reindex(GRADES).to_numpy()
        se = np.sqrt(p * (1 - p) / len(rows))
        assert np.all(np.abs(share - p) < 4 * se), (share, p)


def _binary_logit_coef(X, y):
    """Unpenalised logistic regression (scikit-learn) with Fisher-information standard errors."""
    model = LogisticRegression(C=np.inf, max_iter=2000, tol=1e-10).fit(X, y)
    Z = np.column_stack([np.ones(len(X)), X])
    p = model.predict_proba(X)[:, 1]
    cov = np.linalg.inv(Z.T @ (Z * (p * (1 - p))[:, None]))
    return model.coef_[0], np.sqrt(np.diag(cov))[1:]


def test_planted_nonparallel_arterial_effect_is_in_the_data():
    # Each cumulative split "grade > j" of a cumulative logit model is a binary logit with
    # slope delta_j for arterial (McCullagh 1980; Brant 1990 builds his test on it).  Fitted
    # here by scikit-learn, independent of our fitter.
    trees = street_trees(N_LARGE, seed=12, heteroscedastic=False)
    truth = street_tree_truth(heteroscedastic=False)
    X = pd.get_dummies(trees[["diameter", "years", "pit_area", "species", "arterial"]],
                       columns=["species"], drop_first=True, dtype=float).to_numpy(float)
    codes = trees["grade"].cat.codes.to_numpy()
    slopes = []
    for j, delta in enumerate(truth.nonparallel["arterial"]):
        coef, se = _binary_logit_coef(X, (codes > j).astype(int))
        assert abs(coef[3] - delta) < 4 * se[3], (j, coef[3], delta)
        slopes.append(coef[3])
    assert slopes[0] < slopes[2] - 0.5  # the effect really shrinks across the thresholds


def test_heteroscedastic_spread_grows_with_age():
    # Location-scale model (McCullagh 1980): with spread exp(zeta * years) the effects of a
    # fit on old trees alone are shrunk by about exp(zeta * (mean age difference)) relative to
    # young trees; a plain fit cannot absorb it.
    trees = street_trees(2 * N_LARGE, seed=13, nonparallel=False)
    formula = street_tree_truth().formula
    young = ow.fit(formula, trees[trees["years"] <= 10])
    old = ow.fit(formula, trees[trees["years"] >= 31])
    ratio = old.coefficients["pit_area"] / young.coefficients["pit_area"]
    zeta = street_tree_truth().scale["years"]
    expected = np.exp(-zeta * (trees.loc[trees["years"] >= 31, "years"].mean()
                               - trees.loc[trees["years"] <= 10, "years"].mean()))
    se = np.hypot(old.std_errors["pit_area"] / young.coefficients["pit_area"],
                  ratio * young.std_errors["pit_area"] / young.coefficients["pit_area"])
    assert abs(ratio - expected) < 4 * se, (ratio, expected, se)
    assert ratio < 1


def test_full_model_recovers_every_planted_effect():
    # The generator's own model family, non-parallel (Peterson & Harrell 1990) and location-
    # scale (McCullagh 1980), fitted by maximum likelihood: every true value within 4 SE.
    truth = street_tree_truth()
    trees = street_trees(N_LARGE, seed=14)
    res = ow.fit(truth.formula, trees, nonparallel=["arterial"], scale_by=["years"])
    assert res.converged
    assert _max_wald_z(res, truth) < 4


def test_inspected_trees_truth_and_recovery():
    """Repeated ratings demo: documented true inspector SD, recovered by the random-intercept
    fit within its profile interval; cluster-robust threshold SEs exceed the plain ones."""
    from ordwidgets.demo import INSPECTOR_SD, inspected_trees, true_inspector_effects

    rated = inspected_trees(1500, seed=2026)
    assert rated["inspector"].nunique() == 30 and set(rated["inspector"]) <= set(true_inspector_effects().index)
    again = inspected_trees(1500, seed=2026)
    assert rated.equals(again)
    formula = "grade ~ diameter + years + pit_area + species + arterial"
    mixed = ow.fit(formula, rated, random_intercepts=["inspector"])
    vc = mixed.variance_components.loc["inspector"]
    assert vc["lower"] <= INSPECTOR_SD <= vc["upper"]
    eff = mixed.group_effects("inspector")
    assert np.corrcoef(eff["estimate"], true_inspector_effects().loc[eff.index])[0, 1] > 0.9
    plain, robust = ow.fit(formula, rated), ow.fit(formula, rated, cluster="inspector")
    assert np.all(robust.std_errors.iloc[:3] > plain.std_errors.iloc[:3])

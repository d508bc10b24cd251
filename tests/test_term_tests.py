"""Tests by formula term: likelihood ratio against separate nested fits, Wald from the covariance."""
import warnings

import numpy as np
import pytest
from scipy import stats

import ordwidgets as ow
from ordwidgets.core.terms import term_columns
from ordwidgets.demo import street_trees

FORMULA = "grade ~ diameter + years + species + arterial"


@pytest.fixture(scope="module")
def trees():
    return street_trees(500, seed=11)


@pytest.fixture(scope="module")
def parallel_fit(trees):
    return ow.fit(FORMULA, trees)


def test_term_columns_group_a_factors_dummies(parallel_fit):
    cols = term_columns(parallel_fit)
    assert list(cols) == ["diameter", "years", "species", "arterial"]
    assert cols["species"] == [c for c in parallel_fit.coef_names if c.startswith("species[")]
    assert len(cols["species"]) == 3  # four species, one reference level
    assert sum(map(len, cols.values())) == len(parallel_fit.coef_names)


def test_likelihood_ratio_equals_separate_nested_fits(trees, parallel_fit):
    # Wilks (1938): 2 (loglik_full - loglik_without_term) on chi-squared with df = the term's
    # parameter count; the smaller model is an ordinary separate fit of the shorter formula.
    table = parallel_fit.term_tests()
    terms = ["diameter", "years", "species", "arterial"]
    assert list(table.index) == terms
    for term in terms:
        rest = " + ".join(t for t in terms if t != term)
        smaller = ow.fit(f"grade ~ {rest}", trees)
        stat = 2 * (parallel_fit.loglik - smaller.loglik)
        df = parallel_fit.n_params - smaller.n_params
        assert table.loc[term, "df"] == df
        assert table.loc[term, "lr_statistic"] == pytest.approx(stat, rel=1e-6, abs=1e-8)
        assert table.loc[term, "lr_p_value"] == pytest.approx(stats.chi2.sf(stat, df), rel=1e-5)
    assert table.loc["species", "df"] == 3


def test_wald_equals_the_covariance_block_written_out(parallel_fit):
    table = parallel_fit.term_tests(likelihood_ratio=False)
    cov = parallel_fit.covariance
    for term, cols in term_columns(parallel_fit).items():
        b = parallel_fit.coefficients[cols].to_numpy()
        V = cov.loc[cols, cols].to_numpy()
        stat = float(b @ np.linalg.inv(V) @ b)
        assert table.loc[term, "wald_statistic"] == pytest.approx(stat, rel=1e-9)
        assert table.loc[term, "wald_p_value"] == pytest.approx(stats.chi2.sf(stat, len(cols)), rel=1e-7)
    assert np.isnan(table["lr_statistic"]).all()
    # A one-column term: the Wald statistic is the square of the table's z (closed form).
    z = parallel_fit.table().loc["diameter", "z"]
    assert table.loc["diameter", "wald_statistic"] == pytest.approx(z**2, rel=1e-9)


def test_wald_and_lr_agree_for_a_well_determined_fit(parallel_fit):
    # Asymptotic equivalence of the two tests (Wald 1943; Wilks 1938): with 500 rows and
    # moderate effects the statistics are within a few percent (common practice, no source).
    table = parallel_fit.term_tests()
    ratio = table["wald_statistic"] / table["lr_statistic"]
    assert np.all(np.abs(ratio - 1) < 0.1)


def test_terms_of_an_extended_fit_hold_all_their_parameters(trees):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        big = ow.fit(FORMULA, trees, nonparallel=["arterial"], scale_by=["diameter"])
        smaller = ow.fit("grade ~ diameter + years + species", trees, scale_by=["diameter"])
    table = big.term_tests()
    assert table.loc["arterial", "df"] == 3  # one effect per threshold
    assert table.loc["diameter", "df"] == 2  # location and scale
    stat = 2 * (big.loglik - smaller.loglik)
    assert table.loc["arterial", "lr_statistic"] == pytest.approx(stat, rel=1e-6)
    names = [n for n in big.names if n.startswith("arterial @")]
    b, V = big.params[[big.names.index(n) for n in names]], big.covariance.loc[names, names].to_numpy()
    assert table.loc["arterial", "wald_statistic"] == pytest.approx(float(b @ np.linalg.inv(V) @ b), rel=1e-9)

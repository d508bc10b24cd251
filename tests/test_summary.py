"""The printed and HTML summary: data line, fit line, solver sentence, weighting, escaping."""
import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow
from ordwidgets.core.summary import POORLY_CONDITIONED, WELL_CONDITIONED, curvature_words

from . import reference as R


@pytest.fixture(scope="module")
def frame():
    X, y = R.simulate(300, [0.8, -0.4], [-0.6, 0.7], seed=5)
    return pd.DataFrame({"grade": y, "x": X[:, 0], "v": X[:, 1]})


@pytest.fixture(scope="module")
def aggregated(frame):
    # The same rows as an aggregated table: one row per (grade, sign of x) with a count column.
    return (frame.assign(side=np.where(frame["x"] > 0, "right", "left"))
            .groupby(["grade", "side"]).size().rename("count").reset_index())


def test_data_line_counts_each_level_like_pandas(frame):
    # Reference: pandas' own value_counts of the response column.
    res = ow.fit("grade ~ x + v", frame)
    counts = frame["grade"].value_counts().sort_index()
    expected = " · ".join(f"{lv} {n}" for lv, n in counts.items())
    assert res.facts()["data"] == f"300 rows, unweighted; grade: {expected}"


def test_weighted_data_line_names_the_column_and_counts_units(aggregated):
    # Reference: the weighted counts are the group sums of the count column (pandas groupby).
    res = ow.fit("grade ~ side", aggregated, weights="count")
    units = aggregated.groupby("grade")["count"].sum()
    line = res.facts()["data"]
    assert line.startswith(f"{len(aggregated)} rows, weighted by column 'count' ({units.sum():,} units)")
    assert line.endswith(" · ".join(f"{lv} {n}" for lv, n in units.items()))
    assert res.weighting == "weighted by column 'count'"
    assert "weighted by column 'count'" in str(res)
    assert "weighted by column &#x27;count&#x27;" in res._repr_html_()
    array = ow.fit("grade ~ side", aggregated, weights=aggregated["count"].to_numpy())
    assert array.weighting == "weighted by a weights array"


def test_fit_line_and_solver_sentence(frame):
    # AIC / BIC definitions (Akaike 1974; Schwarz 1978) with the parameter count k.
    res = ow.fit("grade ~ x + v", frame)
    k = len(res.params)
    facts = res.facts()
    assert f"AIC {-2 * res.loglik + 2 * k:.4f}" in facts["fit"]
    assert f"BIC {-2 * res.loglik + np.log(300) * k:.4f}" in facts["fit"]
    assert f"log-likelihood {res.loglik:.4f}" in facts["fit"]
    assert facts["solver"].startswith(f"converged in {res.iterations} Newton steps; largest score ")
    assert "curvature well conditioned" in facts["solver"]
    text = str(res)
    assert text.index("\n  data ") < text.index("\n  fit ") < text.index("\n  solver ") < text.index("estimate")
    assert "Sign convention" in text and "Sign convention" in res._repr_html_()
    assert "95% Wald interval" in text and "95% Wald interval" in res._repr_html_()


def test_solver_sentence_of_a_failed_fit(frame):
    with pytest.warns(ow.ConvergenceWarning):
        res = ow.fit("grade ~ x + v", frame, max_iter=1)
    assert res.facts()["solver"].startswith("NOT converged: no convergence after 1 Newton steps")
    assert "#b3261e" in res._repr_html_()  # the sentence is shown in the warning colour


def test_curvature_words_at_the_bounds():
    assert curvature_words(1.0) == curvature_words(WELL_CONDITIONED) == "curvature well conditioned"
    assert curvature_words(WELL_CONDITIONED * 10) == "curvature poorly conditioned"
    assert curvature_words(POORLY_CONDITIONED * 10) == "curvature nearly singular"
    assert curvature_words(float("inf")) == "curvature not negative definite"


def test_level_names_are_escaped_in_html(frame):
    order = ["<b>low</b>", "mid", "high"]
    lab = pd.Categorical(np.array(order)[frame["grade"]], categories=order, ordered=True)
    html = ow.fit("grade ~ x", frame.assign(grade=lab))._repr_html_()
    assert "<b>low</b>" not in html and "&lt;b&gt;low&lt;/b&gt;" in html


def test_ordered_categorical_and_conflicting_levels_are_refused(frame):
    order = ["low", "mid", "high"]
    lab = pd.Categorical(np.array(order)[frame["grade"]], categories=order, ordered=True)
    data = frame.assign(grade=lab)
    with pytest.raises(ow.OrdinalDataError, match="'grade' is an ordered categorical.*levels="):
        ow.fit("grade ~ x", data, levels=["high", "mid", "low"])
    with pytest.raises(ow.OrdinalDataError, match="'grade'"):
        ow.fit("grade ~ x", data, levels=["low", "mid"])
    same = ow.fit("grade ~ x", data, levels=order)  # agreeing orders are fine
    np.testing.assert_allclose(same.params, ow.fit("grade ~ x", data).params)

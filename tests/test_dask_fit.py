"""Fits on Dask frames: equal to the in-memory fit, same refusals, sample kept for display.

References: the in-memory ``ow.fit`` on the same rows (equality to 1e-8), the closed-form
thresholds-only solution ``theta_j = F^{-1}(cumulative proportion)`` with scipy.stats'
quantile functions, and the generic scipy.optimize fit of :mod:`tests.reference`.
"""
import subprocess
import sys
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import ordwidgets as ow
from ordwidgets.core.dask_fit import PartitionRunner
from ordwidgets.core.fitting import fit_dask

from . import reference as R
from .ow_sim import FORMULA, simulate

dask = pytest.importorskip("dask")
dd = pytest.importorskip("dask.dataframe")
distributed = pytest.importorskip("distributed")

LINKS = ["logit", "probit", "cloglog", "loglog", "cauchit"]
TOL = dict(rtol=1e-8, atol=1e-8)


@pytest.fixture(scope="module")
def frame():
    # sorted by group so that some partitions lack a level of the factor
    return simulate(n=600, seed=3, hostile=False).sort_values("group", ignore_index=True)


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as c:
        yield c


@pytest.fixture(params=["threads", "distributed"])
def scheduler(request, cluster):
    if request.param == "threads":
        with dask.config.set(scheduler="threads"):
            yield None
    else:
        with distributed.Client(cluster) as client:
            yield client


def _same_fit(rd, r):
    assert rd.levels == r.levels and rd.names == r.names
    np.testing.assert_allclose(rd.loglik, r.loglik, **TOL)
    np.testing.assert_allclose(rd.params, r.params, **TOL)
    np.testing.assert_allclose(rd.std_errors, r.std_errors, **TOL)
    assert rd.n_rows == r.n_rows and rd.n_obs == r.n_obs and rd.converged


@pytest.mark.parametrize("link", LINKS)
def test_dask_fit_equals_in_memory_fit(frame, scheduler, link):
    ddf = dd.from_pandas(frame, npartitions=4)
    assert PartitionRunner(ddf).client is scheduler  # the tasks run where the test says
    _same_fit(ow.fit(FORMULA, ddf, link=link), ow.fit(FORMULA, frame, link=link))


@pytest.mark.parametrize("link", ["logit", "cauchit"])
def test_cached_design_gives_the_same_fit(frame, scheduler, link):
    rd = fit_dask(FORMULA, dd.from_pandas(frame, npartitions=4), link=link, cache=True)
    assert rd.options["cache"]
    _same_fit(rd, ow.fit(FORMULA, frame, link=link))


def test_categorical_predictor_keeps_its_category_order(frame):
    df = frame.assign(group=pd.Categorical(frame.group, categories=["c", "a", "b"]))
    _same_fit(ow.fit(FORMULA, dd.from_pandas(df, npartitions=3)), ow.fit(FORMULA, df))


def test_weighted_dask_fit_equals_in_memory_fit(frame):
    df = frame.assign(w=np.arange(len(frame)) % 3)
    ddf = dd.from_pandas(df, npartitions=3)
    _same_fit(ow.fit(FORMULA, ddf, weights="w"), ow.fit(FORMULA, df, weights="w"))
    with pytest.raises(ow.OrdinalDataError, match="must name a column"):
        ow.fit(FORMULA, ddf, weights=df["w"].to_numpy())


@pytest.mark.parametrize("link", ["probit", "cloglog"])
def test_thresholds_only_fit_matches_closed_form(frame, link):
    # closed-form MLE without predictors: theta_j = F^{-1}(share of rows in categories <= j)
    share = np.cumsum(frame["rating"].value_counts(sort=False).to_numpy())[:-1] / len(frame)
    rd = ow.fit("rating ~ 1", dd.from_pandas(frame, npartitions=3), link=link)
    np.testing.assert_allclose(rd.thresholds.to_numpy(), R.DISTS[link].ppf(share), rtol=1e-9, atol=1e-9)


def test_dask_fit_matches_generic_scipy_optimizer(frame):
    X = np.column_stack([frame.age, frame.dose, frame.group == "b", frame.group == "c"]).astype(float)
    params, ll = R.fit(X[::3], frame["rating"].cat.codes.to_numpy()[::3], "logit")
    rd = ow.fit(FORMULA, dd.from_pandas(frame.iloc[::3], npartitions=4), link="logit")
    np.testing.assert_allclose(rd.loglik, ll, rtol=1e-9)
    np.testing.assert_allclose(rd.params, params, rtol=1e-5, atol=1e-6)


def _warned(fn):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = fn()
    return res, [str(w.message) for w in caught if issubclass(w.category, ow.DataWarning)]


def test_missing_and_infinite_rows_reported_like_in_memory(frame):
    df = frame.astype({"rating": object}).copy()
    df.loc[[2, 300], "dose"] = np.nan
    df.loc[5, "age"] = np.inf
    df.loc[7, "rating"] = None
    df.loc[9, "group"] = None
    levels = list(frame["rating"].cat.categories)
    r, mem = _warned(lambda: ow.fit(FORMULA, df, levels=levels))
    rd, dsk = _warned(lambda: ow.fit(FORMULA, dd.from_pandas(df, npartitions=4), levels=levels))
    assert dsk == mem and "dose: 2" in dsk[0] and "dropped 4 rows with missing" in dsk[0]
    assert dsk[1] == "dropped 1 rows with infinite values (age: 1)"
    _same_fit(rd, r)


def test_collinear_and_constant_predictors_refused(frame):
    ddf = dd.from_pandas(frame.assign(twice=2 * frame.dose, one=1.0), npartitions=3)
    with pytest.raises(ow.CollinearityError, match="collinear: dose, twice"):
        ow.fit("rating ~ dose + twice", ddf)
    with pytest.raises(ow.CollinearityError, match="constant .*: one"):
        ow.fit("rating ~ dose + one", ddf)


def test_transform_giving_non_finite_values_refused_by_term(frame):
    # In memory those rows are dropped with a warning; on partitions the counts are fixed before
    # the design exists, so the fit must refuse by name instead of reporting a wrong reason.
    shifted = frame.assign(gap=frame.dose - frame.dose.median())  # about half the rows <= 0
    ddf = dd.from_pandas(shifted, npartitions=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # numpy's own 'invalid value in log'
        with pytest.raises(ow.OrdinalDataError, match=r"'np.log\(gap\)' \([\d,]+ rows in one partition\)"):
            ow.fit("rating ~ np.log(gap)", ddf)
        with pytest.warns(ow.DataWarning):
            ow.fit("rating ~ np.log(gap)", shifted)  # the in-memory rule it points to


def test_empty_response_level_dropped_like_in_memory(frame):
    labels = ["none", *frame["rating"].cat.categories]
    df = frame.assign(rating=pd.Categorical(frame["rating"].astype(str), categories=labels, ordered=True))
    r, mem = _warned(lambda: ow.fit(FORMULA, df))
    rd, dsk = _warned(lambda: ow.fit(FORMULA, dd.from_pandas(df, npartitions=3)))
    assert dsk == mem and "dropped: none" in dsk[0]
    _same_fit(rd, r)


def test_unordered_response_and_unknown_levels_refused(frame):
    ddf = dd.from_pandas(frame.astype({"rating": str}), npartitions=2)
    with pytest.raises(ow.OrdinalDataError, match="unordered values"):
        ow.fit(FORMULA, ddf)
    with pytest.raises(ow.OrdinalDataError, match="not in levels=: 'top'"):
        ow.fit(FORMULA, ddf, levels=["low", "mid", "high"])


def _logistic_loglik(rd, rows, thresholds):
    """Log-likelihood of ``rows`` written out with scipy.stats.logistic (no ordwidgets code)."""
    theta = np.r_[-np.inf, np.asarray(thresholds, float), np.inf]
    b = rd.coefficients
    eta = b["age"] * rows.age + b["dose"] * rows.dose + b["C(group)[T.b]"] * (rows.group == "b") \
        + b["C(group)[T.c]"] * (rows.group == "c")
    y = rows["rating"].cat.codes.to_numpy()
    F = stats.logistic.cdf
    return np.log(F(theta[y + 1] - eta) - F(theta[y] - eta)).sum()


def test_sample_is_reproducible_and_drives_row_level_methods(frame):
    ddf = dd.from_pandas(frame, npartitions=4)
    rd = fit_dask(FORMULA, ddf, sample_rows=100, seed=7)
    again = fit_dask(FORMULA, ddf, sample_rows=100, seed=7)
    other = fit_dask(FORMULA, ddf, sample_rows=100, seed=8)
    tr = rd.training
    assert (len(tr.y), tr.sampled_from, rd.n_rows) == (100, 600, 600)
    assert list(tr.frame.columns) == ["rating", "age", "dose", "group"]  # only the columns used are read
    assert rd.facts()["rows shown"] == "a sample of 100 of 600 rows"
    assert tr.index.equals(again.training.index) and not tr.index.equals(other.training.index)
    rows = frame.loc[tr.index]  # the sample holds real rows with their own response
    np.testing.assert_array_equal(tr.y, rows["rating"].cat.codes.to_numpy())
    np.testing.assert_allclose(rd.loglik_at(), _logistic_loglik(rd, rows, rd.thresholds), rtol=1e-10)
    assert rd.predict().shape == (100, 4)
    assert fit_dask(FORMULA, ddf, keep_data=False).training is None


def test_interrupted_fit_leaves_nothing_behind(frame, cluster):
    ddf = dd.from_pandas(frame, npartitions=3)
    lines = []

    def stop(iteration, *_):
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        fit_dask(FORMULA, ddf, callback=stop, progress=lines.append)
    assert lines[-2].split(" · ")[1].startswith("Newton step 1: log-likelihood")
    assert "interrupted" in lines[-1]
    with distributed.Client(cluster) as client:
        runner = PartitionRunner(ddf)

        def gather(futures):
            raise KeyboardInterrupt

        runner.client = type("Stopping", (), {"compute": client.compute, "cancel": client.cancel,
                                              "gather": staticmethod(gather)})()
        with pytest.raises(KeyboardInterrupt):
            runner.map(lambda part, plan: len(part), None)
        distributed.wait([], timeout=1)
        assert not client.futures  # the submitted tasks were cancelled and released
        _same_fit(ow.fit(FORMULA, ddf), ow.fit(FORMULA, frame))  # a new fit works afterwards


def test_progress_line_reports_steps_and_final_loglik(frame, capsys):
    lines = []
    rd = fit_dask(FORMULA, dd.from_pandas(frame, npartitions=2), progress=lines.append)
    steps = [s for s in lines if s.split(" · ")[1].startswith("Newton step")]
    assert len(steps) == rd.iterations and "largest score" in steps[-1]
    assert f"log-likelihood {rd.loglik:.8g}" in lines[-1]
    fit_dask("rating ~ age", dd.from_pandas(frame, npartitions=2), progress=True)
    assert "done: converged" in capsys.readouterr().err


@pytest.mark.parametrize("link", LINKS)
def test_dask_extended_fit_equals_in_memory_fit(frame, scheduler, link):
    # nonparallel= and scale_by= on partitions: the same engine and design, sums added up
    ddf = dd.from_pandas(frame, npartitions=4)
    options = dict(link=link, nonparallel=["dose"], scale_by=["age"])
    rd, r = ow.fit(FORMULA, ddf, **options), ow.fit(FORMULA, frame, **options)
    _same_fit(rd, r)
    assert rd.layout == r.layout and rd.options["nonparallel"] == ["dose"]
    assert rd.options["crossing"] == r.options["crossing"]


def test_dask_scale_only_variable_and_cache(frame, scheduler):
    # a scale variable that is not in the formula joins the design as on a pandas frame
    df = frame.assign(spread=np.linspace(-1.0, 1.0, len(frame)))
    options = dict(nonparallel=["C(group)"], scale_by=["spread"])
    r = ow.fit(FORMULA, df, **options)
    for cache in (False, True):
        rd = fit_dask(FORMULA, dd.from_pandas(df, npartitions=3), cache=cache, **options)
        _same_fit(rd, r)
        assert rd.names == r.names and "scale: spread" in rd.names


def test_dask_extended_progress_line(frame):
    lines = []
    rd = fit_dask(FORMULA, dd.from_pandas(frame, npartitions=2), progress=lines.append, nonparallel=["dose"])
    steps = [s for s in lines if s.split(" · ")[1].startswith("Newton step")]
    assert len(steps) == rd.iterations and "largest score" in steps[-1]
    assert lines[-1].split(" · ")[1] == f"done: {rd.message}, log-likelihood {rd.loglik:.8g}"


def test_core_imports_without_dask():
    code = (
        "import sys; sys.modules['dask'] = None\n"
        "import ordwidgets as ow\n"
        "Fake = type('DataFrame', (), {'to_delayed': None, '__module__': 'dask.dataframe'})\n"
        "try:\n    ow.fit('y ~ x', Fake())\n"
        "except ImportError as e:\n    print(e)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr
    assert "pip install 'ordwidgets[dask]'" in out.stdout


def test_dashboard_shows_a_dask_fit_through_its_sample(frame):
    from ordwidgets.widgets import dashboard

    rd = fit_dask(FORMULA, dd.from_pandas(frame, npartitions=3), sample_rows=200)
    board = dashboard(rd, background=False)
    try:
        assert "panels show a sample of 200 of 600 rows" in board.header.value
        assert "showing 200 of 200 points" in board.residual_panel.count.value
        rows = frame.loc[rd.training.index]
        shown = rd.thresholds.to_numpy() + [0.0, 0.3, 0.0]
        board.state.thresholds = tuple(shown)
        # the likelihood-ratio distance compares the edit with the fit on the same (sample) rows
        expected = 2 * (_logistic_loglik(rd, rows, rd.thresholds) - _logistic_loglik(rd, rows, shown))
        np.testing.assert_allclose(board.state.lr_distance, expected, rtol=1e-9)
        assert "on a sample of 200 of 600 rows" in board.threshold_panel.readout.value
        board.state.request_link_table()
        assert "links compared on a sample of 200 of 600 rows" in board.link_selector.table.value
        board.state.link = "probit"  # a refit from the panels would see only the sample
        assert "refit refused" in board.state.error and "Dask frame" in board.state.error
        assert board.state.fit is rd and board.state.link == "logit"
    finally:
        board.close()


def test_progress_in_a_notebook_updates_one_display(frame, monkeypatch):
    import IPython.display

    from ordwidgets.core import progress

    shown = []

    class Handle:
        def update(self, obj, raw):
            shown.append(obj["text/plain"])

    monkeypatch.setattr(progress, "_in_kernel", lambda: True)
    monkeypatch.setattr(IPython.display, "display", lambda *a, **k: Handle())
    rd = ow.fit("rating ~ age", dd.from_pandas(frame, npartitions=2))  # progress="auto"
    assert len(shown) == rd.iterations + 3 and "done: converged" in shown[-1]


def test_dask_fit_names_a_separated_level_like_the_in_memory_fit(frame):
    # one row of a new level, in the highest category: its effect has no finite maximum
    # (the likelihood rises monotonically along it; see tests/test_engine.py)
    df = frame.copy()
    df["group"] = df["group"].astype(object)
    df.loc[0, "group"], df.loc[0, "rating"] = "z", df["rating"].max()
    with pytest.warns(ow.SeparationWarning, match=r"\[T\.z\]"):
        r = ow.fit(FORMULA, df)
    with pytest.warns(ow.SeparationWarning, match=r"\[T\.z\]"):
        rd = ow.fit(FORMULA, dd.from_pandas(df, npartitions=3))
    assert not r.converged and not rd.converged

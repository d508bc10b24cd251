"""The report file: every section, escaped labels, no outside resource, deterministic bytes."""
import base64
import datetime as dt
import re
import warnings

import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow
from ordwidgets.core.tables import format_number, table_html, table_latex, table_markdown
from ordwidgets.demo import street_trees
from ordwidgets.report import SECTION_KEYS, TIMESTAMP_PREFIX

HOSTILE = "<img src=x onerror=alert(1)>"
FORMULA = "grade ~ diameter + years + species + arterial"


def hostile_trees(n=300):
    frame = street_trees(n, seed=8)
    frame["species"] = frame["species"].cat.rename_categories({"plane": HOSTILE})
    frame.loc[frame.index[:3], "years"] = np.nan  # three rows dropped, and the report says why
    return frame


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = ow.fit(FORMULA, hostile_trees())
    whatif = {"name": f"large {HOSTILE}", "scenario": {"diameter": 70.0, "species": HOSTILE}}
    path = ow.write_report(res, folder / "a.html", markdown=folder / "a.md", whatifs=[whatif], seed=7)
    return res, path, (folder / "a.md"), folder


def test_every_section_is_there(written):
    res, path, md, _ = written
    text = path.read_text(encoding="utf-8")
    for key in SECTION_KEYS:
        assert f"<section id='{key}'>" in text
    for needle in ["The model", "The data", "The estimates", "The checks", "What-if comparisons", "Cautions",
                   "convergence and separation", "link comparison", "proportional odds", "residuals:",
                   "Odds scale", "Tests by term", "p_holm", "associations in the data, not causes",
                   "Check the fit before acting", "licensed practice", "dropped 3 rows with missing values"]:
        assert needle in text, needle
    assert text.count("<img alt=") == 4  # thresholds, links, residuals, explorer
    md_text = md.read_text(encoding="utf-8")
    for title in ["## The model", "## The data", "## The estimates", "## The checks", "## What-if comparisons",
                  "## Cautions"]:
        assert title in md_text
    assert md_text.count("](data:image/png;base64,") == 4


def test_the_numbers_are_the_fits(written):
    res, path, _, _ = written
    text = path.read_text(encoding="utf-8")
    terms = res.term_tests()
    assert format_number(terms.loc["species", "lr_statistic"]) in text
    assert format_number(float(res.odds_scale().loc["diameter", "odds_ratio"])) in text
    assert format_number(res.n_rows + 3) in text and format_number(res.n_rows) in text


def test_no_unescaped_hostile_label(written):
    _, path, md, _ = written
    for text in (path.read_text(encoding="utf-8"), md.read_text(encoding="utf-8")):
        assert HOSTILE not in text
        assert "<img src=x" not in text and "onerror=alert" not in text.replace("&lt;img src=x onerror=alert", "")
        assert "&lt;img src=x onerror=alert(1)&gt;" in text
    # The label does reach the figures (as text drawn by matplotlib, inside a data URI).
    svgs = [base64.b64decode(m).decode() for m in re.findall(r"data:image/svg\+xml;base64,([A-Za-z0-9+/=]+)",
                                                            path.read_text(encoding="utf-8"))]
    assert all("<script" not in s and "onerror" not in s for s in svgs)


def test_self_contained(written):
    _, path, _, _ = written
    text = path.read_text(encoding="utf-8")
    assert "<script" not in text and "<link" not in text
    assert not re.search(r"(src|href)=['\"]?(https?:|//)", text)
    assert "url(" not in text


def test_byte_identical_apart_from_the_timestamp(written):
    res, first, md, folder = written
    whatif = {"name": f"large {HOSTILE}", "scenario": {"diameter": 70.0, "species": HOSTILE}}
    again = ow.write_report(res, folder / "b.html", markdown=folder / "b.md", whatifs=[whatif], seed=7)
    a, b = first.read_text(encoding="utf-8").splitlines(), again.read_text(encoding="utf-8").splitlines()
    assert len(a) == len(b)
    differ = [(x, y) for x, y in zip(a, b) if x != y]
    assert all(TIMESTAMP_PREFIX in x and TIMESTAMP_PREFIX in y for x, y in differ)
    assert len(differ) <= 1
    when = dt.datetime(2026, 1, 2, 3, 4, 5, tzinfo=dt.timezone.utc)
    p1 = ow.write_report(res, folder / "c.html", seed=7, written=when)
    p2 = ow.write_report(res, folder / "d.html", seed=7, written=when)
    assert p1.read_bytes() == p2.read_bytes()
    assert "Written 2026-01-02 03:04:05 UTC" in p1.read_text(encoding="utf-8")
    # A different residual seed changes the residual figure (the seed is really used).
    p3 = ow.write_report(res, folder / "e.html", seed=8, written=when)
    assert p3.read_bytes() != p1.read_bytes()


def test_a_state_keeps_its_scenario_and_a_probit_fit_says_what_exp_beta_is_not(tmp_path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        state = ow.FitState(data=street_trees(250, seed=3), formula="grade ~ diameter + species", link="probit")
    state.scenario = {"diameter": 80.0}
    text = ow.write_report(state, tmp_path / "r.html").read_text(encoding="utf-8")
    assert "no odds ratio" in text and "Odds scale" not in text
    assert "scenario diameter = 80.0" in text
    diff = state.fit.probability_difference(state.scenario_frame("scenario"), state.scenario_frame("baseline"))
    assert format_number(float(diff.loc["expected score (1..J)", "difference"])) in text
    with pytest.raises(ValueError, match="seed"):
        ow.write_report(state, tmp_path / "s.html", seed=state.residual_seed + 1)


def test_tables_in_three_formats_keep_the_html_view_numbers():
    frame = pd.DataFrame({"estimate": [1.234567, 2e-6], "n": [np.int64(12345), np.int64(2)]},
                         index=[HOSTILE, "a_b|c"])
    md, tex, html = table_markdown(frame), table_latex(frame), table_html(frame)
    for text in (md, tex, html):
        assert "1.2346" in text and "2e-06" in text and "12,345" in text
        assert HOSTILE not in text
    assert "&lt;img src=x onerror=alert(1)&gt;" in md and "&#124;" in md
    assert r"\textless{}img" in tex and r"a\_b|c" in tex
    assert "&lt;img src=x onerror=alert(1)&gt;" in html


def test_a_weighted_fit_reports_its_weighted_units(tmp_path):
    frame = street_trees(200, seed=4).assign(w=lambda f: 1.0 + (f["diameter"] > 30))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = ow.fit("grade ~ diameter", frame, weights="w")
    text = ow.write_report(res, tmp_path / "w.html").read_text(encoding="utf-8")
    assert format_number(float(frame["w"].sum())) in text and ">w</td>" in text  # a table cell holding the weights column
    counts = frame.groupby("grade", observed=False)["w"].sum()
    for level, total in counts.items():
        assert format_number(float(total)) in text, level

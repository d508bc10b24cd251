"""One HTML table builder, every cell escaped: a hostile column, level or group name shows as
text in each HTML view (the fit, the random-intercept fit, report tables, panel tables and
the proportional-odds figures).  Escaping follows the HTML standard's character references
(what html.escape produces); no numbers are checked here."""
import html
import warnings

import numpy as np
import pandas as pd
import pytest

import ordwidgets as ow
from ordwidgets.core.html_table import Section, html_table
from ordwidgets.core.tables import table_html
from ordwidgets.widgets._common import html_table as panel_table
from ordwidgets.widgets.links import po_figures_html, po_test_rows

HOSTILE = "<b>x</b>&"
LEVEL = "z<i>oak</i>&"  # after "elm": not the reference level, so it has a row
GROUP = "<u>crew</u>&"


@pytest.fixture(scope="module")
def trees():
    rng = np.random.default_rng(11)
    n = 400
    girth = rng.normal(size=n)
    species = rng.choice([LEVEL, "elm"], n)
    crew = rng.integers(0, 8, n)
    latent = 0.8 * girth + 0.5 * (species == LEVEL) + rng.normal(0, 0.5, 8)[crew] + rng.logistic(size=n)
    grade = np.digitize(latent, [-1.0, 0.3, 1.5])
    return pd.DataFrame({HOSTILE: girth, "species": species, GROUP: [f"c{v}" for v in crew],
                         "grade": pd.Categorical.from_codes(grade, ["poor", "fair", "good", "<s>fine</s>"],
                                                            ordered=True)})


def _shown_escaped(text, *names):
    for name in names:
        assert name not in text, name
        assert html.escape(name, quote=True) in text, name


def test_the_fit_view_escapes_column_and_level_names(trees):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = ow.fit(f"grade ~ `{HOSTILE}` + species", trees)
    _shown_escaped(res._repr_html_(), HOSTILE, LEVEL, "<s>fine</s>")
    _shown_escaped(table_html(res.table()), HOSTILE, LEVEL)
    rows = po_test_rows(res)
    _shown_escaped(po_figures_html(list(rows.items())), HOSTILE)


def test_the_random_intercept_view_escapes_the_grouping_name(trees):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = ow.fit(f"grade ~ `{HOSTILE}`", trees, random_intercepts=GROUP)
    text = res._repr_html_()
    _shown_escaped(text, HOSTILE, GROUP)
    assert "ow-variance-components" in text


def test_the_builder_escapes_every_part():
    text = html_table([HOSTILE, "b"], [Section(GROUP), [LEVEL, "1"]], css="a'b", titles=["t<1>", None],
                      above=[("<q>", 2)])
    _shown_escaped(text, HOSTILE, GROUP, LEVEL, "t<1>", "<q>")
    assert "class='a&#x27;b'" in text and text.count("<tr>") == 4
    _shown_escaped(panel_table([HOSTILE], [[LEVEL]], css="ow-x"), HOSTILE, LEVEL)

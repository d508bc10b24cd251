"""What the screen says about itself: weighting in every caption, one caution, titles, colours."""
import numpy as np
import pytest

import ordwidgets as ow
from ordwidgets.widgets._common import category_colours, esc, heading_html, nice_ticks, text_colours
from ordwidgets.widgets.dashboard import CAUTION

from tests.ow_checks import *  # noqa: F403 - fixtures, data and reference checks


def all_html(widget):
    """Every HTML widget value below ``widget`` (box children, depth first)."""
    out = [widget.value] if hasattr(widget, "value") and isinstance(widget.value, str) else []
    for child in getattr(widget, "children", ()):
        out += all_html(child)
    return out


@pytest.fixture
def weighted_dash(data):
    # The simulated rows aggregated into a table of counts: one row per (rating, group, rounded dose).
    table = (data.assign(dose=data["dose"].round(), age=data["age"].round(-1)).groupby(["rating", "group", "dose", "age"])
             .size().rename("count").reset_index())
    d = ow.dashboard(ow.fit(FORMULA, table, weights="count"), data=table)
    yield d
    d.close()


def test_caution_shown_once_in_a_visible_box(data):
    d = ow.dashboard(ow.fit(FORMULA, data), data=data)
    texts = all_html(d)
    assert sum(t.count(esc(CAUTION)) for t in texts) == 1
    assert "class='ow-caution'" in d.header.value
    d.close()


def test_every_panel_heading_and_table_caption_names_the_weights_column(weighted_dash):
    d = weighted_dash
    want = "weighted by column &#x27;count&#x27;"
    for panel in d.panels:
        assert want in panel.heading.value, type(panel).__name__
    assert want in d.header.value
    assert f"every link fitted {want}" in d.link_selector.table.value
    assert want in d.link_selector.effects.value


def test_unweighted_fit_says_so(make_panel):
    panel = make_panel(ow.LinkSelector)
    assert "fit unweighted" in panel.heading.value and "every link fitted unweighted" in panel.table.value


def test_explorer_title_is_in_outcome_words_and_follows_the_focus(make_panel):
    panel = make_panel(ow.ProbabilityExplorer)
    panel.state.focus = "dose"
    assert "<b>Chances of each rating along dose</b>" in panel.heading.value
    panel.state.focus = "age"
    assert "<b>Chances of each rating along age</b>" in panel.heading.value


def test_heading_escapes_data_derived_names(data):
    res = ow.fit(FORMULA, data)
    html = heading_html("Chances of each <b>x</b> along <script>", res)
    assert "<script>" not in html and "&lt;script&gt;" in html and "<b>x</b>" not in html


def test_probability_labels_take_the_hues_of_their_regions(make_panel):
    panel = make_panel(ow.ThresholdPanel)
    k = len(panel.state.fit.levels)
    assert list(panel.regions.fill_colors) == category_colours(k)
    # the labels: the region colours darkened only where too pale to read (contrast tested in
    # test_widgets_threshold against the W3C formula)
    assert list(panel.labels.colors) == text_colours(category_colours(k))
    assert len(panel.labels.text) == k  # one label per region, in the same order
    # each label sits over its own region: its x is the middle of that region's x range
    np.testing.assert_allclose(panel.labels.x, np.asarray(panel.regions.x).mean(axis=1))


def test_residual_axis_has_few_round_ticks_inside_the_data(make_panel):
    panel = make_panel(ow.ResidualPanel)
    ticks, x = np.asarray(panel.x_axis.tick_values), np.asarray(panel.points.x)
    assert 3 <= len(ticks) <= 6 and x.min() <= ticks.min() and ticks.max() <= x.max()
    step = np.diff(ticks)
    np.testing.assert_allclose(step, step[0])
    mantissa = step[0] / 10 ** np.floor(np.log10(step[0]))
    assert min(abs(mantissa - m) for m in (1, 2, 2.5, 5)) < 1e-9  # a 1-2-2.5-5 step
    assert np.allclose(ticks / step[0], np.round(ticks / step[0]))  # ticks are multiples of the step
    qq = np.asarray(panel.qq_axis.tick_values)
    assert 2 <= len(qq) <= 5 and np.asarray(panel.qq.x).min() <= qq.min() <= qq.max() <= np.asarray(panel.qq.x).max()


@pytest.mark.parametrize("lo, hi", [(-1.37, 1.62), (0.0, 1.0), (20.3, 69.9), (-1e-3, 4e-3), (5.0, 5.0)])
def test_nice_ticks_are_round_and_inside(lo, hi):
    ticks = nice_ticks(lo, hi)
    assert 1 <= len(ticks) <= 6 and lo - 1e-12 <= ticks.min() and ticks.max() <= hi + 1e-12

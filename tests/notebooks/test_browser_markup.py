"""Markup in level labels shows as text in a real browser and never runs.

Reference: the HTML standard's parsing rules; a label such as ``<b>bold</b>`` must reach the
page as the characters ``<``, ``b``, ``>`` (escaped), not as an element, and an
``<img onerror=...>`` label must not execute (an unescaped one runs when inserted with
innerHTML, as noted for ipywidgets' HTML widget).
"""
import nbformat
import pytest

from browser_actions import drag_box, error_outputs, wait_figures, wait_selection
from nbharness import voila_server

pytestmark = pytest.mark.browser

HOSTILE = ["<b>bold</b>", "<script>window.__owInjected = 1</script>",
           "<img src=x onerror=\"window.__owInjected = 2\">"]

SOURCE = f'''
import numpy as np, pandas as pd
import ordwidgets as ow
rng = np.random.default_rng(4)
x = rng.normal(size=300)
codes = np.digitize(x + rng.logistic(size=300), [-1.0, 1.0])
levels = {HOSTILE!r}
frame = pd.DataFrame({{"x": x, "rating": pd.Categorical.from_codes(codes, categories=levels, ordered=True)}})
res = ow.fit("rating ~ x", frame)
res
'''

DASHBOARD = "ow.dashboard(res, data=frame)"


@pytest.fixture(scope="module")
def markup_url(tmp_path_factory):
    folder = tmp_path_factory.mktemp("markup")
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell(SOURCE),
                                         nbformat.v4.new_code_cell(DASHBOARD)])
    path = folder / "markup_labels.ipynb"
    nbformat.write(nb, path)
    with voila_server(path, folder / "voila.log") as base:
        yield base + "/"


def assert_shown_as_text(page):
    text = page.inner_text("#rendered_cells")
    for label in HOSTILE:
        assert label in text, label
    assert page.locator("#rendered_cells b:text-is('bold')").count() == 0
    assert page.locator("#rendered_cells img[src='x']").count() == 0
    assert page.evaluate("window.__owInjected") is None


def test_level_labels_with_markup_show_as_text(open_page, markup_url):
    watch = open_page(markup_url)
    page = watch.page
    page.wait_for_selector(".ow-fit-result", timeout=120_000)
    assert error_outputs(page) == []
    wait_figures(page, ".ow-dashboard", 4)
    assert_shown_as_text(page)
    # the selection table lists each brushed row's level: brush nearly everything
    drag_box(page, ".ow-dashboard", (0.02, 0.02), (0.98, 0.98))
    wait_selection(page)
    assert_shown_as_text(page)
    assert watch.page_errors == []

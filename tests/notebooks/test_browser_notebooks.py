"""Each example notebook renders in a real browser (Voila + Chromium) without errors.

Reference: what a reader of the served notebook sees.  Voila shows a failing cell as an
error output and a stderr stream as red text; a JavaScript exception in a widget shows up as
a page error or a console error (requests we block on purpose, to hosts other than
localhost, are not counted).  None may appear, and every bqplot figure must be drawn (its marks as SVG paths).
"""
import pytest

from browser_actions import error_outputs, screenshot, wait_figures
from nbharness import NOTEBOOK_DIR

pytestmark = pytest.mark.browser

# figures each notebook shows: the tour's dashboard has the latent plot, the explorer, the
# residual plot and the QQ plot; model checking shows two residual panels (2 figures each)
# and the group-effects panel; the what-if notebook shows one explorer
FIGURES = {"tour.ipynb": 4, "model_checking.ipynb": 5, "what_if.ipynb": 1}
# (element, which one, picture name, device pixel ratio): the overview is drawn at 0.8 to stay small
SHOTS = {"tour.ipynb": (".ow-dashboard", 0, "dashboard", 0.8),
         "model_checking.ipynb": (".ow-residual-panel", 1, "residuals_fixed", 1.0),
         "what_if.ipynb": (".ow-explorer", 0, "what_if", 1.0)}


def test_every_notebook_is_covered():
    assert set(FIGURES) == {p.name for p in NOTEBOOK_DIR.glob("*.ipynb")}


@pytest.mark.parametrize("name", sorted(FIGURES))
def test_notebook_renders_with_figures_and_no_errors(name, open_page, voila_notebooks):
    watch = open_page(f"{voila_notebooks}/voila/render/{name}", scale=SHOTS[name][3])
    page = watch.page
    drawn = wait_figures(page, "#rendered_cells", FIGURES[name])
    assert drawn >= FIGURES[name]
    assert error_outputs(page) == []
    assert "Traceback" not in page.inner_text("#rendered_cells")
    assert watch.page_errors == [] and watch.console_errors == []
    css, index, shot, _ = SHOTS[name]
    page.mouse.move(0, 0)
    screenshot(page.locator(css).nth(index), shot)

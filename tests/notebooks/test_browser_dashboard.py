"""The tour's dashboard driven in a real browser (Voila + Chromium), as a person would use it.

Reference for each check is what the dashboard promises its user (docs/user_guide.md): a
threshold slider moved with the keyboard (the WAI-ARIA slider pattern: arrow keys step the
value) redraws the latent plot and the log-likelihood readout, and reset draws the fitted plot again; choosing another link redraws
the probability explorer; dragging a box over residual points lists those rows; ticking a
predictor's scale effect in the model controls refits and redraws the residuals.  Each
interaction waits for the status counter, so the kernel has really processed it.
Screenshots for the user guide are saved along the way.
"""
import pytest

from browser_actions import (drag_box, path_data, screenshot, updates, wait_figures,
                             wait_paths_change, wait_paths_equal, wait_selection, wait_settled,
                             wait_updates_above)
from nbharness import rendered_page

pytestmark = pytest.mark.browser

DENSITY = ".ow-threshold-panel .ow-density-figure path"
EXPLORER = ".ow-explorer .ow-explorer-figure path"


@pytest.fixture(scope="module")
def tour(chromium, voila_notebooks):
    """One rendered tour page shared by the interaction tests (one kernel, one dashboard)."""
    ctx, watch = rendered_page(chromium, f"{voila_notebooks}/voila/render/tour.ipynb", height=2400)
    page = watch.page
    wait_figures(page, ".ow-dashboard", 4)
    yield watch
    ctx.close()


def test_dashboard_renders_every_panel(tour):
    page = tour.page
    for css in ["ow-threshold-panel", "ow-link-selector", "ow-explorer", "ow-residual-panel", "ow-status"]:
        assert page.locator(f".ow-dashboard .{css}").count() == 1, css
    assert updates(page) >= 1  # the initial build was processed and counted
    assert tour.page_errors == [] and tour.console_errors == []


def test_keyboard_on_a_threshold_slider_redraws_density_and_loglik(tour):
    page = tour.page
    before_paths = path_data(page, DENSITY)
    before_text = page.locator(".ow-loglik-readout").inner_text()
    count = updates(page)
    handle = page.locator(".ow-threshold-slider .noUi-handle").first
    handle.focus()
    for _ in range(5):
        page.keyboard.press("ArrowRight")
    wait_updates_above(page, count)
    wait_paths_change(page, DENSITY, before_paths)
    page.wait_for_function(
        "([sel, t]) => document.querySelector(sel).innerText !== t",
        arg=[".ow-loglik-readout", before_text], timeout=60_000)
    for _ in range(40):  # a larger, visible edit for the user guide's picture
        page.keyboard.press("PageUp")
    wait_settled(page)
    screenshot(page.locator(".ow-threshold-panel"), "thresholds")
    # the reset button restores the fitted thresholds: the plot is drawn exactly as before
    count = updates(page)
    page.locator(".ow-reset button, button.ow-reset").first.click()
    wait_updates_above(page, count)
    wait_paths_equal(page, DENSITY, before_paths)
    assert tour.page_errors == [] and tour.console_errors == []


def test_brushing_residuals_fills_the_selection_table(tour):
    page = tour.page
    table = page.locator(".ow-selection-table")
    assert "selected rows" not in table.inner_text()
    page.locator(".ow-residual-panel select").first.select_option(label="years")
    page.wait_for_function("(sel) => document.querySelector(sel).textContent.includes('years')",
                           arg=".ow-residual-figure text.axislabel", timeout=60_000)
    count = updates(page)
    # the oldest trees; start low so the figure's hover toolbar (top right) is not hit
    drag_box(page, ".ow-dashboard", (0.75, 0.97), (0.99, 0.12))
    wait_updates_above(page, count)
    wait_selection(page)
    assert table.locator("tr").count() > 1
    screenshot(page.locator(".ow-residual-panel"), "residuals")
    assert tour.page_errors == [] and tour.console_errors == []


def test_switching_the_link_redraws_the_explorer(tour):
    page = tour.page
    before = path_data(page, EXPLORER)
    count = updates(page)
    page.locator(".ow-link-dropdown select").select_option("cloglog")
    wait_updates_above(page, count)
    wait_paths_change(page, EXPLORER, before)
    assert "cloglog" in page.locator(".ow-dashboard").inner_text()
    screenshot(page.locator(".ow-link-selector"), "links")
    screenshot(page.locator(".ow-explorer"), "explorer")
    assert tour.page_errors == [] and tour.console_errors == []


def test_model_controls_refit_with_a_scale_effect(tour):
    # the check-and-fix loop without leaving the dashboard: tick "scale effect" for years
    page = tour.page
    box = page.locator(".ow-model-controls .widget-hbox:has(.widget-label:text-is('years')) "
                       "label:has-text('scale effect') input")
    before = path_data(page, ".ow-residual-figure path.line")
    count = updates(page)
    box.check()
    wait_updates_above(page, count)
    page.wait_for_function("(sel) => document.querySelector(sel).innerText.includes('scale: years')",
                           arg=".ow-link-selector", timeout=60_000)
    wait_paths_change(page, ".ow-residual-figure path.line", before)
    assert tour.page_errors == [] and tour.console_errors == []


_TICK_BOXES = """sel => {
    const axis = document.querySelector(sel);  // the first axis of a figure is its x axis
    return Array.from(axis.querySelectorAll('g.tick text')).filter(t => t.textContent.trim())
        .map(t => { const r = t.getBoundingClientRect(); return [r.left, r.right]; });
}"""

_LABEL_FILLS = """sel => Array.from(document.querySelectorAll(sel))
    .filter(t => t.textContent.includes('%')).map(t => getComputedStyle(t).fill)"""


def test_screen_polish_shows_in_the_browser(tour):
    page = tour.page
    wait_settled(page)
    # residual x tick labels stand apart at the default width (1280 px page, two panels a row)
    boxes = page.evaluate(_TICK_BOXES, ".ow-residual-figure g.axis")
    assert len(boxes) >= 3
    assert all(a[1] <= b[0] for a, b in zip(boxes, boxes[1:])), boxes
    qq = page.evaluate(_TICK_BOXES, ".ow-qq-figure g.axis")  # the narrower QQ plot beside it too
    assert len(qq) >= 2 and all(a[1] <= b[0] for a, b in zip(qq, qq[1:])), qq
    # the probability labels over the density are drawn in the hues of the four regions (region
    # colours #315f9b #8fc3b0 #f2d47a #c84b31), the pale two darkened to WCAG contrast 4.5 on white
    fills = page.evaluate(_LABEL_FILLS, ".ow-threshold-panel .ow-density-figure text.label")
    assert fills == ["rgb(49, 95, 155)", "rgb(92, 125, 113)", "rgb(133, 117, 67)", "rgb(200, 75, 49)"], fills
    # the caution is on the page once, in its box
    assert page.locator(".ow-dashboard .ow-caution").count() == 1
    assert page.locator(".ow-dashboard .ow-caution").is_visible()
    assert page.inner_text(".ow-dashboard").count("associations, not causes") == 1

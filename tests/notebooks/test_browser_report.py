"""The report file in a real browser: opens offline with no console error and no injected markup.

Reference: the HTML standard's parsing rules; an escaped ``<img onerror=...>`` level label is
text, and an unescaped one would run its handler (and show up as an ``img[src='x']`` element).
"""
import warnings

import pytest

import ordwidgets as ow
from ordwidgets.demo import street_trees
from ordwidgets.report import SECTION_KEYS
from nbharness import PageWatch

pytestmark = pytest.mark.browser

HOSTILE = "<img src=x onerror=\"window.__owInjected = 1\">"


def _file_only(route):
    """Let the file itself and data: URIs through; abort anything that would need a network."""
    url = route.request.url
    if url.startswith(("file:", "data:")):
        route.continue_()
    else:
        route.abort()


@pytest.fixture(scope="module")
def report_file(tmp_path_factory):
    frame = street_trees(300, seed=13)
    frame["species"] = frame["species"].cat.rename_categories({"maple": HOSTILE})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = ow.fit("grade ~ diameter + species", frame)
    return ow.write_report(res, tmp_path_factory.mktemp("report") / "report.html",
                           whatifs=[{"name": HOSTILE, "scenario": {"species": HOSTILE}}])


def test_report_opens_offline_without_errors(chromium, report_file):
    ctx = chromium.new_context(viewport={"width": 1200, "height": 1600})
    ctx.route("**/*", _file_only)
    requests, dialogs = [], []
    try:
        page = ctx.new_page()
        watch = PageWatch(page)
        page.on("request", lambda r: requests.append(r.url))
        page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
        page.goto(report_file.as_uri(), wait_until="load")
        page.wait_for_function("Array.from(document.images).every(i => i.complete)")
        assert watch.page_errors == [] and watch.console_errors == []
        assert dialogs == []
        assert [u for u in requests if not u.startswith(("file:", "data:"))] == []
        for key in SECTION_KEYS:
            assert page.locator(f"section#{key} h2").is_visible()
        widths = page.evaluate("Array.from(document.images).map(i => i.naturalWidth)")
        assert len(widths) == 4 and min(widths) > 100  # every figure decoded and drawn
        assert page.evaluate("window.__owInjected") is None
        assert page.locator("img[src='x']").count() == 0
        assert HOSTILE in page.inner_text("body")  # shown as text
    finally:
        ctx.close()

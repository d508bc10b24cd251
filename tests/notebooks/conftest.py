"""Fixtures for the notebook and real-browser tests (helpers live in ``nbharness``)."""
from __future__ import annotations

import os
import shutil

import pytest

from nbharness import CHROMIUM_ARGS, NOTEBOOK_DIR, kernel_env, rendered_page, unavailable, voila_server


@pytest.fixture(scope="session", autouse=True)
def _venv_python_for_kernels():
    """Start every kernel of this session (nbclient or Voila) with the venv's Python."""
    old = os.environ.get("PATH", "")
    os.environ["PATH"] = kernel_env()["PATH"]
    yield
    os.environ["PATH"] = old


@pytest.fixture(scope="session")
def notebook_copies(tmp_path_factory):
    """The example notebooks copied to a scratch folder, so files they write stay out of the repo."""
    dest = tmp_path_factory.mktemp("notebooks")
    for nb in NOTEBOOK_DIR.glob("*.ipynb"):
        shutil.copy(nb, dest / nb.name)
    return dest


@pytest.fixture(scope="session")
def voila_notebooks(notebook_copies, tmp_path_factory):
    """One Voila server for the copied notebooks folder (each page gets its own kernel)."""
    log = tmp_path_factory.mktemp("voila-log") / "voila.log"
    try:
        with voila_server(notebook_copies, log) as base:
            yield base
    finally:
        if log.exists():
            print(log.read_text(errors="replace")[-4000:])


@pytest.fixture(scope="session")
def chromium():
    """A headless system Chromium driven by Playwright (skips or fails as documented above)."""
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        unavailable("no chromium executable on PATH")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError as exc:
        unavailable(f"playwright is not installed ({exc})")
    with sync_playwright() as p:
        try:
            browser = p.chromium.launch(executable_path=exe, args=CHROMIUM_ARGS)
        except Exception as exc:  # Playwright raises its own Error type on launch failures
            unavailable(f"chromium at {exe} did not start: {exc}")
        yield browser
        browser.close()


@pytest.fixture
def open_page(chromium):
    """``open_page(url)`` → :class:`PageWatch` once Voila has rendered every cell."""
    contexts = []

    def _open(url, height=2400, scale=1.0):
        ctx, watch = rendered_page(chromium, url, height=height, scale=scale)
        contexts.append(ctx)
        return watch

    yield _open
    for ctx in contexts:
        ctx.close()

"""The rule for a missing browser: skip with a clear message, but fail in CI.

Reference: the project's test policy (CI sets ``OW_REQUIRE_BROWSER=1`` in ``.ci/run``).  A
copy of this folder's fixtures runs in a child pytest whose ``PATH`` holds only this
environment's ``bin`` folder, so no ``chromium`` can be found.
"""
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent


def run_without_chromium(folder, required):
    for name in ["conftest.py", "nbharness.py"]:
        shutil.copy(HERE / name, folder / name)
    (folder / "test_needs_browser.py").write_text("def test_needs_browser(chromium):\n    pass\n")
    env = dict(os.environ, PATH=str(Path(sys.executable).parent), OW_REQUIRE_BROWSER=required)
    cmd = [sys.executable, "-m", "pytest", "-q", "-rsE", "-p", "no:cacheprovider", str(folder)]
    return subprocess.run(cmd, cwd=folder, env=env, capture_output=True, text=True, timeout=120)


@pytest.mark.parametrize("required, outcome, message", [
    ("", "1 skipped", "browser tests skipped: no chromium executable on PATH"),
    ("1", "1 error", "browser tests are required (OW_REQUIRE_BROWSER=1) but cannot run"),
])
def test_missing_chromium(required, outcome, message, tmp_path):
    if shutil.which("chromium", path=str(Path(sys.executable).parent)):
        pytest.skip("a chromium sits beside this Python: cannot hide it")
    out = run_without_chromium(tmp_path, required)
    assert outcome in out.stdout, out.stdout[-2000:]
    assert message in out.stdout
    assert (out.returncode == 0) == (required == "")

"""The documentation builds offline and the user guide's links and pictures resolve.

References: ``make docs`` is the documented way to build the API reference (Makefile); the
PNG signature is fixed by the PNG specification (ISO/IEC 15948, sec. 5.2); a page that loads
scripts, styles or images from the network does not work offline.
"""
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
GUIDE = REPO / "docs" / "user_guide.md"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
MAX_IMAGE_BYTES = 300_000


@pytest.fixture(scope="module")
def api_dir(tmp_path_factory):
    if shutil.which("make") is None:
        pytest.skip("make is not installed")
    out = tmp_path_factory.mktemp("api")
    # -o: treat the install stamp (spelled as in the Makefile) as up to date, so the test never
    # reinstalls the package; the dry run proves that only pdoc would run
    cmd = ["make", "--no-print-directory", "-o", ".venv/.installed-stamp", "docs",
           f"APIDIR={out}", f"PY={sys.executable}"]
    planned = subprocess.run(cmd[:1] + ["-n"] + cmd[1:], cwd=REPO, check=True, capture_output=True,
                             text=True, timeout=60).stdout.strip().splitlines()
    assert len(planned) == 1 and "pdoc" in planned[0] and "pip" not in planned[0], planned
    subprocess.run(cmd, cwd=REPO, check=True, capture_output=True, timeout=300)
    return out


def test_make_docs_writes_the_api_reference(api_dir):
    pages = {p.relative_to(api_dir).as_posix() for p in api_dir.rglob("*.html")}
    assert {"ordwidgets.html", "ordwidgets/demo.html"} <= pages
    main = (api_dir / "ordwidgets.html").read_text()
    # numpydoc sections rendered as headings (pdoc's numpy docformat), with ow.fit's summary
    assert re.search(r"<h6[^>]*>Parameters</h6>", main)
    assert "Fit a cumulative link model by maximum likelihood." in main
    assert "street_trees" in (api_dir / "ordwidgets" / "demo.html").read_text()


def test_api_reference_needs_no_network(api_dir):
    remote = re.compile(r"""<(script|link|img)\b[^>]*(src|href)=["']?(https?:)?//""", re.I)
    for page in api_dir.rglob("*.html"):
        assert remote.search(page.read_text()) is None, page


def _guide_targets():
    text = GUIDE.read_text()
    return [t for t in re.findall(r"\]\(([^)\s]+)\)", text) if not re.match(r"[a-z]+:", t)]


def test_guide_links_resolve():
    targets = _guide_targets()
    assert targets, "the user guide links nothing"
    missing = [t for t in targets if not (GUIDE.parent / t.split("#")[0]).exists() and not t.startswith("#")
               and not t.startswith("api/")]
    assert missing == []


def test_guide_pictures_are_small_pngs():
    pictures = [GUIDE.parent / t for t in _guide_targets() if t.endswith(".png")]
    assert pictures, "the user guide shows no screenshots"
    for pic in pictures:
        data = pic.read_bytes()
        assert data[:8] == PNG_SIGNATURE, pic
        assert len(data) < MAX_IMAGE_BYTES, (pic, len(data))

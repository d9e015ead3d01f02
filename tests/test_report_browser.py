"""The report in a real browser: headless Chromium (Debian's package, installed by
.ci/run) opens it with no network, shows no console error and loads every figure; the
printed PDF has several pages and carries the operating-characteristics values.

Without Chromium these tests are skipped on a developer's machine and fail in CI
(``CI=true``), so a CI run cannot pass without them.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner
from matplotlib import image
from pypdf import PdfReader

from octrial.cli import main
from octrial.reporting import find_chromium, formats
from octrial.reporting.render import SECTIONS
from tests.browser import DevTools
from tests.helpers import single_design_demos

DEMOS = single_design_demos()


@pytest.fixture(scope="module")
def chromium() -> str:
    path = find_chromium()
    if path is None:
        message = "headless Chromium is not installed (apt-get install chromium)"
        if os.environ.get("CI"):
            pytest.fail(message)
        pytest.skip(message)
    return path


@pytest.fixture(scope="module")
def printed(chromium, tmp_path_factory) -> dict[str, Path]:
    """Each demo run, reported and printed to PDF through the command line."""
    folders = {}
    for design in DEMOS:
        folder = tmp_path_factory.mktemp(design.stem)
        runner = CliRunner()
        for args in (["run", str(design), "--out", str(folder), "--quiet"],
                     ["report", str(folder), "--pdf", "--quiet"]):
            result = runner.invoke(main, args)
            assert result.exit_code == 0, result.output
        folders[design.stem] = folder
    return folders


def test_pages_open_offline_without_errors(chromium, printed) -> None:
    with DevTools(chromium) as browser:
        for demo, folder in printed.items():
            visit = browser.visit(folder / "report.html")
            assert visit.errors == [], demo
            assert visit.external_requests == [], demo
            assert visit.sections == [s for s, _ in SECTIONS]
            assert len(visit.images) >= 3
            assert all(complete and width > 0 for complete, width in visit.images)
            pixels = image.imread(io.BytesIO(visit.screenshot))
            assert pixels.shape[0] > 500 and pixels.shape[1] > 500
            assert pixels[..., :3].std() > 0.05  # not a blank page


def test_the_browser_check_sees_errors_and_network_use(chromium, tmp_path) -> None:
    page = tmp_path / "broken.html"
    page.write_text('<!DOCTYPE html><html><body><p>broken</p><img src="missing.png">'
                    '<img src="http://127.0.0.1:9/figure.png">'
                    '<script>console.error("a console error")</script></body></html>')
    with DevTools(chromium) as browser:
        visit = browser.visit(page)
    assert "a console error" in visit.errors
    assert any("ERR_FILE_NOT_FOUND" in e for e in visit.errors)
    assert visit.external_requests == ["http://127.0.0.1:9/figure.png"]
    assert [width for _, width in visit.images] == [0, 0]


@pytest.mark.parametrize("demo", [d.stem for d in DEMOS])
def test_pdf_has_pages_and_the_oc_values(printed, demo) -> None:
    folder = printed[demo]
    reader = PdfReader(folder / "report.pdf")
    assert len(reader.pages) > 1
    words = set(" ".join(page.extract_text() for page in reader.pages).split())
    oc = pd.read_csv(folder / "oc.csv")
    for column in ("prob_success", "prob_stop_efficacy", "prob_stop_futility"):
        shown = {formats.probability(v) for v in oc[column]}
        assert shown <= words, (column, shown - words)
    assert {formats.size(v) for v in oc["expected_n"]} <= words
    first = reader.pages[0].mediabox
    assert (float(first.width), float(first.height)) == pytest.approx((595.3, 841.9), abs=1)

"""The report of a several-arm run folder or design file.

Outside checks: the page parsed back with html5lib (strict) and its numbers against
oc.csv as written; the allocation-over-time figure's cumulative subjects at the last look
against the exact engine's own expected sizes per arm (an identity: an arm's mean final
size is its mean cumulative size at the last look, which the exact run derives from the
probabilities of leaving at each look); the caution of every report; the seals (hashlib SHA-256)
refused when oc.csv is edited.
"""

from __future__ import annotations

import base64
import io
import shutil

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from matplotlib import image

from octrial.caution import CAUTION
from octrial.cli import main
from octrial.reporting.arms_data import arms_from_run_folder
from octrial.reporting.arms_figures import (
    allocation_shares,
    allocation_subjects,
    cumulative_subjects,
    share_columns,
)
from octrial.reporting.pdf import find_chromium
from tests.report_pages import parse, section_ids, table_rows, text
from tests.test_run_arms import DROPPING, SMALL, design_file

SECTIONS = ["design", "boundaries", "operating-characteristics", "stopping", "figures",
            "precision", "reproducibility", "caution"]


def invoke(*args: str, code: int = 0) -> str:
    result = CliRunner().invoke(main, list(args))
    assert result.exit_code == code, result.output
    return result.output


@pytest.fixture(scope="module")
def folders(tmp_path_factory) -> dict[str, object]:
    """An exact run and a simulated run (with Pr(best) dropping) of small designs."""
    base = tmp_path_factory.mktemp("report-arms")
    exact = base / "exact"
    simulated = base / "simulated"
    small = design_file(base, SMALL, replicates=2000)
    dropping = design_file(base, DROPPING, replicates=4000, name="dropping.toml")
    invoke("run", str(small), "--out", str(exact), "--quiet")
    invoke("run", str(dropping), "--out", str(simulated), "--quiet")
    for folder in (exact, simulated):
        invoke("report", str(folder), "--quiet")
    return {"exact": exact, "simulated": simulated, "small": small, "base": base}


@pytest.mark.parametrize("label", ["exact", "simulated"])
def test_report_has_the_several_arm_sections(folders, label) -> None:
    folder = folders[label]
    page = parse(folder / "report.html")
    assert section_ids(page) == SECTIONS
    whole = text(page)
    assert CAUTION in whole and "local regulations and guidance govern" in whole
    assert "several treatment arms" in whole.lower()
    for figure in ("figure-arm-power", "figure-allocation-subjects"):
        assert page.find(f".//figure[@id='{figure}']") is not None, figure
    oc = pd.read_csv(folder / "oc.csv", float_precision="round_trip")
    rows = table_rows(page, "per-arm")
    assert len(rows) == len(oc)
    for row, (_, r) in zip(rows, oc.iterrows(), strict=True):
        for arm in ("low", "high"):
            for what in ("prob_success", "expected_n"):
                assert row.cells[f"{arm}_{what}"].value == r[f"{arm}_{what}"]
    study = table_rows(page, "operating-characteristics")
    assert [row.cells["fwer"].value for row in study] == list(oc["fwer"])
    assert [("null" in row.classes) for row in study] == list(oc["is_null"])
    for arm in ("low", "high"):
        looks = table_rows(page, f"stopping-{arm}")
        assert [row.cells[f"{arm}_look1_drop"].value for row in looks] == list(
            oc[f"{arm}_look1_drop"])
    assert table_rows(page, "looks")  # the design summary's thresholds
    assert (folder / "report-tables" / "per-arm.csv").is_file()


def test_simulated_report_states_its_precision(folders) -> None:
    whole = text(parse(folders["simulated"] / "report.html"))
    assert "4,000 replicate studies" in whole and "Monte Carlo standard error" in whole
    assert "drop if Pr(best)" in whole and "is below the look's threshold is dropped" in whole


def test_cumulative_subjects_end_at_the_expected_sizes(folders) -> None:
    # identity: the mean cumulative size at the last look is the mean final size, which
    # the exact engine computes on its own (its expected_n columns)
    data = arms_from_run_folder(folders["exact"])
    found = cumulative_subjects(data)
    assert found is not None
    for arm in ("low", "high"):
        assert np.allclose(found[arm][:, -1], data.oc[f"{arm}_expected_n"], rtol=1e-12)
        planned = [n[data.design.arm_names.index(arm)] for n in data.design.looks.per_arm]
        assert np.all(found[arm][:, 0] == planned[0])  # everyone starts with look 1's size
        assert np.all(found[arm] <= np.array(planned) + 1e-9)
    assert np.allclose(found["control"][:, -1], data.oc["control_expected_n"], rtol=1e-12)


def test_allocation_figures_from_simulated_columns(folders) -> None:
    # a synthetic table with the allocation columns the adaptive simulation writes
    data = arms_from_run_folder(folders["simulated"])
    oc = data.oc.copy()
    shares = {"control": [0.25, 0.25], "low": [0.375, 0.2], "high": [0.375, 0.55]}
    for arm, values in shares.items():
        for k, v in enumerate(values, start=1):
            oc[f"{arm}_block{k}_share"] = v
            oc[f"{arm}_look{k}_n"] = 9.0 * k + len(arm)  # distinct per arm and look
    synthetic = type(data)(data.design, oc, data.boundaries, data.record, data.origin)
    assert share_columns(synthetic) == {
        arm: [f"{arm}_block1_share", f"{arm}_block2_share"] for arm in shares}
    found = cumulative_subjects(synthetic)
    assert found is not None
    assert np.array_equal(found["low"][0], [12.0, 21.0])  # read, not derived
    for figure in (allocation_shares(synthetic), allocation_subjects(synthetic)):
        assert figure is not None
        assert figure.uri.startswith("data:image/svg+xml;base64,")
        assert b"<svg" in base64.b64decode(figure.uri.split(",", 1)[1])
    assert "as simulated" in allocation_subjects(synthetic).caption.lower()
    # fixed allocation simulated writes the shares too (every design plotted the same
    # way); the exact engine leaves them empty (they need which arms are in together)
    assert allocation_shares(data) is not None
    assert allocation_shares(arms_from_run_folder(folders["exact"])) is None


def test_a_folder_without_sizes_per_look_gets_them_derived(folders) -> None:
    # a run folder written before the exact engines wrote <arm>_look<k>_n: the report
    # derives them the same way, so the figure is the same
    data = arms_from_run_folder(folders["exact"])
    written = cumulative_subjects(data)
    older = data.oc.drop(columns=[c for c in data.oc.columns if c.endswith("_n")
                                  and "_look" in c])
    derived = cumulative_subjects(type(data)(data.design, older, data.boundaries,
                                             data.record, data.origin))
    assert written is not None and derived is not None
    for arm in ("control", "low", "high"):
        assert np.array_equal(written[arm], derived[arm])


def test_report_of_a_several_arm_design_file(folders, tmp_path) -> None:
    html = tmp_path / "small.html"
    invoke("report", str(folders["small"]), "--out", str(html), "--quiet")
    page = parse(html)
    assert section_ids(page) == SECTIONS
    assert "exact (several arms, control paths)" in text(page)


def test_edited_oc_is_refused(folders, tmp_path) -> None:
    copy = tmp_path / "copy"
    shutil.copytree(folders["exact"], copy)
    oc = copy / "oc.csv"
    oc.write_text(oc.read_text().replace("exact", "exakt", 1))
    output = invoke("report", str(copy), code=2)
    assert "oc.csv" in output and "SHA-256" in output


def test_pdf_of_a_several_arm_report(folders, tmp_path) -> None:
    if find_chromium() is None:
        pytest.skip("needs chromium")
    shutil.copytree(folders["simulated"], tmp_path / "run")
    invoke("report", str(tmp_path / "run"), "--pdf", "--quiet")
    pdf = tmp_path / "run" / "report.pdf"
    assert pdf.read_bytes().startswith(b"%PDF")
    from pypdf import PdfReader

    words = " ".join((p.extract_text() or "") for p in PdfReader(pdf).pages)
    assert "Stopping and dropping per arm and look" in " ".join(words.split())


def test_page_opens_offline_without_errors(folders) -> None:
    # a real browser (tests/browser.py, the DevTools client of test_report_browser.py)
    chromium = find_chromium()
    if chromium is None:
        pytest.skip("needs chromium")
    from tests.browser import DevTools

    with DevTools(chromium) as browser:
        visit = browser.visit(folders["simulated"] / "report.html")
    assert visit.errors == [] and visit.external_requests == []
    assert visit.sections == SECTIONS
    assert len(visit.images) >= 2
    assert all(complete and width > 0 for complete, width in visit.images)
    pixels = image.imread(io.BytesIO(visit.screenshot))
    assert pixels[..., :3].std() > 0.05  # not a blank page

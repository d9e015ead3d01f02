"""The report: every section present, numbers equal to oc.csv and boundaries.csv (parsed
back from the HTML, not string-matched), exported tables, optional inputs, bad input."""

from __future__ import annotations

import hashlib
import json
import math
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.provenance import display_command
from octrial.reporting import formats, from_run_folder, render_html
from octrial.reporting.export import latex_escape
from octrial.reporting.render import SECTIONS
from octrial.reporting.tables import _generic_boundaries
from tests.helpers import DESIGNS, single_design_demos
from tests.report_pages import parse, section_ids, table_rows, text

DEMOS = single_design_demos()


def invoke(*args: str, env: dict[str, str] | None = None):
    result = CliRunner().invoke(main, list(args), env=env)
    return result


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict[str, Path]:
    """Each demo design run with 'octrial run' and reported from its folder."""
    folders = {}
    for design in DEMOS:
        folder = tmp_path_factory.mktemp(design.stem)
        result = invoke("run", str(design), "--out", str(folder), "--quiet")
        assert result.exit_code == 0, result.output
        result = invoke("report", str(folder), "--quiet")
        assert result.exit_code == 0, result.output
        folders[design.stem] = folder
    return folders


def read_oc(folder: Path) -> pd.DataFrame:
    return pd.read_csv(folder / "oc.csv")


def assert_shown_equals(cell, value: float, kind: str) -> None:
    """The cell's number equals ``value`` exactly and its text is ``value`` rounded."""
    assert cell.value == value
    if kind == "probability" and cell.text == "<0.0001":
        assert 0 < value < 1e-4
    elif kind == "probability" and cell.text == ">0.9999":
        assert 1 - 1e-4 < value < 1
    else:
        assert abs(formats.parse(cell.text) - value) <= formats.TOLERANCE[kind] + 1e-12, (
            cell.text, value)


@pytest.mark.parametrize("demo", [d.stem for d in DEMOS])
def test_page_parses_strictly_and_has_every_section(runs, demo) -> None:
    page = parse(runs[demo] / "report.html")
    assert section_ids(page) == [s for s, _ in SECTIONS]
    for section in page.findall(".//main/section"):
        assert section.find("h2") is not None
    body = text(page)
    assert "do not replace" in body and "regulatory agency" in body
    assert "Assumptions every number depends on" in body
    assert len(page.findall(".//ol[@class='assumptions']/li")) >= 6
    # Self-contained: no external stylesheet, script or image.
    assert page.findall(".//link") == [] and page.findall(".//script") == []
    assert all(img.get("src").startswith("data:image/") for img in page.findall(".//img"))
    assert len(page.findall(".//img")) >= 3


OC_KINDS = {"prob_success": "probability", "prob_success_se": "probability",
            "prob_stop_efficacy": "probability", "prob_stop_futility": "probability",
            "expected_n": "size", "expected_n_se": "size", "sd_n": "size", "scenario": "count"}


@pytest.mark.parametrize("demo", [d.stem for d in DEMOS])
def test_oc_tables_equal_oc_csv(runs, demo) -> None:
    oc = read_oc(runs[demo])
    page = parse(runs[demo] / "report.html")
    main_rows = table_rows(page, "operating-characteristics")
    look_rows = table_rows(page, "stopping-by-look")
    assert len(main_rows) == len(look_rows) == len(oc)
    looks = [c for c in oc.columns if re.fullmatch(r"look\d+_stop_(efficacy|futility)", c)]
    truths = [c for c in oc.columns if c.startswith("true_")]
    assert set(looks) <= set(look_rows[0].cells)
    for (_, expected), shown, by_look in zip(oc.iterrows(), main_rows, look_rows, strict=True):
        for key, kind in OC_KINDS.items():
            if key in shown.cells:
                assert_shown_equals(shown.cells[key], float(expected[key]), kind)
        for key in truths:
            assert shown.cells[key].value == expected[key] == by_look.cells[key].value
        for key in looks:
            assert_shown_equals(by_look.cells[key], float(expected[key]), "probability")
        assert ("null" in shown.classes) == bool(expected["is_null"])
        assert (shown.cells["null"].text == "H0") == bool(expected["is_null"])


@pytest.mark.parametrize("demo", [d.stem for d in DEMOS])
def test_maximum_type1_error_is_stated_and_marked(runs, demo) -> None:
    oc = read_oc(runs[demo])
    null = oc[oc["is_null"]]
    page = parse(runs[demo] / "report.html")
    worst = [r for r in table_rows(page, "operating-characteristics") if "worst" in r.classes]
    assert len(worst) == 1
    assert worst[0].cells["prob_success"].value == null["prob_success"].max()
    verdict = text(page.find(".//section[@id='operating-characteristics']/p"))
    stated = re.search(r"grid: ([0-9.<>]+)", verdict).group(1)
    # half a unit of the fourth decimal, and the binary floating point of a half-way value
    assert abs(formats.parse(stated) - null["prob_success"].max()) <= 0.5e-4 + 1e-12


def test_one_arm_boundaries_equal_boundaries_csv(runs) -> None:
    folder = runs["single-arm-response"]
    expected = pd.read_csv(folder / "boundaries.csv")
    rows = table_rows(parse(folder / "report.html"), "boundaries")
    assert len(rows) == len(expected)
    for (_, e), shown in zip(expected.iterrows(), rows, strict=True):
        assert shown.cells["n"].value == e["n"]
        for key in ("efficacy_rule", "futility_rule"):
            assert shown.cells[key].text == e[key].replace(">=", "≥").replace("<=", "≤")
        for key in ("posterior_at_efficacy_bound", "posterior_at_futility_bound"):
            if math.isnan(e[key]):
                assert shown.cells[key].value is None
            else:
                assert_shown_equals(shown.cells[key], e[key], "probability")


def test_two_arm_boundaries_equal_boundaries_csv(runs) -> None:
    folder = runs["two-arm-randomised"]
    expected = pd.read_csv(folder / "boundaries.csv")
    page = parse(folder / "report.html")
    for look, part in expected.groupby("look"):
        rows = table_rows(page, f"boundaries-look{look}")
        assert [r.cells["control_responses"].value for r in rows] == list(
            part["control_responses"])
        for (_, e), shown in zip(part.iterrows(), rows, strict=True):
            for key in ("efficacy_rule", "futility_rule"):
                assert shown.cells[key].text == e[key].replace(">=", "≥").replace("<=", "≤")


def test_report_of_a_design_equals_report_of_its_run(runs, tmp_path) -> None:
    design = DESIGNS / "single-arm-response.toml"
    out = tmp_path / "appendix.html"
    result = invoke("report", str(design), "--out", str(out))
    assert result.exit_code == 0, result.output
    from_design = table_rows(parse(out), "operating-characteristics")
    from_run = table_rows(parse(runs["single-arm-response"] / "report.html"),
                          "operating-characteristics")
    assert [{k: c.value for k, c in r.cells.items()} for r in from_design] == [
        {k: c.value for k, c in r.cells.items()} for r in from_run]
    assert (tmp_path / "appendix-tables" / "operating-characteristics.csv").is_file()


def test_design_file_and_provenance_are_shown(runs) -> None:
    folder = runs["two-arm-randomised"]
    record = json.loads((folder / "run.json").read_text())
    assert record["design"]["text"] == (DESIGNS / "two-arm-randomised.toml").read_text()
    page = parse(folder / "report.html")
    shown = page.find(".//pre[@class='design-file']")
    assert "".join(shown.itertext()) == (DESIGNS / "two-arm-randomised.toml").read_text()
    body = text(page)
    for fact in (record["design"]["sha256"], str(record["seed"]), record["octrial_version"],
                 record["environment"]["python"], record["environment"]["platform"]):
        assert fact in body


@pytest.mark.parametrize("demo", [d.stem for d in DEMOS])
def test_exported_tables_match_the_page(runs, demo) -> None:
    folder = runs[demo]
    exports = folder / "report-tables"
    page = parse(folder / "report.html")
    for name in ("operating-characteristics", "stopping-by-look"):
        rows = table_rows(page, name)
        csv = pd.read_csv(exports / f"{name}.csv", dtype=str, keep_default_na=False)
        assert csv.to_numpy().tolist() == [[c.text for c in r.cells.values()] for r in rows]
        markdown = (exports / f"{name}.md").read_text().splitlines()
        assert sum(line.startswith("| ") for line in markdown) == len(rows) + 2
        latex = (exports / f"{name}.tex").read_text()
        assert latex.count(r"\begin{tabular}") == 1 and latex.count(r"\bottomrule") == 1
        body = latex.split(r"\midrule")[1].split(r"\bottomrule")[0]
        assert body.count(r"\\") == len(rows)
        assert latex.count("{") == latex.count("}")


def test_latex_escaping() -> None:
    assert latex_escape("a_b & 5% ≥ #1") == r"a\_b \& 5\% $\geq$ \#1"
    assert latex_escape(r"\x") == r"\textbackslash{}x"


@pytest.mark.parametrize(("value", "shown"), [
    (0.046692, "0.0467"), (0.0, "0"), (1.0, "1"), (4.9e-5, "<0.0001"), (5.1e-5, "0.0001"),
    (1 - 4.9e-5, ">0.9999"), (float("nan"), "–"), (0.99994, "0.9999")])
def test_probability_format(value, shown) -> None:
    assert formats.probability(value) == shown


# -- files the report shows when present -----------------------------------------------
def reseal(folder: Path) -> None:
    """Record the SHA-256 of the files a test wrote by hand in the records that list them
    (as the commands writing them would; octrial.run_folder)."""
    for name, files in (("run.json", ("oc.csv", "boundaries.csv")), ("checks.json", ()),
                        ("calibration.json", ("calibration.csv", "sizing.csv"))):
        path = folder / name
        if path.is_file():
            record = json.loads(path.read_text())
            record["file_sha256"] = {
                f: hashlib.sha256((folder / f).read_bytes()).hexdigest()
                for f in files if (folder / f).is_file()}
            path.write_text(json.dumps(record))


def extended_run(runs, tmp_path: Path) -> Path:
    """A copy of the one-arm run with Monte Carlo rows, extra columns, a calibration and
    checks, as later commands will write them."""
    folder = tmp_path / "run"
    shutil.copytree(runs["single-arm-response"], folder)
    oc = read_oc(folder)
    reps = 20_000
    oc["method"] = "monte-carlo"
    oc["replicates"] = reps
    for name in ("prob_success", "prob_stop_efficacy", "prob_stop_futility"):
        oc[f"{name}_se"] = np.sqrt(oc[name] * (1 - oc[name]) / reps)
    oc["expected_n_se"] = oc["sd_n"] / math.sqrt(reps)
    oc["bias"] = np.linspace(-0.01, 0.01, len(oc))
    oc["coverage"] = 0.95
    oc.to_csv(folder / "oc.csv", index=False, float_format="%.17g")
    record = json.loads((folder / "run.json").read_text())
    null = oc[oc["is_null"]]
    worst = null.loc[null["prob_success"].idxmax()]
    record["type1"]["se"] = float(worst["prob_success_se"])
    record["prior_effective_sample_size"] = {"treatment": {
        "prior": "Beta(0.4, 1.6)", "simple": 2.0, "simple_formula": "a + b",
        "fda": {"n": 45, "ess": 1.7}}}
    record["warnings"] = ["a numerical warning of the run"]
    (folder / "run.json").write_text(json.dumps(record))
    n = np.arange(20, 61)
    pd.DataFrame({"n": n, "type1_error": 0.05 + 0.01 * np.sin(n), "power": n / 70,
                  "passes": n % 3 == 0, "chosen": n == 42}).to_csv(
        folder / "sizing.csv", index=False)
    pd.DataFrame({"candidate": [1, 2], "n": [42, 42], "efficacy": ["0.95", "0.96"],
                  "type1_error": [0.051, 0.044], "chosen": [False, True]}).to_csv(
        folder / "calibration.csv", index=False)
    (folder / "calibration.json").write_text(json.dumps(
        {"request": {"alpha": 0.05, "power": 0.8}, "chosen_n": 42, "caution": "c",
         "environment": {"python": "3"}, "design": record["design"]}))
    checks = {"sbc": [{"quantity": "rate", "p_value": 0.41, "verdict": "pass"}],
              "prior_predictive": {"mean_responses": 9.1, "share_implausible": 0.002},
              "seed": 7, "design": {"sha256": record["design"]["sha256"]}}
    (folder / "checks.json").write_text(json.dumps(checks))
    reseal(folder)
    return folder


def test_optional_inputs_are_rendered_as_written(runs, tmp_path) -> None:
    folder = extended_run(runs, tmp_path)
    result = invoke("report", str(folder), "--quiet")  # alpha from calibration.json
    assert result.exit_code == 0, result.output
    page = parse(folder / "report.html")
    oc = read_oc(folder)
    main_rows = table_rows(page, "operating-characteristics")
    for (_, expected), shown in zip(oc.iterrows(), main_rows, strict=True):
        assert_shown_equals(shown.cells["prob_success_se"], expected["prob_success_se"],
                            "probability")
        assert_shown_equals(shown.cells["expected_n_se"], expected["expected_n_se"], "size")
    extra = table_rows(page, "simulation-summaries")
    assert [r.cells["bias"].value for r in extra] == list(oc["bias"])
    sizing = pd.read_csv(folder / "sizing.csv")
    shown = table_rows(page, "sizing")
    assert [r.cells["type1_error"].value for r in shown] == list(sizing["type1_error"])
    assert [r.cells["type1_error"].value for r in table_rows(page, "calibration")] == [
        0.051, 0.044]
    summary = {r.cells["item"].text: r.cells["value"].text
               for r in table_rows(page, "calibration-further")}
    assert summary == {"request": "alpha = 0.0500; power = 0.8000", "chosen n": "42"}
    sizes = table_rows(page, "prior-sample-size")
    assert [sizes[0].cells["simple"].value, sizes[0].cells["fda"].value] == [2.0, 1.7]
    summary = {r.cells["item"].text: r.cells["value"] for r in table_rows(page,
                                                                          "checks-summary")}
    assert summary["prior_predictive.mean_responses"].value == 9.1
    assert table_rows(page, "checks-sbc")[0].cells["verdict"].text == "pass"
    assert page.find(".//figure[@id='figure-sawtooth']") is not None
    precision = text(page.find(".//section[@id='precision']"))
    assert "20,000 replicate studies" in precision
    assert "95% Monte Carlo interval" in precision
    assert "a numerical warning of the run" in precision
    power = text(page.find(".//figure[@id='figure-power']"))
    assert "Monte Carlo interval" in power
    assert "alpha = 0.05" in text(page.find(".//section[@id='operating-characteristics']"))


def test_calibration_with_many_rows_shows_the_marked_ones(runs, tmp_path) -> None:
    folder = extended_run(runs, tmp_path)
    n = np.arange(10, 151)
    pd.DataFrame({"n": n, "power": n / 151, "chosen": n == 77,
                  "smallest_passing": n == 70}).to_csv(folder / "sizing.csv", index=False)
    reseal(folder)
    assert invoke("report", str(folder), "--quiet").exit_code == 0
    page = parse(folder / "report.html")
    assert [r.cells["n"].value for r in table_rows(page, "sizing")] == [70, 77]
    exported = pd.read_csv(folder / "report-tables" / "sizing.csv")
    assert list(exported["N"]) == [70, 77]


def test_boundaries_of_unknown_shape_are_shown_as_written() -> None:
    frame = pd.DataFrame({"look": [1, 2], "n": [60, 120],
                          "bound_on": ["sample mean", "sample mean"],
                          "efficacy_bound": [7.67, 4.12], "efficacy_rule": [">= 7.67", ">= 4.12"]})
    table = _generic_boundaries(frame)
    assert [c.key for c in table.columns] == ["look", "n", "efficacy_bound", "efficacy_rule"]
    assert table.rows[1].cells[3].text == "≥ 4.12"
    assert table.rows[0].cells[2].value == 7.67
    assert table.notes == ("bound on: sample mean",)


# -- bad input -------------------------------------------------------------------------
def test_folder_without_run_files_is_exit_2(tmp_path) -> None:
    result = invoke("report", str(tmp_path))
    assert result.exit_code == 2
    assert f"error: {tmp_path}: run.json: expected a run folder" in result.output
    assert not (tmp_path / "report.html").exists()


def test_edited_design_text_is_refused(runs, tmp_path) -> None:
    folder = tmp_path / "run"
    shutil.copytree(runs["single-arm-response"], folder)
    record = json.loads((folder / "run.json").read_text())
    record["design"]["text"] = record["design"]["text"].replace("0.20", "0.25")
    (folder / "run.json").write_text(json.dumps(record))
    result = invoke("report", str(folder))
    assert result.exit_code == 2 and "design.text" in result.output
    assert "SHA-256" in result.output


def test_older_run_without_design_text_reads_the_design_file(runs, tmp_path) -> None:
    folder = tmp_path / "run"
    shutil.copytree(runs["single-arm-response"], folder)
    record = json.loads((folder / "run.json").read_text())
    del record["design"]["text"]
    record["design"]["path"] = str(DESIGNS / "single-arm-response.toml")
    (folder / "run.json").write_text(json.dumps(record))
    assert invoke("report", str(folder), "--quiet").exit_code == 0
    record["design"]["path"] = str(tmp_path / "gone.toml")
    (folder / "run.json").write_text(json.dumps(record))
    result = invoke("report", str(folder))
    assert result.exit_code == 2 and "re-run 'octrial run'" in result.output


def test_bad_design_is_exit_2(tmp_path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text((DESIGNS / "single-arm-response.toml").read_text()
                   .replace("n = [15, 30, 45]", "n = [15, 45, 30]"))
    out = tmp_path / "out" / "report.html"
    result = invoke("report", str(bad), "--out", str(out))
    assert result.exit_code == 2 and "looks.n" in result.output
    assert not out.parent.exists()


def test_missing_chromium_is_exit_2_and_writes_nothing(runs, tmp_path) -> None:
    out = tmp_path / "report.html"
    result = invoke("report", str(runs["single-arm-response"]), "--out", str(out), "--pdf",
                    env={"OCTRIAL_CHROMIUM": str(tmp_path / "no-such-browser")})
    assert result.exit_code == 2
    assert "headless Chromium" in result.output and "apt-get install chromium" in result.output
    # the library names its setting (pdf); the command line its option
    assert "--pdf: expected" in result.output and "leave out --pdf" in result.output
    assert list(tmp_path.iterdir()) == []


def test_method_with_a_run_folder_is_exit_2(runs) -> None:
    result = invoke("report", str(runs["single-arm-response"]), "--method", "exact")
    assert result.exit_code == 2 and "--method" in result.output


def test_report_help_names_the_options() -> None:
    help_text = invoke("report", "--help").output
    for option in ("--out", "--pdf", "--alpha", "--paper"):
        assert option in help_text


def test_paper_size_and_commands_as_typed(runs) -> None:
    data = from_run_folder(runs["single-arm-response"])
    assert "size: letter;" in render_html(data, paper="letter")
    assert "size: A4;" in render_html(data)
    assert display_command(["/x/site-packages/octrial/__main__.py", "run", "d.toml"]) == [
        "python", "-m", "octrial", "run", "d.toml"]
    assert display_command(["/usr/local/bin/octrial", "report", "r"]) == [
        "octrial", "report", "r"]


def test_precision_of_the_normal_recursion_is_stated_from_run_json(runs) -> None:
    folder = runs["two-arm-continuous-score"]
    record = json.loads((folder / "run.json").read_text())
    precision = text(parse(folder / "report.html").find(".//section[@id='precision']"))
    assert "recursive numerical integration" in precision
    assert "dynamic programming" not in precision
    assert f"is {record['quadrature_error_estimate']:.2g}" in precision
    coverage = record["estimation_error_estimate"]["coverage"]
    assert f"{coverage:.2g}" in precision

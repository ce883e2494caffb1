"""report.html and report.md: built from the manifest and the outputs alone, remade by `landflow report`."""

import json
import re

import pytest

from landflow.cli import main
from landflow.errors import InputError
from landflow.report import rebuild_reports
from landflow.study.run import verify_folder


def test_page_is_self_contained_and_has_every_section(report_run):
    manifest, folder = report_run
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert manifest["caution"] in page
    for name in manifest["settings"]["analyses"]:
        assert f'<section id="{name}">' in page
    # nothing to fetch: no external addresses in src/href, pictures embedded as data
    assert not re.search(r'(src|href)="(https?:)?//', page)
    # every map of the run, and the headline map once more at the top
    assert page.count('src="data:image/png;base64,') == 1 + sum(o["file"].endswith(".png") for o in manifest["outputs"])
    # one pair-table row per pair of the 5 patches
    table = page[page.index('id="pair-table"'):]
    assert table[:table.index("</table>")].count("<tr>") == 1 + 10
    # every input named with its hash; the grid's CRS and cell size
    for item in manifest["inputs"]:
        assert item["sha256"] in page
    assert "EPSG:3035" in page and "20 × 20 map units" in page
    # the manifest lists both reports with the hash of their bytes
    assert verify_folder(folder) == []


def test_key_numbers_in_report_md_carry_units(report_run):
    _, folder = report_run
    text = (folder / "report.md").read_text(encoding="utf-8")
    block = text.split("## Key numbers")[1].split("##")[0]
    lines = [line for line in block.splitlines() if line.startswith("- ")]
    assert len(lines) >= 4
    units = ("resistance x map unit", "probability", "cells", "%", "pair weight")
    for line in lines:
        assert any(u in line for u in units), line


def test_landflow_report_remakes_the_page_without_solving(report_run, monkeypatch, capsys):
    manifest, folder = report_run
    before = (folder / "report.html").read_text(encoding="utf-8")
    (folder / "report.html").unlink()
    (folder / "report.md").unlink()
    import landflow.study.run as run_module
    monkeypatch.setattr(run_module.RunContext, "voltages", property(lambda self: pytest.fail("solved")))
    opened = []
    monkeypatch.setattr("webbrowser.open", lambda uri: opened.append(uri) or True)
    assert main(["report", str(folder), "--open"]) == 0
    after = (folder / "report.html").read_text(encoding="utf-8")
    assert after == before                                   # the same page from the same folder
    assert opened == [(folder / "report.html").resolve().as_uri()]
    assert verify_folder(folder) == []                       # the manifest's hashes still hold


def test_report_of_a_folder_without_manifest_says_so(tmp_path, capsys):
    with pytest.raises(InputError, match="no landflow manifest.json there; give the output folder of a finished run"):
        rebuild_reports(tmp_path)
    assert main(["report", str(tmp_path)]) == 1
    assert "no landflow manifest.json there" in capsys.readouterr().err


def test_run_open_opens_the_page(study, monkeypatch, tmp_path):
    opened = []
    monkeypatch.setattr("webbrowser.open", lambda uri: opened.append(uri) or True)
    assert main(["run", "-q", str(study()), "--open"]) == 0
    page = tmp_path / "results" / "report.html"
    assert opened == [page.resolve().as_uri()]
    manifest = json.loads((tmp_path / "results" / "manifest.json").read_text())
    assert {"report.md", "report.html"} <= {o["file"] for o in manifest["outputs"]}

"""In a real headless Chromium: an SPSS file uploaded and its labels shown, a row filter built
on the page, the baseline table with its Excel and Word downloads, and the report as a Word
document. Screenshots go to tests/artifacts/ for a person to look at."""

from __future__ import annotations

import io
from pathlib import Path

import docx
import openpyxl
import pytest

from tests.app.browser import ARTIFACTS, demo_page, wait_until_idle
from tests.stats_files import coded_trial, write_sav

pytestmark = pytest.mark.browser


def _choose(page, label: str, option: str) -> None:
    """Pick ``option`` in the select box (or multiselect) whose label is ``label``."""
    page.get_by_role("combobox", name=label, exact=True).click()
    page.get_by_role("option", name=option, exact=True).first.click()
    page.keyboard.press("Escape")  # a multiselect stays open for more choices
    wait_until_idle(page)


def _open(page, link: str, marker: str) -> None:
    page.get_by_role("link", name=link).first.click()
    page.get_by_text(marker, exact=False).first.wait_for(timeout=60_000)
    wait_until_idle(page)
    assert page.locator('[data-testid="stException"]').count() == 0, link


def _download(page, label: str) -> bytes:
    with page.expect_download() as download:
        page.get_by_role("button", name=label).first.click()
    return Path(download.value.path()).read_bytes()


def test_filter_builder_and_baseline_table_in_the_browser(server):
    with demo_page(server) as (page, errors):
        _open(page, "Row filters", "Add a filter")
        _choose(page, "Column", "supplier")
        _choose(page, "Values", "Ashford")
        page.get_by_text("would keep", exact=False).first.wait_for(timeout=30_000)
        page.screenshot(path=str(ARTIFACTS / "files_filter_preview.png"), full_page=True)
        page.get_by_role("button", name="Add this filter").click()
        page.get_by_text("Added the filter", exact=False).first.wait_for(timeout=60_000)
        wait_until_idle(page)
        assert page.get_by_text("supplier is one of 'Ashford'", exact=False).count() >= 1
        page.screenshot(path=str(ARTIFACTS / "files_filter_added.png"), full_page=True)
        sidebar = page.locator('[data-testid="stSidebar"]').inner_text()
        assert "of 421" in sidebar.replace("\u202f", " "), sidebar  # Ashford's 421 bearings

        _open(page, "Baseline table", "Percentages are of the non-missing values")
        # the table's header cells are in the data grid's hidden accessible table
        header = page.get_by_text("All rows (n = ", exact=False).first
        header.wait_for(state="attached", timeout=60_000)
        page.screenshot(path=str(ARTIFACTS / "files_baseline.png"), full_page=True)
        book = openpyxl.load_workbook(io.BytesIO(_download(page, "Excel")))
        assert book.sheetnames == ["Table", "Exact values"]
        header = [c.value for c in book["Table"][1]]
        assert header[:2] == ["Variable", "Level"] and header[2].startswith("All rows (n = ")
        document = docx.Document(io.BytesIO(_download(page, "Word")))
        assert document.tables[0].rows[0].cells[0].text == "Variable"

        _open(page, "Save and share", "Share and replay")
        page.get_by_role("button", name="Build the report").click()
        page.get_by_text("Report as Word (.docx)").first.wait_for(timeout=180_000)
        wait_until_idle(page)
        report = docx.Document(io.BytesIO(_download(page, "Report as Word (.docx)")))
        headings = [p.text for p in report.paragraphs if p.style.name.startswith("Heading")]
        assert any(h.startswith("Baseline table") for h in headings), headings
        assert report.inline_shapes, "the report's figures are in the Word document"
        page.screenshot(path=str(ARTIFACTS / "files_share_report.png"), full_page=True)
    assert errors == []


def test_an_uploaded_spss_file_shows_its_labels(server, tmp_path):
    path = write_sav(coded_trial(), tmp_path / "trial.sav")
    with demo_page(server) as (page, errors):
        page.locator('input[type="file"]').first.set_input_files(str(path))
        page.get_by_text("In use: trial.sav", exact=False).first.wait_for(timeout=60_000)
        wait_until_idle(page)
        assert page.get_by_text("Value labels of 3 column(s)", exact=False).count() >= 1
        page.screenshot(path=str(ARTIFACTS / "files_upload_sav.png"), full_page=True)
        _open(page, "Column roles", "Data-quality report")
        page.get_by_text("Codes and their value labels", exact=False).first.click()
        wait_until_idle(page)
        page.screenshot(path=str(ARTIFACTS / "files_value_labels.png"), full_page=True)
        assert page.locator('[data-testid="stException"]').count() == 0
    assert errors == []

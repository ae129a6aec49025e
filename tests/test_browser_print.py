"""The plan and the weekly review printed to PDF by Chromium (page.pdf), on A4 and on Letter: the pages hold the
findings and the cautions, not the menu or the forms, and no section is cut off sideways. Text is read back from
the PDF with pypdf. The demo plant is invented."""

import io

import pypdf
import pytest

from fleet.safety import CAUTION_TITLE

pytestmark = pytest.mark.browser

PAPERS = {"A4": (210, 297), "Letter": (215.9, 279.4)}  # mm (ISO 216; ANSI/ASME Y14.1)
PT_PER_MM = 72 / 25.4


def _printed(page, base_url: str, path: str, paper: str) -> pypdf.PdfReader:
    page.goto(base_url + path)
    page.emulate_media(media="print")
    if path == "/plan":
        page.locator("#plan-chart .main-svg").first.wait_for()
    pdf = page.pdf(format=paper, print_background=True, margin={"top": "12mm", "bottom": "12mm",
                                                                "left": "12mm", "right": "12mm"})
    return pypdf.PdfReader(io.BytesIO(pdf))


@pytest.mark.parametrize("paper", sorted(PAPERS))
def test_the_plan_and_the_review_print_on_a4_and_letter(live_app, page, base_url, browser_login, paper, artifacts):
    browser_login("viewer")
    page.set_viewport_size({"width": 1280, "height": 900})
    for path, must_say in (("/plan", ("Overhaul plan", "spares")), ("/review", ("Weekly review", "Status changes"))):
        reader = _printed(page, base_url, path, paper)
        pages = len(reader.pages)
        text = "\n".join(p.extract_text() for p in reader.pages)
        width_mm, height_mm = PAPERS[paper]
        box = reader.pages[0].mediabox
        assert float(box.width) == pytest.approx(width_mm * PT_PER_MM, abs=1.5)
        assert float(box.height) == pytest.approx(height_mm * PT_PER_MM, abs=1.5)
        assert 1 <= pages <= 12, (path, pages)  # the demo's plan and review fit a handful of pages
        for words in (*must_say, CAUTION_TITLE):
            assert words in text, (path, paper, words)
        for screen_only in ("Sign out", "Add window", "Week ending", "← week before"):
            assert screen_only not in text, (path, paper, screen_only)
        (artifacts / f"print{path.replace('/', '-')}-{paper}.pdf").write_bytes(page.pdf(format=paper))

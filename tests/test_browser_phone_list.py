"""The service list on a phone: a short card per pump, every figure under its label, details on demand."""

import pytest

pytestmark = pytest.mark.browser

PHONE = {"width": 390, "height": 844}
# Measured at 390x844 on the 41 invented demo pumps: 17,635 px when the table rows were stacked without their
# headings, 6,799 px with the short cards. The bound leaves room for longer reasons, not for the old layout.
MAX_HEIGHT_PX = 8000


def test_phone_cards_label_every_figure_and_keep_the_page_short(live_app, page, base_url, browser_login, artifacts):
    browser_login("viewer")
    page.set_viewport_size(PHONE)
    page.goto(base_url + "/")
    assert not page.locator("table.servicelist").is_visible()
    cards = page.locator("li.pump-card")
    assert cards.count() == 41
    # Every value shown has its label: each <dd> on the short card comes right after its <dt>, both visible.
    unlabelled = page.evaluate("""() => Array.from(document.querySelectorAll('li.pump-card .card-short dd'))
        .filter(dd => { const dt = dd.previousElementSibling;
                        return !dt || dt.tagName !== 'DT' || !dt.innerText.trim() || !dt.checkVisibility(); })
        .length""")
    assert unlabelled == 0
    first = cards.first
    assert "η" in first.locator("dt").first.inner_text() and first.locator("dd").first.inner_text().endswith(" %")
    # The details wait behind a tap: the reasons are hidden, then shown.
    reasons = first.locator(".card-reasons")
    assert not reasons.is_visible()
    first.locator("summary").click()
    assert reasons.is_visible() and first.locator("dd", has_text="% of max flow").is_visible()
    first.locator("summary").click()

    height = page.evaluate("document.documentElement.scrollHeight")
    assert height < MAX_HEIGHT_PX, height
    assert page.evaluate("document.documentElement.scrollWidth <= window.innerWidth + 1")
    page.screenshot(path=str(artifacts / "service-list-phone.png"), full_page=False)

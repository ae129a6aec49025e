"""The three jobs end to end in headless Chromium: a round with a hot pump, then the engineer's weekly review."""

import pytest

from tests.test_browser_rounds import _facts, _fill_by_keyboard, _listed

pytestmark = pytest.mark.browser

CALM, HOT = "EY-104", "EY-105"  # invented demo pumps: an internal gear and a vane pump


def test_a_hot_reading_on_the_round_is_a_new_reason_in_the_weekly_review(live_app, page, base_url, demo_db,
                                                                         artifacts, browser_login):
    browser_login("technician")
    before = _listed(page, base_url)
    assert not any("oil temperature" in r.lower() and "above" in r.lower() for r in before[HOT]["reasons"])

    page.goto(base_url + "/rounds")
    page.fill("#route-name", "Morning walk")
    page.fill("#route-pumps", f"{CALM}\n{HOT}")
    page.click("text=Save route")
    page.wait_for_selector(f"text=Stop 1 of 2: pump {CALM}")
    _fill_by_keyboard(page, _facts(demo_db, CALM))

    page.wait_for_selector(f"text=Stop 2 of 2: pump {HOT}")
    hot = {**_facts(demo_db, HOT), "oil_temp": "92"}  # above the vane default limit of 80 degC
    for name, value in hot.items():
        page.fill(f"#f-{name}", value)
    page.click("button[value=save]")
    # The check step doubts the temperature before anything is written; the technician confirms it.
    page.wait_for_selector("button[value=confirm]")
    assert "92" in page.input_value("#f-oil_temp")
    page.click("button[value=confirm]")
    page.wait_for_selector("text=Round complete")

    after = _listed(page, base_url)
    assert after[HOT]["status"] in ("watch", "due_soon", "past_limit")
    new = [r for r in after[HOT]["reasons"] if r not in before[HOT]["reasons"]]
    assert any("92" in r for r in new), after[HOT]["reasons"]

    page.goto(base_url + "/review")
    section = page.locator("#s-new_reason")
    assert HOT in section.inner_text() and "92" in section.inner_text()
    page.screenshot(path=str(artifacts / "review-after-round.png"), full_page=True)

"""In headless Chromium: find a pump from the header's search box, open a reading and correct it with a reason,
then see the correction marked on the pump page. Invented demo plant."""

import pytest
from sqlalchemy import select

from fleet.db.models import AuditRecord, Pump, Reading

pytestmark = pytest.mark.browser

SERIAL = "EY-101"  # invented demo pump


def test_find_a_pump_then_correct_its_newest_reading(live_app, page, base_url, demo_db, artifacts, browser_login):
    browser_login("engineer")
    page.goto(base_url + "/review")
    page.fill("#find-q", "ey-10")  # part of a serial: the matches are listed
    page.press("#find-q", "Enter")
    page.wait_for_selector("text=pump(s) match")
    assert page.url.startswith(base_url + "/find?")
    page.screenshot(path=str(artifacts / "find-matches.png"), full_page=True)
    page.fill("#find-q", SERIAL.lower())  # a whole serial in any case: straight to the pump
    page.press("#find-q", "Enter")
    page.wait_for_selector(f"h1:has-text('{SERIAL}')")
    assert page.url == f"{base_url}/pumps/{SERIAL}"

    with demo_db.sessions() as session:
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == SERIAL))
        newest = session.scalar(select(Reading).where(Reading.pump_id == pump_id)
                                .order_by(Reading.taken_at.desc()).limit(1))
        reading_id, temp = newest.id, newest.temp_c
    page.click(f"a[href='/pumps/{SERIAL}/readings/{reading_id}']")
    page.wait_for_selector("#correction-form")
    page.fill("#c-oil_temp", f"{temp + 2:g}")
    page.fill("#c-reason", "thermometer read again (invented)")
    page.click("text=Correct the reading")
    page.wait_for_selector("text=Corrected oil_temp")
    assert page.is_visible("text=thermometer read again (invented)")
    page.screenshot(path=str(artifacts / "reading-corrected.png"), full_page=True)
    with demo_db.sessions() as session:
        assert session.get(Reading, reading_id).temp_c == pytest.approx(temp + 2)
        record = session.scalar(select(AuditRecord).where(AuditRecord.table_name == "reading",
                                                          AuditRecord.row_id == reading_id))
        assert record.reason == "thermometer read again (invented)" and record.before["temp_c"] == temp

    page.goto(f"{base_url}/pumps/{SERIAL}")
    assert page.locator("table.readings .corrected").count() == 1
    page.set_viewport_size({"width": 375, "height": 800})
    page.goto(base_url + "/find?q=EY")
    page.wait_for_timeout(100)
    # The search box fits a phone's header: nothing wider than the screen.
    box = page.locator("#find-q").bounding_box()
    assert box["x"] + box["width"] <= 375
    page.screenshot(path=str(artifacts / "find-phone.png"), full_page=True)

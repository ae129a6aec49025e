"""End to end in headless Chromium: walk a round for two pumps, see the service list change, see the charts."""

import pytest
from sqlalchemy import func, select

from fleet.db.models import Pump, Reading

pytestmark = pytest.mark.browser

FIRST, SECOND = "EY-104", "EY-105"  # invented demo plant: an internal gear and a vane pump


def _facts(demo_db, serial, extra_hours=9):
    """Plausible typed values of ``serial``: its meter ``extra_hours`` past its last reading, 80 % of rated
    pressure, rated speed, 90 % of theoretical flow."""
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == serial))
        hours = session.scalar(select(func.max(Reading.hours)).where(Reading.pump_id == pump.id))
        return {"hours": f"{hours + extra_hours:.1f}", "outlet_pressure": f"{0.8 * pump.rated_pressure_bar:.1f}",
                "speed": f"{pump.rated_speed_rpm:.0f}",
                "outlet_flow": f"{0.9 * pump.displacement_cc * pump.rated_speed_rpm / 1000:.2f}", "oil_temp": "48"}


def _listed(page, base_url) -> dict:
    rows = page.request.get(base_url + "/index.json?page_size=500").json()["pumps"]
    return {row["pump"]: row for row in rows}


def _fill_by_keyboard(page, values: dict) -> None:
    """Tab through the form in document order, typing each value; Enter in the last field submits."""
    page.focus("#f-hours")
    names = ("hours", "outlet_pressure", "speed", "outlet_flow", "oil_temp")
    for name in names:
        assert page.evaluate("document.activeElement.name") == name
        page.keyboard.type(values[name])
        if name != names[-1]:
            page.keyboard.press("Tab")  # to the unit select
            page.keyboard.press("Tab")  # to the next value
    page.keyboard.press("Enter")


def test_a_round_for_two_pumps_changes_the_service_list(live_app, page, base_url, demo_db, artifacts,
                                                        browser_login):
    browser_login("technician")
    before = _listed(page, base_url)
    page.goto(base_url + "/rounds")
    page.fill("#route-name", "Browser walk")
    page.fill("#route-pumps", f"{FIRST}\n{SECOND}")
    page.click("text=Save route")
    page.wait_for_selector(f"text=Stop 1 of 2: pump {FIRST}")

    _fill_by_keyboard(page, _facts(demo_db, FIRST))
    page.wait_for_selector(f"text=Stop 2 of 2: pump {SECOND}")
    assert page.is_visible(f"text=Saved the reading of {FIRST}")

    page.set_viewport_size({"width": 375, "height": 800})
    page.wait_for_timeout(100)
    # The form fits a phone: nothing wider than the screen, big inputs.
    assert page.evaluate("document.documentElement.scrollWidth") <= 375
    box = page.locator("#f-hours").bounding_box()
    assert box["height"] >= 44 and box["x"] + box["width"] <= 375
    page.screenshot(path=str(artifacts / "round-form-phone.png"), full_page=True)
    values = _facts(demo_db, SECOND)
    for name, value in values.items():
        page.fill(f"#f-{name}", value)
    page.click("button[value=save]")
    page.wait_for_selector("text=Round complete")

    after = _listed(page, base_url)
    for serial in (FIRST, SECOND):
        assert after[serial]["last_reading_at"] > before[serial]["last_reading_at"]
    page.goto(base_url + "/")
    page.screenshot(path=str(artifacts / "service-list-after-round.png"), full_page=True)


def test_the_pump_page_draws_its_charts(live_app, page, base_url, artifacts, browser_login):
    browser_login("viewer")
    page.goto(base_url + f"/pumps/{FIRST}")
    page.wait_for_selector("#chart-efficiency .scatterlayer path.point")
    points = page.locator("#chart-efficiency .scatterlayer path.point").count()
    assert points > 20  # every reading drawn
    assert page.locator("#chart-efficiency .scatterlayer path.js-line").count() >= 2  # fitted trend and forecast
    assert page.locator("#chart-temperature .scatterlayer path.point").count() > 20
    page.screenshot(path=str(artifacts / "pump-page.png"), full_page=True)


def test_doubtful_values_are_shown_in_the_browser_before_saving(live_app, page, base_url, demo_db, artifacts,
                                                                browser_login):
    browser_login("technician")
    page.goto(base_url + "/rounds")
    page.fill("#route-name", "Doubt walk")
    page.fill("#route-pumps", FIRST)
    page.click("text=Save route")
    values = _facts(demo_db, FIRST)
    values["oil_temp"] = "97"
    page.set_viewport_size({"width": 375, "height": 800})
    for name, value in values.items():
        page.fill(f"#f-{name}", value)
    page.keyboard.press("Enter")
    page.wait_for_selector("text=Please look again before saving.")
    assert page.input_value("#f-oil_temp") == "97"
    page.screenshot(path=str(artifacts / "round-form-doubt-phone.png"), full_page=True)
    page.click("button[value=confirm]")
    page.wait_for_selector("text=Round complete")

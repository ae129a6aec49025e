"""One journey per role, in headless Chromium, told the way each person would say it.

- Technician: "I walk my round with the phone; I slip on one value, and one pump runs hot."
- Engineer: "What needs my attention this week, and why?"
- Planner: "Print me the plan for the next shutdown, with the spares to have on the shelf."
"""

import pytest
from markupsafe import escape

from fleet.safety import CAUTION_TITLE, CHECK_NOW_CAUTION, HOT_OIL_CAUTION, RUNNING_TITLE
from tests.test_browser_rounds import _facts

pytestmark = pytest.mark.browser

PHONE, DESKTOP = {"width": 390, "height": 844}, {"width": 1366, "height": 900}
CALM, HOT = "EY-104", "EY-105"  # invented demo pumps: an internal gear and a vane pump (oil limit 80 degC)
CHECK_NOW = "EY-102"  # invented demo pump whose case drain jumped: its reason says to check it now


def _fits(page, selector: str) -> bool:
    """Every element matched lies inside the window's width (nothing runs off to the side)."""
    return page.evaluate(f"""() => Array.from(document.querySelectorAll({selector!r}))
        .every(e => e.getBoundingClientRect().right <= window.innerWidth + 1)""")


def test_technician_walks_a_round_on_a_phone_fixes_a_slip_and_confirms_a_hot_pump(
        live_app, page, base_url, demo_db, artifacts, browser_login):
    browser_login("technician")
    page.set_viewport_size(PHONE)
    page.goto(base_url + "/rounds")
    # Before the walk: what to mind near running pumps, and before any hands-on work.
    assert page.get_by_role("heading", name=RUNNING_TITLE).is_visible()
    assert page.get_by_role("heading", name=CAUTION_TITLE).is_visible()
    page.fill("#route-name", "Press hall, early shift")
    page.fill("#route-pumps", f"{CALM}\n{HOT}")
    page.click("text=Save route")
    page.wait_for_selector(f"text=Stop 1 of 2: pump {CALM}")

    # A slip of the thumb: "1O5" for the speed, letter O for a zero. Nothing is saved, the field is named,
    # and everything typed is still there to correct.
    calm = _facts(demo_db, CALM)
    for name, value in {**calm, "speed": "1O5"}.items():
        page.fill(f"#f-{name}", value)
    page.click("button[value=save]")
    page.wait_for_selector("#form-errors")
    assert "Not saved." in page.locator("#form-errors").inner_text()
    assert page.locator("#form-errors a[href='#f-speed']").is_visible()
    assert page.input_value("#f-outlet_pressure") == calm["outlet_pressure"]
    assert page.input_value("#f-speed") == "1O5"
    assert _fits(page, ".reading-form input, .reading-form button")
    page.screenshot(path=str(artifacts / "journey-technician-slip-phone.png"), full_page=False)
    page.fill("#f-speed", calm["speed"])
    page.click("button[value=save]")

    # The second pump runs hot: the form asks again before saving, with the hot-oil caution beside the question.
    page.wait_for_selector(f"text=Stop 2 of 2: pump {HOT}")
    for name, value in {**_facts(demo_db, HOT), "oil_temp": "95"}.items():
        page.fill(f"#f-{name}", value)
    page.click("button[value=save]")
    page.wait_for_selector("#form-doubts")
    doubts = page.locator("#form-doubts")
    assert "95.0 °C is outside" in doubts.inner_text()
    assert HOT_OIL_CAUTION in doubts.inner_text() and doubts.locator("a[href='#caution']").is_visible()
    doubts.scroll_into_view_if_needed()
    page.screenshot(path=str(artifacts / "journey-technician-hot-oil-phone.png"), full_page=False)
    page.click("button[value=confirm]")  # the technician has looked again: it really is 95 degC
    page.wait_for_selector("text=Round complete")
    listed = {r["pump"]: r for r in page.request.get(base_url + "/index.json?page_size=500").json()["pumps"]}
    assert any("95" in reason for reason in listed[HOT]["reasons"])


def test_engineer_finds_what_needs_attention_this_week_and_why(live_app, page, base_url, artifacts, browser_login):
    browser_login("engineer")
    page.set_viewport_size(DESKTOP)
    # The service list: most urgent first, each with its reasons.
    page.goto(base_url + "/")
    past = page.locator(".tally-past_limit").inner_text()
    assert "Past limit" in past
    first = page.locator("table.servicelist tbody tr").first
    assert "Past limit" in first.locator("td.status").inner_text()
    assert first.locator("td.reasons li").count() >= 1
    assert first.locator("td").nth(4).inner_text().endswith(" %")  # η_v,ref as a percentage
    page.screenshot(path=str(artifacts / "journey-engineer-service-list.png"), full_page=False)

    # The weekly review: what changed this week, and a pump to check now.
    page.goto(base_url + "/review")
    changes = page.locator("#s-status_change")
    assert changes.locator("tbody tr").count() > 0
    assert CHECK_NOW in page.locator("#s-new_reason").inner_text()
    page.screenshot(path=str(artifacts / "journey-engineer-review.png"), full_page=False)

    # Why that pump: its page gives the reason, the caution before anyone opens it up, and the trends.
    changes.locator(f"a:text-is('{CHECK_NOW}')").click()
    page.wait_for_selector(f"h1:text-is('Pump {CHECK_NOW}')")
    assert "check the pump now" in page.locator(".reasons-list").inner_text()
    caution = page.locator("aside.caution#caution")
    assert caution.is_visible() and CAUTION_TITLE in caution.inner_text()
    page.locator("#chart-efficiency .main-svg").first.wait_for()
    assert _fits(page, ".fleet-chart .main-svg")
    page.screenshot(path=str(artifacts / "journey-engineer-pump.png"), full_page=True)

    # And from the list, the urgent pump's card says so on a phone too.
    page.set_viewport_size(PHONE)
    page.goto(base_url + "/")
    card = page.locator(f"li.pump-card:has(a.card-pump:text-is('{CHECK_NOW}'))")
    assert CHECK_NOW_CAUTION in card.inner_text()


def test_planner_prints_the_plan_for_the_next_shutdown_with_its_spares(live_app, page, base_url, artifacts,
                                                                       browser_login):
    browser_login("engineer")
    page.set_viewport_size(DESKTOP)
    page.goto(base_url + "/plan")
    page.locator("#plan-chart .main-svg").first.wait_for()
    plan = page.request.get(base_url + "/plan.json").json()
    upcoming = sorted((w for w in plan["windows"] if not w["past"]), key=lambda w: w["starts_at"])
    assert upcoming, "the invented demo plant has shutdown windows ahead"
    shutdown = upcoming[0]
    # The pumps to overhaul in that shutdown, each with its cost in the site's currency.
    booked = [p for p in plan["pumps"] if p["window_label"] and shutdown["starts_at"] in p["window_label"]]
    assert booked
    for pump in booked:
        row = page.locator(f"table.plan tbody tr:has(a:text-is('{pump['pump']}'))")
        assert shutdown["starts_at"] in row.inner_text()
        if pump["overhaul_cost"] is not None:
            assert row.locator("td[data-label='Overhaul cost']").inner_text().endswith(pump["currency"])
    spares = page.locator("table.kinds tbody tr")
    assert spares.count() == len(plan["kinds"])
    assert any(k["spares_to_hold"] for k in plan["kinds"])

    # Print: the button asks the browser to print; on paper the menu, the buttons and the forms are gone, and the
    # pumps, the spares, the caution and the chart (at a page's width) stay.
    page.evaluate("() => { window.__printed = 0; window.print = () => { window.__printed += 1; }; }")
    page.click("#print-plan")
    assert page.evaluate("window.__printed") == 1
    # Printing for real (Chromium's print to PDF): the chart is drawn at a page's width while printing, then
    # follows the screen again. The widths are noted by listeners that run after the page's own.
    page.evaluate("""() => { window.__widths = [];
        for (const moment of ['beforeprint', 'afterprint']) window.addEventListener(moment, () => window.__widths.push(
            [moment, document.querySelector('#plan-chart .main-svg').getBoundingClientRect().width])); }""")
    page.pdf(path=str(artifacts / "journey-planner-plan.pdf"), format="A4", print_background=True)
    widths = dict(page.evaluate("window.__widths"))
    assert widths["beforeprint"] <= 680 < widths["afterprint"], widths
    # On paper (print styles, an A4 page's width): the menu, the buttons and the forms are gone; the pumps, the
    # spares, the caution and the chart stay.
    page.set_viewport_size({"width": 794, "height": 1123})
    page.emulate_media(media="print")
    for hidden in ("nav.mainnav", "#print-plan", "form.window-form", "form.filters"):
        assert not page.locator(hidden).is_visible(), hidden
    for shown in ("table.plan", "table.kinds", "aside.caution", "#plan-chart"):
        assert page.locator(shown).is_visible(), shown
    # Polled from here: wait_for_function evaluates its text in the page, which the strict CSP forbids.
    for _ in range(100):
        if page.evaluate("document.querySelector('#plan-chart .main-svg').getBoundingClientRect().width"
                         " <= window.innerWidth"):
            break
        page.wait_for_timeout(100)
    assert page.evaluate("document.documentElement.scrollWidth <= window.innerWidth + 1")
    page.screenshot(path=str(artifacts / "journey-planner-plan-print.png"), full_page=True)
    assert str(escape(CAUTION_TITLE)) in page.content()

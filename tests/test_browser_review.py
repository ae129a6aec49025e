"""Weekly review and overhaul plan in headless Chromium, at desktop width and at phone width (375 px)."""

import pytest

pytestmark = pytest.mark.browser


def _no_sideways_scroll(page) -> bool:
    """The page itself never scrolls sideways; wide tables scroll inside their own box."""
    return page.evaluate("document.documentElement.scrollWidth <= window.innerWidth + 1")


def test_weekly_review_desktop_and_phone(live_app, page, base_url, artifacts, browser_login, login):
    browser_login("viewer")
    page.set_viewport_size({"width": 1280, "height": 900})
    page.goto(base_url + "/review")
    assert page.locator("h1").inner_text() == "Weekly review"
    # One row per status change of the last replayed week of the demo (fleet.services.pages.review counts them too).
    changes = login(live_app.test_client(), "viewer").get("/review.json").get_json()["counts"]["status_change"]
    assert changes > 0 and page.locator("#s-status_change table tbody tr").count() == changes
    assert page.locator("#s-energy_loss table tbody tr").count() == 10
    page.screenshot(path=str(artifacts / "review.png"), full_page=True)

    page.set_viewport_size({"width": 375, "height": 740})
    page.goto(base_url + "/review")
    assert page.locator("#s-limit_crossed h2").is_visible()
    assert _no_sideways_scroll(page)
    page.screenshot(path=str(artifacts / "review-phone.png"), full_page=True)

    # Printed, the menu and the week picker are gone and the findings stay.
    page.emulate_media(media="print")
    assert not page.locator("nav.mainnav").is_visible()
    assert not page.locator("form.filters").is_visible()
    assert page.locator("#s-energy_loss table").is_visible()


def test_overhaul_plan_chart_draws(live_app, page, base_url, artifacts, browser_login):
    browser_login("viewer")
    errors = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    page.set_viewport_size({"width": 1280, "height": 900})
    page.goto(base_url + "/plan")
    chart = page.locator("#plan-chart")
    chart.locator(".main-svg").first.wait_for()
    rows = page.locator("table.plan tbody tr").count()
    assert rows > 0
    # One expected-date marker per pump in the table, drawn by plotly as SVG points.
    assert chart.locator(".scatterlayer .trace .points path").count() == rows
    assert page.locator("aside.caution").is_visible()
    assert errors == []
    page.screenshot(path=str(artifacts / "plan.png"), full_page=True)

    page.set_viewport_size({"width": 375, "height": 740})
    page.goto(base_url + "/plan")
    page.locator("#plan-chart .main-svg").first.wait_for()
    assert _no_sideways_scroll(page)
    page.screenshot(path=str(artifacts / "plan-phone.png"), full_page=True)


def _lines(page, selector: str) -> list[int]:
    """How many lines each inline element matched takes (a word broken over two lines has two boxes)."""
    return page.evaluate(f"""() => Array.from(document.querySelectorAll({selector!r}))
        .map(e => new Set(Array.from(e.getClientRects()).map(r => Math.round(r.top))).size)""")


def test_serials_and_dates_are_never_broken_at_their_hyphen(live_app, page, base_url, browser_login):
    """At a desk's width the narrow columns used to read 'EY-' / '203' and '2025-' / '08-08'."""
    browser_login("viewer")
    page.set_viewport_size({"width": 1366, "height": 900})
    for path in ("/review", "/", "/plan"):
        page.goto(base_url + path)
        serials = _lines(page, "table th[scope=row] > a:first-child")
        assert serials and set(serials) == {1}, (path, serials)
    page.goto(base_url + "/")
    dates = _lines(page, "table .day")
    assert dates and set(dates) == {1}, dates

"""The forecast record in headless Chromium: one marker per scored forecast, at desktop and phone width."""

import pytest

pytestmark = pytest.mark.browser


def test_forecast_record_plot_draws(live_app, page, base_url, artifacts, browser_login, login):
    browser_login("viewer")
    errors = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    page.set_viewport_size({"width": 1280, "height": 900})
    page.goto(base_url + "/forecasts")
    assert page.locator("h1").inner_text() == "Forecast record"
    chart = page.locator("#forecast-record-chart")
    chart.locator(".main-svg").first.wait_for()
    data = login(live_app.test_client(), "viewer").get("/forecasts.json").get_json()
    dated = [r for r in data["forecasts"] if r["error_days"] is not None]
    assert chart.locator(".scatterlayer .trace .points path").count() == len(dated) > 0
    assert page.locator("table.forecast-summary tbody tr").count() == len(data["summary"])
    assert errors == []
    page.screenshot(path=str(artifacts / "forecasts.png"), full_page=True)

    page.set_viewport_size({"width": 375, "height": 740})
    page.goto(base_url + "/forecasts")
    page.locator("#forecast-record-chart .main-svg").first.wait_for()
    assert page.evaluate("document.documentElement.scrollWidth <= window.innerWidth + 1")
    page.screenshot(path=str(artifacts / "forecasts-phone.png"), full_page=True)

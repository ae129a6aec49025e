"""Every chart fits its card from the first paint, at desktop and phone sizes, with no online tools in its toolbar.

A full-page screenshot hides a chart drawn wider than its card (the card clips it), so this measures boxes.
"""

import pytest

pytestmark = pytest.mark.browser

DESKTOP, PHONE = {"width": 1366, "height": 900}, {"width": 390, "height": 844}
# Invented demo pumps: EY-101 a variable piston pump with a case drain (efficiency, drain, temperature,
# cleanliness charts); RS-502 one with a multi-point flow test (its fifth chart).
PAGES = {"/pumps/EY-101": 4, "/pumps/RS-502": 4, "/plan": 1}

# Each drawn chart: the width of plotly's SVG and of its plot <div>, against the content box of the card holding it.
MEASURE = """() => Array.from(document.querySelectorAll('.fleet-chart')).map(div => {
  const box = div.parentElement, style = getComputedStyle(box);
  const inner = box.clientWidth - parseFloat(style.paddingLeft) - parseFloat(style.paddingRight);
  const svg = div.querySelector('.main-svg');
  return {id: div.id, svg: svg ? svg.getBoundingClientRect().width : null,
          div: div.getBoundingClientRect().width, card: inner};
})"""


@pytest.mark.parametrize("size", [DESKTOP, PHONE], ids=["desktop-1366", "phone-390"])
def test_every_chart_is_no_wider_than_its_card(live_app, page, base_url, browser_login, artifacts, size):
    browser_login("viewer")
    page.set_viewport_size(size)
    for path, at_least in PAGES.items():
        errors = []
        page.on("pageerror", lambda exc, errors=errors: errors.append(str(exc)))
        page.goto(base_url + path)
        # Measured as soon as the last chart has drawn: no window resize, no waiting for a redraw.
        # Polled from here: wait_for_function evaluates its text in the page, which the strict CSP forbids.
        for _ in range(200):
            if page.evaluate("document.querySelectorAll('.fleet-chart').length > 0 && "
                             "Array.from(document.querySelectorAll('.fleet-chart'))"
                             ".every(d => d.querySelector('.main-svg'))"):
                break
            page.wait_for_timeout(50)
        charts = page.evaluate(MEASURE)
        assert len(charts) >= at_least, (path, charts)
        for chart in charts:
            assert chart["svg"] is not None, (path, chart)
            assert chart["svg"] <= chart["card"] + 0.5 and chart["div"] <= chart["card"] + 0.5, (path, size, chart)
            assert chart["svg"] >= 0.9 * chart["card"], (path, size, chart)  # and it uses the card's width
        assert page.evaluate("document.documentElement.scrollWidth <= window.innerWidth + 1"), path
        assert errors == [], (path, errors)
    page.screenshot(path=str(artifacts / f"charts-plan-{size['width']}.png"), full_page=False)


def test_the_chart_toolbar_keeps_offline_tools_only(live_app, page, base_url, browser_login):
    browser_login("viewer")
    page.set_viewport_size(DESKTOP)
    for path in ("/pumps/EY-101", "/plan"):
        page.goto(base_url + path)
        page.locator(".fleet-chart .modebar").first.wait_for(state="attached")
        titles = page.evaluate("Array.from(document.querySelectorAll('.fleet-chart .modebar-btn'))"
                               ".map(b => b.getAttribute('data-title'))")
        assert any("png" in t.lower() for t in titles), titles  # save as PNG stays
        assert any("zoom" in t.lower() for t in titles) and any("pan" in t.lower() for t in titles), titles
        for word in ("cloud", "studio", "edit", "share", "plotly", "upload"):
            assert not any(word in t.lower() for t in titles), (word, titles)
        assert page.locator(".fleet-chart a[href*='plot.ly'], .fleet-chart a[href*='plotly.com']").count() == 0

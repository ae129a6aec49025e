"""The pump page as the server makes it and as a user waits for it.

    python3 -m benchmarks.pump_page sqlite:////tmp/copy/fleet.sqlite BX-00001              # server only
    python3 -m benchmarks.pump_page sqlite:////tmp/copy/fleet.sqlite BX-00001 --browser    # and Chromium

Server: the page and its JSON twin through the Flask test client, medians of 20 after one warm-up request (as
benchmarks.run measures the page). Browser: headless Chromium (Playwright, Debian's /usr/bin/chromium or
$CHROMIUM_PATH) signed in as a viewer, from the start of each navigation to every chart of the page drawn; the first
visit, which also fetches plotly.min.js, is reported apart. Run it on a copy of a benchmark database: it adds a
user (``bench-page-viewer``) and sessions. The load average is printed beside the figures.
"""

import argparse
import os
import statistics
import threading
import time

from benchmarks.run import _median_ms, _sign_in

VIEWER, PASSWORD = "bench-page-viewer", "invented benchmark password"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]
# Every chart's plot has its traces in place (plotly's SVG layer of scatter traces).
DRAWN = ("document.querySelectorAll('.fleet-chart').length > 0 && "
         "Array.from(document.querySelectorAll('.fleet-chart')).every(d => d.querySelector('.main-svg .scatterlayer'))")


def server_ms(url: str, serial: str, times: int = 20) -> dict:
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": url, "TESTING": True})
    client = app.test_client()
    _sign_in(app, client)
    client.get("/")  # templates compiled, connections open
    out = {}
    for name, path in (("page_ms", f"/pumps/{serial}"), ("json_ms", f"/pumps/{serial}.json")):
        client.get(path)
        out[name] = _median_ms(client, path, times)
    return out


def _ensure_viewer(app) -> None:
    from sqlalchemy import select

    from fleet.db.models import User
    from fleet.db.transaction import run_write
    from fleet.services.users import create_user

    def work(session):
        if session.scalar(select(User).where(User.name == VIEWER)) is None:
            create_user(session, VIEWER, "viewer", PASSWORD)

    run_write(app.extensions["fleet_db"], work)


def browser_ms(url: str, serial: str, times: int = 7) -> dict:
    from playwright.sync_api import sync_playwright
    from werkzeug.serving import make_server

    from fleet.web import create_app

    app = create_app({"DATABASE_URL": url, "SECRET_KEY": "benchmark"})
    _ensure_viewer(app)
    server = make_server("127.0.0.1", 0, app, threaded=True)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    base = f"http://127.0.0.1:{server.server_port}"
    waits = []
    try:
        with sync_playwright() as playwright:
            browser = playwright.chromium.launch(
                executable_path=os.environ.get("CHROMIUM_PATH", "/usr/bin/chromium"), args=CHROMIUM_ARGS)
            page = browser.new_page(viewport={"width": 1366, "height": 900})
            page.goto(base + "/login")
            page.fill("#f-name", VIEWER)
            page.fill("#f-password", PASSWORD)
            page.click("button:has-text('Sign in')")
            page.wait_for_selector("#signed-in-as")
            for _ in range(times + 1):
                started = time.perf_counter()
                page.goto(base + f"/pumps/{serial}", wait_until="commit")
                while not page.evaluate(DRAWN):  # polled: the page's CSP refuses wait_for_function's eval
                    page.wait_for_timeout(5)
                waits.append(1000.0 * (time.perf_counter() - started))
            charts = page.evaluate("document.querySelectorAll('.fleet-chart .main-svg .scatterlayer').length")
            browser.close()
    finally:
        server.shutdown()
    return {"browser_first_ms": waits[0], "browser_ms": statistics.median(waits[1:]), "charts": charts}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("url", help="database URL (a copy: the browser measure adds a user)")
    parser.add_argument("serial", help="the pump whose page is opened")
    parser.add_argument("--browser", action="store_true", help="also time headless Chromium")
    args = parser.parse_args()
    start = os.getloadavg()
    figures = server_ms(args.url, args.serial)
    if args.browser:
        figures.update(browser_ms(args.url, args.serial))
    end = os.getloadavg()
    print(f"pump {args.serial}: page {figures['page_ms']:.0f} ms, JSON twin {figures['json_ms']:.0f} ms "
          "(Flask test client, medians of 20)")
    if args.browser:
        print(f"Chromium, navigation to all {figures['charts']} charts drawn: {figures['browser_ms']:.0f} ms "
              f"(median of 7; the first visit, fetching plotly.min.js, {figures['browser_first_ms']:.0f} ms)")
    print("load average at start / end: " + " ".join(f"{v:.2f}" for v in start) + " / "
          + " ".join(f"{v:.2f}" for v in end))


if __name__ == "__main__":
    main()

"""The pump page: headline, charts, history and the readings table, with its JSON and CSV twins."""

import re

from flask import Blueprint, redirect, render_template, request, url_for

from fleet.charts.pump import page_charts
from fleet.db.queries import pump_by_serial, serials_any_case
from fleet.services.pages.pump import READING_COLUMNS, pump_page, readings_in_site_units
from fleet.web.db import session
from fleet.web.lookup import pump_or_404
from fleet.web.respond import is_table_format, respond, twin_routes, twin_urls, wants_json

bp = Blueprint("pumps", __name__)


@twin_routes(bp, "/pumps/<path:serial>")
def page(serial, fmt):
    canonical = _canonical_serial(serial)
    if canonical != serial:  # /pumps/ey-302 answers for EY-302, at the one address the pump has
        args = {**request.args.to_dict(), "fmt": fmt} if fmt else request.args.to_dict()
        return redirect(url_for("pumps.page", serial=canonical, **args), 301)
    pump_or_404(serial, fmt)
    data = pump_page(session(), serial)
    if wants_json(fmt) or is_table_format(fmt):
        columns = READING_COLUMNS
        if request.args.get("units") == "site":  # canonical unless asked: ?units=site
            data["readings"], columns = readings_in_site_units(data)
        return respond(data, "pumps/page.html", fmt, "readings", columns, _filename(serial))
    return render_template("pumps/page.html", twins=twin_urls(), charts=page_charts(data), **data)


def _canonical_serial(serial: str) -> str:
    """The stored serial a URL names regardless of letter case; ``serial`` itself when it is stored as typed or
    when none or several serials match it (the page's 404 then says so)."""
    if pump_by_serial(session(), serial) is not None:
        return serial
    matches = serials_any_case(session(), serial)
    return matches[0] if len(matches) == 1 else serial


def _filename(serial: str) -> str:
    return "pump-" + re.sub(r"[^A-Za-z0-9._-]+", "_", serial)

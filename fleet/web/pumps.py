"""The pump page: headline, charts, history and the readings table, with its JSON and CSV twins."""

import re

from flask import Blueprint, render_template, request

from fleet.charts.pump import page_charts
from fleet.services.pages.pump import READING_COLUMNS, pump_page, readings_in_site_units
from fleet.web.db import session
from fleet.web.lookup import pump_or_404
from fleet.web.respond import is_table_format, respond, twin_routes, twin_urls, wants_json

bp = Blueprint("pumps", __name__)


@twin_routes(bp, "/pumps/<path:serial>")
def page(serial, fmt):
    pump_or_404(serial, fmt)
    data = pump_page(session(), serial)
    if wants_json(fmt) or is_table_format(fmt):
        columns = READING_COLUMNS
        if request.args.get("units") == "site":  # canonical unless asked: ?units=site
            data["readings"], columns = readings_in_site_units(data)
        return respond(data, "pumps/page.html", fmt, "readings", columns, _filename(serial))
    return render_template("pumps/page.html", twins=twin_urls(), charts=page_charts(data), **data)


def _filename(serial: str) -> str:
    return "pump-" + re.sub(r"[^A-Za-z0-9._-]+", "_", serial)

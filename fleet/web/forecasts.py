"""The forecast record: how this fleet's past forecasts compare with what happened."""

from flask import Blueprint

from fleet.charts.forecasts import record_html
from fleet.services.pages.forecasts import SUMMARY_COLUMNS, forecast_record_page
from fleet.web.db import session
from fleet.web.respond import respond, twin_routes, wants_json

bp = Blueprint("forecasts", __name__)


@twin_routes(bp, "/forecasts")
def index(fmt):
    data = forecast_record_page(session())
    extra = {}
    if fmt is None and not wants_json(fmt) and data["forecasts"]:
        extra["chart_html"] = record_html(data)  # HTML only: the twins carry the data, not the drawing
    return respond({**data, **extra}, "forecasts/index.html", fmt, "summary", SUMMARY_COLUMNS, "forecast-record")

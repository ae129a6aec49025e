"""The pump page: headline, charts, history and the readings table, with its JSON and CSV twins."""

import re

import pandas as pd
from flask import Blueprint, abort, jsonify, render_template

from fleet import charts
from fleet.physics.cleanliness import parse_code
from fleet.services.pumppage import READING_COLUMNS, pump_page
from fleet.web.db import session
from fleet.web.respond import respond, twin_routes, twin_urls, wants_json

bp = Blueprint("pumps", __name__)


@twin_routes(bp, "/pumps/<path:serial>")
def page(serial, fmt):
    data = pump_page(session(), serial)
    if data is None:
        if wants_json(fmt):
            return jsonify({"error": f"no pump '{serial}' in the register"}), 404
        abort(404, description=f"No pump '{serial}' in the register.")
    if wants_json(fmt) or fmt == "csv":
        return respond(data, "pumps/page.html", fmt, "readings", READING_COLUMNS, _filename(serial))
    return render_template("pumps/page.html", twins=twin_urls(), charts=page_charts(data), **data)


def _filename(serial: str) -> str:
    return "pump-" + re.sub(r"[^A-Za-z0-9._-]+", "_", serial)


def page_charts(data: dict) -> dict[str, str]:
    """The page's plotly figures as HTML snippets, built from the same data the JSON twin carries."""
    out = {}
    readings = pd.DataFrame(data["readings"], columns=list(READING_COLUMNS))
    events = pd.DataFrame(data["events"], columns=["date", "chart_hours", "kind_label"])
    limits = data["limits"]
    if len(readings):
        readings = readings.astype({c: float for c in ("hours", "eta_v", "eta_v_ref", "case_drain_pct",
                                                       "case_drain_pct_ref", "oil_temp_c")})
        band = pd.DataFrame(data["trend"]["points"]) if data["trend"] else None
        out["efficiency"] = charts.figure_html(
            charts.efficiency_figure(readings, band, limits["eta_v_limit"], events), "chart-efficiency")
        if data["pump"]["case_drain"]:
            out["drain"] = charts.figure_html(
                charts.drain_figure(readings, limits["drain_limit_pct"], events), "chart-drain")
        out["temperature"] = charts.figure_html(
            charts.temperature_figure(readings, limits["oil_temp_min_c"], limits["oil_temp_max_c"], events),
            "chart-temperature")
    if data["samples"]:
        samples = pd.DataFrame(data["samples"]).astype({"code_4": float, "code_6": float, "code_14": float})
        out["cleanliness"] = charts.figure_html(
            charts.cleanliness_figure(samples, _target(limits["cleanliness_target"])), "chart-cleanliness")
    if data["flow_test"]:
        test = data["flow_test"]
        out["flow_test"] = charts.figure_html(
            charts.flow_test_figure(pd.DataFrame(test["points"]), pd.DataFrame(test["baseline"])), "chart-flowtest")
    return out


def _target(code: str | None):
    if not code:
        return None
    try:
        return parse_code(code).channels()
    except ValueError:
        return None

"""The overhaul plan: forecast limit dates against the shutdown windows the planner enters."""

from flask import Blueprint, abort, flash, jsonify, redirect, request, url_for

from fleet.charts.plan import timeline_html
from fleet.services.pages.plan import (
    CSV_COLUMNS,
    DEFAULT_WEEKS,
    add_window,
    csv_rows,
    delete_window,
    overhaul_plan,
)
from fleet.services.writes import perform
from fleet.services.writes.forms import FormRejected
from fleet.web.auth import requires
from fleet.web.db import session, sessions
from fleet.web.respond import respond, twin_routes, wants_json

bp = Blueprint("plan", __name__)


def _weeks() -> int:
    return request.args.get("weeks", DEFAULT_WEEKS, type=int) or DEFAULT_WEEKS


def _page(fmt, window_form: dict | None = None, window_errors: dict | None = None, status: int = 200):
    data = overhaul_plan(session(), _weeks())
    data["window_form"] = window_form or {}
    data["window_errors"] = window_errors or {}
    extra = {}
    if fmt is None and not wants_json(fmt):
        extra["chart_html"] = timeline_html(data)  # HTML only: the twins carry the data, not the drawing
    if fmt == "csv":
        extra["pumps"] = csv_rows(data["pumps"])  # rounded and with window names; the JSON keeps every digit
    return respond({**data, **extra}, "plan/overhaul.html", fmt, "pumps", CSV_COLUMNS, "overhaul-plan", status)


@twin_routes(bp, "/plan")
def overhaul(fmt):
    return _page(fmt)


@bp.post("/plan/windows")
@requires("engineer")
def add(fmt=None):
    values = request.form.to_dict()
    try:
        window = perform(sessions(), lambda db: add_window(db, values)).value
    except FormRejected as rejected:
        return _page(fmt, values, rejected.errors, status=400)
    if wants_json(fmt):
        return jsonify({"saved": window.id}), 201
    flash(f"Shutdown window {window.starts_at:%Y-%m-%d} to {window.ends_at:%Y-%m-%d} added.", "saved")
    return redirect(url_for("plan.overhaul", weeks=_weeks()))


@bp.post("/plan/windows/<int:window_id>/delete")
@requires("engineer")
def delete(window_id: int):
    if not perform(sessions(), lambda db: delete_window(db, window_id)).value:
        abort(404)
    flash("Shutdown window removed.", "saved")
    return redirect(url_for("plan.overhaul", weeks=_weeks()))

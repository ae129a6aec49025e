"""A reading's page and its correction form: new values and a reason, through the one write path.

The form sends every value; only those typed differently from what the page showed (or in another unit) are
corrections, so an untouched field never counts as one.
"""

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for

from fleet.db.queries import serials_any_case
from fleet.services.corrections import CORRECTABLE, CorrectionRefused, correct_reading
from fleet.services.pages.reading import CORRECTION_COLUMNS, reading_page
from fleet.services.writes import perform
from fleet.timeutil import utcnow
from fleet.web.auth import requires, signed_in_user
from fleet.web.db import session, sessions
from fleet.web.respond import TWIN_FORMATS, respond, twin_routes

bp = Blueprint("corrections", __name__)


def _page_data(serial: str, reading_id: int) -> dict:
    user = signed_in_user()
    data = reading_page(session(), serial, reading_id, user.role, user.name, utcnow())
    if data is None:
        abort(404, description=f"Pump '{serial}' has no reading #{reading_id}.")
    return data


@twin_routes(bp, "/pumps/<path:serial>/readings/<int:reading_id>")
def page(serial, reading_id, fmt):
    canonical = serials_any_case(session(), serial)
    if serial not in canonical and len(canonical) == 1:  # the serial in any letter case, as the pump page
        args = {"fmt": fmt} if fmt else {}
        return redirect(url_for("corrections.page", serial=canonical[0], reading_id=reading_id, **args), 301)
    data = _page_data(serial, reading_id)
    return respond(data, "pumps/reading.html", fmt, "corrections", CORRECTION_COLUMNS, f"reading-{reading_id}")


@bp.post("/pumps/<path:serial>/readings/<int:reading_id>")
@requires("technician")
def correct(serial, reading_id):
    data = _page_data(serial, reading_id)
    form = request.form
    values, chosen = {}, {}
    for shown in data["fields"]:
        name = shown["name"]
        if name not in form:
            continue
        text, unit = form.get(name, "").strip(), form.get(f"{name}_unit", "")
        in_other_unit = bool(shown["units"]) and unit and unit != shown["units"][0]
        if text != shown["text"] or in_other_unit:
            values[name] = text
            if in_other_unit:
                chosen[name] = unit
    reason = form.get("reason", "")
    name = signed_in_user().name
    try:
        done = perform(sessions(), lambda db: correct_reading(db, reading_id, values, reason, name, chosen)).value
    except CorrectionRefused as refused:
        errors: dict[str, list[str]] = {}
        for problem in refused.problems:
            errors.setdefault(problem["field"] if problem["field"] in CORRECTABLE or problem["field"] == "reason"
                              else "", []).append(problem["reason"])
        twins = {fmt: url_for("corrections.page", serial=serial, reading_id=reading_id, fmt=fmt)
                 for fmt in TWIN_FORMATS}
        return render_template("pumps/reading.html", twins=twins, errors=errors, typed=form, **data), refused.status
    changed = ", ".join(c["field"] for c in done.changes)
    flash(f"Corrected {changed} of reading #{reading_id}; the old values are kept with your reason.", "saved")
    for doubt in done.doubts:
        flash(f"Please look again: {doubt['message']}", "info")
    return redirect(url_for("corrections.page", serial=serial, reading_id=reading_id))

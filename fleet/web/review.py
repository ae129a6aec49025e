"""The weekly review: what changed in one week; printable and exportable."""

from datetime import date

from flask import Blueprint, abort, request

from fleet.services.pages.review import CSV_COLUMNS, weekly_review
from fleet.web.db import session
from fleet.web.respond import respond, twin_routes

bp = Blueprint("review", __name__)


def _week() -> date | None:
    text = request.args.get("week") or ""
    if not text:
        return None
    try:
        return date.fromisoformat(text)
    except ValueError:
        abort(400, description=f"week '{text}' is not a date (write YYYY-MM-DD)")


@twin_routes(bp, "/review")
def weekly(fmt):
    week = _week()
    data = weekly_review(session(), week)
    name = f"weekly-review-{week.isoformat()}" if week else "weekly-review"
    return respond(data, "review/weekly.html", fmt, "items", CSV_COLUMNS, name)

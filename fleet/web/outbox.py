"""The outbox, for engineers: mail waiting, failed with its error, and sent; a button sends what waits now."""

from flask import Blueprint, flash, jsonify, redirect, url_for

from fleet.services.mail.outbox import make_due
from fleet.services.pages.outbox import CSV_COLUMNS, outbox_page
from fleet.services.writes import perform
from fleet.web.auth import requires
from fleet.web.db import session, sessions
from fleet.web.respond import respond, twin_routes, wants_json

bp = Blueprint("outbox", __name__)


@twin_routes(bp, "/outbox")
@requires("engineer")
def index(fmt):
    return respond(outbox_page(session()), "outbox/index.html", fmt, "mails", CSV_COLUMNS, "outbox")


@bp.post("/outbox/retry")
@requires("engineer")
def retry():
    outcome = perform(sessions(), make_due)  # the unit of work sends what is due after it commits
    delivery = outcome.mail
    if wants_json(None):
        return jsonify({"waiting": outcome.value, "sent": delivery.sent if delivery else 0,
                        "failed": delivery.failed if delivery else 0})
    if delivery is not None:
        flash(f"Outbox: {delivery.describe()}.", "error" if delivery.failed else "saved")
    elif outcome.value:
        flash("Mail is off (FLEET_SMTP_URL is not set): the mail waits here.", "error")
    else:
        flash("The outbox holds nothing to send.", "saved")
    return redirect(url_for("outbox.index"))

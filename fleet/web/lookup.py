"""The pump a URL names, or a 404 that says so: one helper for every view."""

from flask import abort, jsonify, make_response

from fleet.db.queries import pump_by_serial
from fleet.web.db import session
from fleet.web.respond import wants_json


def pump_or_404(serial: str, fmt: str | None = None):
    """The pump with ``serial``; else the request ends with 404 (JSON for a twin or an API client)."""
    pump = pump_by_serial(session(), serial)
    if pump is None:
        reason = f"no pump '{serial}' in the register"
        if wants_json(fmt):
            abort(make_response(jsonify({"error": reason}), 404))
        abort(404, description=f"No pump '{serial}' in the register.")
    return pump

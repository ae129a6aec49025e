"""Find a pump from the search box in every page's header: jump to the one match, or list them all."""

from flask import Blueprint, redirect, request, url_for

from fleet.services.pages.find import MATCH_COLUMNS, find_pumps
from fleet.web.db import session
from fleet.web.respond import is_table_format, respond, twin_routes, wants_json

bp = Blueprint("find", __name__)


@twin_routes(bp, "/find")
def index(fmt):
    data = find_pumps(session(), request.args.get("q", ""))
    if data["jump"] and not (wants_json(fmt) or is_table_format(fmt)):
        return redirect(url_for("pumps.page", serial=data["jump"]))
    return respond(data, "find/index.html", fmt, "matches", MATCH_COLUMNS, "find")

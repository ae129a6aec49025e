"""The landing page: units due for service first."""

from flask import Blueprint, current_app, request

from fleet.services.pages.service_list import CSV_COLUMNS, ListQuery, service_list
from fleet.web.db import session
from fleet.web.respond import respond, twin_routes

bp = Blueprint("service_list", __name__)


def _query() -> ListQuery:
    args = request.args
    return ListQuery(
        site=args.get("site") or None,
        machine=args.get("machine") or None,
        kind=args.get("kind") or None,
        status=args.get("status") or None,
        sort=args.get("sort", "urgency"),
        page=args.get("page", 1, type=int) or 1,
        page_size=min(args.get("page_size", current_app.config["PAGE_SIZE"], type=int) or 50, 500),
    )


@twin_routes(bp, "/", json_rule="/index")
def index(fmt):
    data = service_list(session(), _query())
    return respond(data, "service_list.html", fmt, "pumps", CSV_COLUMNS, "service-list")

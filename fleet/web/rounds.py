"""Rounds: pick or make a route, then walk it with one quick reading form per pump.

The form works without JavaScript: "Check and save" runs the importer's validation and the plausibility
checks first; doubtful values come back with the reasons and a "Save as typed" button; refused values come
back with every typed value kept. Each stop's form speaks its pump's site: times in the site's zone, numbers in
its units (a unit chosen instead is remembered per site in a cookie), a decimal comma where the site allows one.
"""

from pathlib import Path
from urllib.parse import parse_qsl, urlencode

from flask import (
    Blueprint,
    Response,
    abort,
    current_app,
    flash,
    jsonify,
    make_response,
    redirect,
    render_template,
    request,
    url_for,
)
from flask_wtf.csrf import generate_csrf

from fleet import units
from fleet.io.localtime import form_value
from fleet.io.parse import ImportRejected
from fleet.services import rounds, sitelocal
from fleet.services.posted_readings import PLACE_PARTS
from fleet.services.writes import perform
from fleet.timeutil import utcnow
from fleet.web.auth import current_actor, requires, signed_in_user
from fleet.web.db import session, sessions
from fleet.web.lookup import pump_or_404
from fleet.web.respond import TWIN_FORMATS, is_table_format, respond, twin_routes, twin_urls, wants_json

bp = Blueprint("rounds", __name__)

UNIT_COOKIE = "fleet_units"
UNIT_COOKIE_AGE_S = 365 * 24 * 3600
ROUTE_COLUMNS = ("id", "name", "stops", "pumps")
STOP_COLUMNS = ("number", "pump", "kind_label", "site", "machine", "position", "last_reading_at", "last_hours",
                "read_today")


# --- routes ------------------------------------------------------------------------------------------------

@twin_routes(bp, "/rounds")
def index(fmt):
    data = rounds.route_list(session())
    if wants_json(fmt) or is_table_format(fmt):
        return respond(data, "rounds/index.html", fmt, "rows", ROUTE_COLUMNS, "routes")
    return render_template("rounds/index.html", twins=twin_urls_for_index(), keep_urls=[url_for("rounds.index")],
                           rules_url=None, labels=rounds.LABELS, **data)


@bp.post("/rounds")
@requires("technician")
def create():
    form = request.form
    serials = rounds.parse_serials(form.get("pumps", ""))
    try:
        route = perform(sessions(), lambda db: rounds.create_route(db, form.get("name", ""), serials,
                                                                     form.get("note"))).value
    except rounds.RouteError as error:
        data = rounds.route_list(session())
        if wants_json(None):
            return {"problems": error.problems}, 422
        return render_template("rounds/index.html", twins=twin_urls_for_index(), errors=error.problems,
                               form=form, keep_urls=[], rules_url=None, labels=rounds.LABELS, **data), 422
    flash(f"Route '{route.name}' saved with {len(route.stops)} pump(s).", "info")
    return redirect(url_for("rounds.walk", route_id=route.id))


def twin_urls_for_index() -> dict[str, str]:
    return {fmt: url_for("rounds.index", fmt=fmt) for fmt in TWIN_FORMATS}


# --- walking a route ---------------------------------------------------------------------------------------

@twin_routes(bp, "/rounds/<int:route_id>")
def walk(route_id, fmt):
    data = rounds.route_walk(session(), route_id)
    if data is None:
        abort(404, description="No such route.")
    if wants_json(fmt) or is_table_format(fmt):
        return respond(data, "rounds/walk.html", fmt, "stops", STOP_COLUMNS, f"route-{route_id}")
    number = request.args.get("stop", type=int) or _first_unread(data["stops"])
    return _render_walk(data, number, values={}, chosen=None, twins=twin_urls())


@bp.post("/rounds/<int:route_id>/stops/<int:number>")
@requires("technician")
def reading(route_id, number):
    db = session()
    data = rounds.route_walk(db, route_id)
    if data is None or not 1 <= number <= len(data["stops"]):
        abort(404, description="No such stop on this route.")
    stop = data["stops"][number - 1]
    pump = pump_or_404(stop["pump"])
    form = request.form
    fields = rounds.fields_for(pump)
    values = {f.name: form.get(f.name, "") for f in fields}
    values.update(taken_at=form.get("taken_at", ""), note=form.get("note", ""), taken_by=form.get("taken_by", ""))
    conventions = sitelocal.of_pump(db, pump)
    chosen = _chosen_units(form, conventions)
    # A blank 'taken by' is the signed-in technician; a name typed in (a colleague's reading) is kept.
    table = rounds.reading_table(pump.serial, values["taken_at"], {f.name: values[f.name] for f in fields}, chosen,
                                 values["note"], values["taken_by"].strip() or current_actor())
    action = form.get("action", "save")
    outcome = rounds.check_reading(db, pump, table)
    confirmed = set(filter(None, form.get("confirmed", "").split(",")))
    doubts = {d.code for d in outcome.warnings}
    if outcome.problems or action == "check" or (doubts and not (action == "confirm" and doubts <= confirmed)):
        status = 422 if outcome.problems else 200
        page = _render_walk(data, number, values=values, chosen=chosen, outcome=outcome, checked=True,
                            twins={fmt: url_for("rounds.walk", route_id=route_id, fmt=fmt) for fmt in TWIN_FORMATS})
        return _remember_units(page, chosen, conventions), status
    try:
        saved = rounds.save_readings(sessions(), table)
    except ImportRejected as rejected:  # stored by someone else between the check and the save
        outcome = rounds.CheckOutcome(problems=rejected.problems)
        page = _render_walk(data, number, values=values, chosen=chosen, outcome=outcome, checked=True,
                            twins={fmt: url_for("rounds.walk", route_id=route_id, fmt=fmt) for fmt in TWIN_FORMATS})
        return _remember_units(page, chosen, conventions), 422
    flash(f"Saved the reading of {pump.serial}; {saved.describe()}.", "info")
    after = number + 1 if number < len(data["stops"]) else None
    target = url_for("rounds.walk", route_id=route_id, stop=after) if after else \
        url_for("rounds.walk", route_id=route_id, stop=number, done=1)
    return _remember_units(redirect(target), chosen, conventions)


def _first_unread(stops: list[dict]) -> int:
    return next((s["number"] for s in stops if not s["read_today"]), 1)


def _render_walk(data: dict, number: int, values: dict, chosen: dict | None, twins: dict, outcome=None,
                 checked: bool = False) -> str:
    number = min(max(number, 1), len(data["stops"])) if data["stops"] else 0
    stop = data["stops"][number - 1] if number else None
    pump = pump_or_404(stop["pump"]) if stop else None
    conventions = sitelocal.of_pump(session(), pump) if pump else sitelocal.UTC_CANONICAL
    if chosen is None:
        chosen = {**_site_units(conventions), **_remembered_units(conventions)}
    errors: dict[str, list[str]] = {}  # a form input's problems, listed under its label
    unplaced: list[str] = []  # problems of no input (the pump, its place), as stated
    for problem in (outcome.problems if outcome else []):
        if rounds.label_of(problem.column):
            errors.setdefault(_field_of(problem.column), []).append(problem.reason)
        else:
            unplaced.append(f"{problem.column}: {problem.reason}" if problem.column else problem.reason)
    doubts: dict[str, list[str]] = {}
    for doubt in (outcome.warnings if outcome else []):
        doubts.setdefault(doubt.field, []).append(doubt.message)
    route_id = data["route"]["id"]
    done_url = url_for("rounds.walk", route_id=route_id, stop=len(data["stops"]), done=1)
    # What a device keeps for walking this route with no signal: every stop's page, the end, the rules.
    keep_urls = [url_for("rounds.index")] + \
        [url_for("rounds.walk", route_id=route_id, stop=s["number"]) for s in data["stops"]] + \
        [done_url, url_for("rounds.rules", route_id=route_id)]
    return render_template(
        "rounds/walk.html", twins=twins, **data, number=number, stop=stop, pump=pump, keep_urls=keep_urls,
        rules_url=url_for("rounds.rules", route_id=route_id),
        next_url=url_for("rounds.walk", route_id=route_id, stop=number + 1) if number < len(data["stops"])
        else done_url,
        place={part: stop[part] for part in PLACE_PARTS} if stop else None,
        fields=rounds.fields_for(pump) if pump else [], choices=units.CHOICES, stroke_unit=rounds.STROKE_UNIT,
        values=values, chosen=chosen, default_time=form_value(utcnow(), conventions.time_zone), outcome=outcome,
        conventions=conventions, zone_label=sitelocal.zone_label(conventions),
        errors=errors, unplaced=unplaced, labels=rounds.LABELS, doubts=doubts, checked=checked,
        done=request.args.get("done") == "1",
        confirm_codes=",".join(sorted({d.code for d in outcome.warnings})) if outcome else "",
    )


def _field_of(column: str) -> str:
    """The form field a problem's column names ('outlet_flow [gal/min]' -> 'outlet_flow')."""
    return units.parse_header(column)[0] if column else ""


# --- the round form offline: its service worker, its rules as data, a fresh token ----------------------------

@bp.route("/rounds-worker.js")
def worker():
    """The service worker, served from the site's root so that its scope may cover /rounds (a worker's scope
    cannot reach above its own path). Public: a browser fetches it to update it, signed in or not."""
    script = Path(current_app.static_folder, "rounds-worker.js").read_text(encoding="utf-8")
    # no-cache: a new worker reaches phones on their next visit.
    return Response(script, mimetype="text/javascript", headers={"Cache-Control": "no-cache"})


@bp.route("/rounds/<int:route_id>/rules.json")
def rules(route_id):
    data = rounds.device_rules(session(), route_id)
    if data is None:
        abort(404, description="No such route.")
    return jsonify(data)


@bp.route("/rounds/session.json")
def session_state():
    """A fresh CSRF token for readings kept on a device: the token in a page cached hours ago may have expired."""
    user = signed_in_user()
    response = jsonify({"csrf_token": generate_csrf(), "user": user.name, "role": user.role})
    response.headers["Cache-Control"] = "no-store"
    return response


# --- units remembered per browser --------------------------------------------------------------------------

def _valid(chosen: dict) -> dict[str, str]:
    offered = rounds.unit_choices()
    return {name: unit for name, unit in chosen.items() if name in offered and unit in offered[name]}


# The cookie keeps, per site, only the choices that differ from the site's own units ('Plant A|oil_temp' ->
# 'degF'), so a site's units stay the default on its forms and a technician's own choice is kept where made.
def _site_units(conventions: sitelocal.Conventions) -> dict[str, str]:
    offered = rounds.unit_choices()
    return {f.name: conventions.unit_of(f.quantity) for f in rounds.FORM_FIELDS
            if conventions.unit_of(f.quantity) in offered.get(f.name, ())}


def _cookie_pairs() -> dict[str, str]:
    return dict(parse_qsl(request.cookies.get(UNIT_COOKIE, "")))


def _remembered_units(conventions: sitelocal.Conventions) -> dict[str, str]:
    prefix = f"{conventions.site or ''}|"
    return _valid({key[len(prefix):]: unit for key, unit in _cookie_pairs().items() if key.startswith(prefix)})


def _chosen_units(form, conventions: sitelocal.Conventions) -> dict[str, str]:
    chosen = {**_site_units(conventions), **_remembered_units(conventions)}
    chosen.update(_valid({name: form.get(f"{name}_unit", "") for name in rounds.unit_choices()}))
    return chosen


def _remember_units(response, chosen: dict, conventions: sitelocal.Conventions):
    response = make_response(response)
    prefix = f"{conventions.site or ''}|"
    defaults = _site_units(conventions)
    pairs = {key: unit for key, unit in _cookie_pairs().items() if not key.startswith(prefix)}
    pairs.update({prefix + name: unit for name, unit in chosen.items() if defaults.get(name) != unit})
    # Query-string form ('Plant+A%7Coutlet_flow=gal%2Fmin&...'): safe in a cookie value whatever the spelling.
    response.set_cookie(UNIT_COOKIE, urlencode(sorted(pairs.items())), max_age=UNIT_COOKIE_AGE_S,
                        samesite="Lax", httponly=True)
    return response

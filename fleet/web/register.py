"""Register and records: the asset lists, the forms that add and edit them, and CSV upload."""

from flask import Blueprint, abort, flash, jsonify, redirect, request, url_for

from fleet.services.pages.register import CSV_COLUMNS, FORM_COLUMNS, form_page, register_overview
from fleet.services.register.forms import FORMS, NotFound
from fleet.services.transfer.uploads import PROBLEM_COLUMNS, upload_file, upload_kinds
from fleet.services.writes import perform
from fleet.services.writes.forms import FormRejected
from fleet.web.auth import requires
from fleet.web.db import session, sessions
from fleet.web.respond import respond, twin_routes, wants_json

bp = Blueprint("register", __name__)


@twin_routes(bp, "/register")
def index(fmt):
    return respond(register_overview(session()), "register/index.html", fmt, "pumps", CSV_COLUMNS, "register")


def _role_for(form: str, **_) -> str:
    """Lab results are a technician's to enter; the register, limits and records are an engineer's."""
    return "technician" if form == "sample" else "engineer"


@twin_routes(bp, "/register/<form>/new", methods=["GET", "POST"])
@requires(_role_for)
def new(form, fmt):
    return _form(form, None, fmt)


@twin_routes(bp, "/register/<form>/<path:key>/edit", methods=["GET", "POST"])
@requires(_role_for)
def edit(form, key, fmt):
    return _form(form, key, fmt)


def _form(form: str, key: str | None, fmt):
    spec = FORMS.get(form)
    if spec is None or ("new" if key is None else "edit") not in spec.modes:
        abort(404)
    db = session()
    if request.method == "POST":
        values = request.form.to_dict()
        try:
            saved = perform(sessions(), lambda unit: spec.save(unit, key, values)).value
        except NotFound:
            abort(404)
        except FormRejected as rejected:
            data = form_page(db, form, key, values, rejected.errors)
            return respond(data, "register/form.html", fmt, "fields", FORM_COLUMNS, f"{form}-form", status=400)
        if wants_json(fmt):
            return jsonify({"saved": saved.message})
        flash(saved.message, "saved")
        return redirect(url_for("register.index"))
    try:
        data = form_page(db, form, key)
    except NotFound:
        abort(404)
    return respond(data, "register/form.html", fmt, "fields", FORM_COLUMNS, f"{form}-form")


@twin_routes(bp, "/register/upload", methods=["GET", "POST"])
@requires("engineer")
def upload(fmt):
    data = {"kinds": upload_kinds(), "kind": request.args.get("kind") or "readings", "outcome": None,
            "problems": []}
    status = 200
    if request.method == "POST":
        kind = request.form.get("kind", "")
        file = request.files.get("file")
        outcome = upload_file(sessions(), kind, file.read() if file else None, file.filename if file else None)
        status = 200 if outcome["ok"] else 400
        data.update(kind=kind, outcome=outcome, problems=outcome["problems"])
    return respond(data, "register/upload.html", fmt, "problems", PROBLEM_COLUMNS, "upload-report", status)

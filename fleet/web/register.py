"""Register and records: the asset lists, the forms that add and edit them, and CSV upload."""

from flask import Blueprint, abort, flash, jsonify, redirect, request, url_for

from fleet.services.analysis import refresh_analysis
from fleet.services.forms import FormRejected
from fleet.services.registry_forms import FORMS, NotFound, Saved
from fleet.services.registry_pages import CSV_COLUMNS, FORM_COLUMNS, form_page, register_overview
from fleet.services.uploads import PROBLEM_COLUMNS, upload_csv, upload_kinds
from fleet.web.auth import requires
from fleet.web.db import session
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
            saved = spec.save(db, key, values)
            _refresh(db, saved)
            db.commit()
        except NotFound:
            db.rollback()
            abort(404)
        except FormRejected as rejected:
            db.rollback()
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


def _refresh(db, saved: Saved) -> None:
    """Re-analyse what the write changed: some pumps, or the whole fleet (limits, the fleet's life history)."""
    if not saved.refresh:
        return
    if saved.pump_ids is None:
        refresh_analysis(db)
    elif saved.pump_ids:
        refresh_analysis(db, pump_ids=sorted(saved.pump_ids))


@twin_routes(bp, "/register/upload", methods=["GET", "POST"])
@requires("engineer")
def upload(fmt):
    data = {"kinds": upload_kinds(), "kind": request.args.get("kind") or "readings", "outcome": None,
            "problems": []}
    status = 200
    if request.method == "POST":
        db = session()
        kind = request.form.get("kind", "")
        file = request.files.get("file")
        outcome = upload_csv(db, kind, file.read() if file else None)
        if outcome["ok"]:
            _refresh(db, Saved(outcome["summary"], None if outcome["refresh_all"] else set(outcome["pump_ids"])))
            db.commit()
        else:
            db.rollback()
            status = 400
        data.update(kind=kind, outcome=outcome, problems=outcome["problems"])
    return respond(data, "register/upload.html", fmt, "problems", PROBLEM_COLUMNS, "upload-report", status)

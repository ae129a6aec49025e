"""Each user's own page: their mail address, the weekly digest, and the pumps they follow. Anyone signed in may
change their own settings here (and only their own: the user comes from the session, never from the form)."""

from flask import Blueprint, abort, flash, redirect, request, url_for

from fleet.services import users
from fleet.services.mail.follows import FollowError, add_follow, remove_follow
from fleet.services.pages.account import FOLLOW_COLUMNS, account_page
from fleet.services.writes import perform
from fleet.web.auth import browser_only, requires, signed_in_user
from fleet.web.db import session, sessions
from fleet.web.respond import respond, twin_routes

bp = Blueprint("account", __name__)


def _page(fmt, error: str | None = None, form: dict | None = None, status: int = 200):
    try:
        data = account_page(session(), signed_in_user().user_id)
    except LookupError:
        abort(404)
    data["error"], data["form"] = error, form or {}
    return respond(data, "account/page.html", fmt, "follows", FOLLOW_COLUMNS, "account", status)


@twin_routes(bp, "/account")
def page(fmt):
    return _page(fmt)


@bp.post("/account")
@requires("viewer")
@browser_only
def save():
    email, digest = request.form.get("email", ""), request.form.get("digest") == "on"
    user_id = signed_in_user().user_id
    try:
        user = perform(sessions(), lambda db: users.update_account(db, user_id, email, digest)).value
    except users.UserError as error:
        return _page(None, str(error), {"email": email}, status=400)
    where = f"to {user.email}" if user.email else "nowhere: no address is set"
    flash(f"Saved. Your mail goes {where}; weekly digest {'on' if user.digest else 'off'}.", "saved")
    return redirect(url_for("account.page"))


@bp.post("/account/follows")
@requires("viewer")
@browser_only
def follow():
    scope, user_id = request.form.get("scope", ""), signed_in_user().user_id
    try:
        perform(sessions(), lambda db: add_follow(db, user_id, scope))
    except FollowError as error:
        return _page(None, str(error), status=400)
    flash("Followed: you get an alert when one of these pumps gets worse.", "saved")
    return redirect(url_for("account.page"))


@bp.post("/account/follows/<int:follow_id>/delete")
@requires("viewer")
@browser_only
def unfollow(follow_id: int):
    user_id = signed_in_user().user_id
    if not perform(sessions(), lambda db: remove_follow(db, user_id, follow_id)).value:
        abort(404)
    flash("No longer followed.", "saved")
    return redirect(url_for("account.page"))

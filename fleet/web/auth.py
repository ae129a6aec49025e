"""Who may do what: sign-in and sign-out, roles on every route, CSRF on every browser write, API tokens.

Flask-Login keeps the signed-in user in the session cookie; Flask-WTF's CSRFProtect checks the token every form
carries; Flask-Limiter slows password guessing. One ``before_request`` guard runs first on every request:

- every page needs a signed-in user (a plant's records are not public), except the sign-in page and static files;
- ``Authorization: Bearer <token>`` signs a request in by API token instead (a bad or revoked token is refused,
  never ignored); such a request carries no cookie, so it needs no CSRF token;
- every other write (POST, PUT, PATCH, DELETE) must carry the session's CSRF token, as a form field
  ``csrf_token`` or an ``X-CSRFToken`` header.

Views then say which role they need with ``@requires(role)``. A refused request writes nothing: 401 when no one is
signed in (a page a browser asked for redirects to /login?next=...), 403 for the wrong role or a bad CSRF token.
"""

import math
from collections.abc import Callable
from dataclasses import dataclass
from datetime import timedelta
from functools import wraps
from typing import TYPE_CHECKING
from urllib.parse import urlsplit

from flask import (
    Blueprint,
    Flask,
    current_app,
    g,
    jsonify,
    make_response,
    redirect,
    render_template,
    request,
    url_for,
)
from flask import (
    session as cookie_session,
)
from flask.sessions import SecureCookieSessionInterface
from flask_limiter import Limiter
from flask_limiter.util import get_remote_address
from flask_login import LoginManager, current_user, login_user, logout_user
from flask_wtf.csrf import CSRFError, CSRFProtect

from fleet.db import audit
from fleet.services import users
from fleet.services.writes import perform
from fleet.web.db import session, sessions

if TYPE_CHECKING:
    from fleet.db.models import User

bp = Blueprint("auth", __name__)
login_manager = LoginManager()
csrf = CSRFProtect()

# Reachable without signing in: the sign-in page itself and files every page loads.
PUBLIC_ENDPOINTS = frozenset({"auth.login", "static", "assets.plotly_js", "rounds.worker"})
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
ROLE_WORDS = {"viewer": "a viewer", "technician": "a technician", "engineer": "an engineer"}


@dataclass(frozen=True)
class SignedInUser:
    """The user of this request, detached from any database session; Flask-Login's user protocol."""

    user_id: int
    name: str
    role: str
    session_key: str | None = None  # of a signed-in browser (fleet.services.users.start_session)
    token_id: int | None = None  # set when the request signed in by API token

    is_authenticated = True
    is_active = True
    is_anonymous = False

    def get_id(self) -> str:
        return f"{self.user_id}.{self.session_key}"

    def can(self, role: str) -> bool:
        return users.role_at_least(self.role, role)

    @classmethod
    def of(cls, user: "User", session_key: str | None = None, token_id: int | None = None) -> "SignedInUser":
        return cls(user.id, user.name, user.role, session_key, token_id)


@login_manager.user_loader
def _load_user(user_id: str) -> SignedInUser | None:
    # Checked against the database on every request: sign-out, a new password or a disabled user ends the
    # session on the server, and a copied cookie stops working with it.
    number, _, key = user_id.partition(".")
    if not number.isdigit() or not key:
        return None
    user = users.session_user(session(), int(number), key)
    return None if user is None else SignedInUser.of(user, session_key=key)


def signed_in_user() -> SignedInUser | None:
    """The user of this request (by session or API token), or None."""
    return g.get("fleet_user")


def current_actor() -> str:
    """Who acts in this request, as the audit trail and the readings' 'taken by' name them."""
    user = signed_in_user()
    if user is None:
        return "anonymous"
    return user.name if user.token_id is None else f"{user.name} (API token {user.token_id})"


# --- refusals ----------------------------------------------------------------------------------------------

def _wants_json() -> bool:
    if request.blueprint == "api" or request.path.endswith((".json", ".csv", ".xlsx")):
        return True
    best = request.accept_mimetypes.best_match(["text/html", "application/json"])
    return best == "application/json" and request.accept_mimetypes["application/json"] > \
        request.accept_mimetypes["text/html"]


def _refuse(status: int, reason: str):
    if _wants_json():
        # The API's problem shape: row 0 is the request as a whole.
        return jsonify({"problems": [{"row": 0, "column": "", "reason": reason}]}), status
    return render_template("auth/refused.html", status=status, reason=reason,
                           sign_in=url_for("auth.login", next=_local_next(request.referrer) or None)
                           if status == 401 else None), status


def _not_signed_in():
    if request.method in SAFE_METHODS and not _wants_json():
        return redirect(url_for("auth.login", next=request.full_path.rstrip("?")))
    response = _refuse(401, "sign in first (or send an API token as 'Authorization: Bearer ...')")
    if _wants_json():
        response[0].headers["WWW-Authenticate"] = 'Bearer realm="fleet"'
    return response


def _local_next(target: str | None) -> str | None:
    """``target`` as a path on this site, or None: never redirect somewhere else after signing in."""
    if not target:
        return None
    parts = urlsplit(target)
    if parts.scheme or parts.netloc:
        if parts.netloc != request.host:
            return None
    path = parts.path or "/"
    if not path.startswith("/") or path.startswith("//") or "\\" in path:
        return None
    return path + (f"?{parts.query}" if parts.query else "")


# --- the guard on every request ----------------------------------------------------------------------------

def _bearer_secret() -> str | None:
    header = request.headers.get("Authorization")
    if header is None:
        return None
    scheme, _, secret = header.partition(" ")
    return secret.strip() if scheme.lower() == "bearer" else ""


def _guard():
    g.fleet_user = None
    secret = _bearer_secret()
    if secret is not None:
        found = users.user_for_token(session(), secret) if secret else None
        if found is None:
            return _refuse(401, "the API token is unknown or revoked")
        g.fleet_user = SignedInUser.of(found[0], token_id=found[1].id)
    elif current_user.is_authenticated:
        g.fleet_user = current_user._get_current_object()
    if g.fleet_user is not None:
        g.audit_token = audit.set_actor(current_actor())
    if request.endpoint in PUBLIC_ENDPOINTS:
        if request.method not in SAFE_METHODS:
            _check_csrf()  # signing in is a write too: no one can sign a browser in behind its user's back
        return None
    if g.fleet_user is None:
        return _not_signed_in()
    if request.method not in SAFE_METHODS and g.fleet_user.token_id is None:
        _check_csrf()
    return None


def _check_csrf() -> None:
    if current_app.config.get("WTF_CSRF_ENABLED", True):
        csrf.protect()  # raises CSRFError, answered 403 below


def _reset_actor(_exc=None) -> None:
    token = g.pop("audit_token", None)
    if token is not None:
        audit.reset_actor(token)


def requires(role: str | Callable[..., str]):
    """Let the view run only for a user of ``role`` or higher; ``role`` may be a function of the view's
    arguments (a form of samples needs a technician, one of pumps an engineer)."""

    def decorator(view: Callable) -> Callable:
        @wraps(view)
        def guarded(*args, **kwargs):
            needed = role(**kwargs) if callable(role) else role
            user = signed_in_user()
            if user is None:
                return _not_signed_in()
            if not user.can(needed):
                return _refuse(403, f"this needs {ROLE_WORDS[needed]} or higher; "
                                    f"{user.name} is {ROLE_WORDS.get(user.role, user.role)}")
            return view(*args, **kwargs)

        guarded.required_role = role
        return guarded

    return decorator


def browser_only(view: Callable) -> Callable:
    """Refuse a request signed in by API token (a data logger's): a person's own settings, such as where their
    mail goes, change only in a browser signed in with their password."""

    @wraps(view)
    def guarded(*args, **kwargs):
        user = signed_in_user()
        if user is not None and user.token_id is not None:
            return _refuse(403, "this is changed only when signed in with a password, not with an API token")
        return view(*args, **kwargs)

    return guarded


# --- sign in and out ---------------------------------------------------------------------------------------

@bp.route("/login", methods=["GET", "POST"])
def login():
    next_url = _local_next(request.values.get("next"))
    if request.method == "GET":
        if signed_in_user() is not None and next_url:
            return redirect(next_url)
        return render_template("auth/login.html", next=next_url, name="", error=None)
    name = request.form.get("name", "").strip()
    password = request.form.get("password", "")
    wait = users.sign_in_wait_s(session(), name)
    if wait > 0:  # no password is checked while a name waits: its delay gives nothing away
        response = make_response(render_template(
            "auth/login.html", next=next_url, name=name,
            error=f"Too many wrong passwords for this name: try again in {math.ceil(wait)} s."), 429)
        response.headers["Retry-After"] = str(math.ceil(wait))
        return response
    account = users.verify_password(session(), name, password)
    if account is None:
        perform(sessions(), lambda db: users.record_failure(db, name, request.remote_addr))
        return render_template("auth/login.html", next=next_url, name=name,
                               error="That name and password do not match an active user."), 401

    def sign_in(db):
        return users.record_sign_in(db, account.id, password), users.start_session(db, account.id)

    user, key = perform(sessions(), sign_in).value
    signed_in = SignedInUser.of(user, session_key=key)
    cookie_session.clear()  # a new session on sign-in: a cookie planted before cannot ride along
    cookie_session.permanent = True
    login_user(signed_in)
    return redirect(next_url or url_for("service_list.index"))


@bp.post("/logout")
def logout():
    user = signed_in_user()
    if user is not None and user.session_key:
        perform(sessions(), lambda db: users.end_session(db, user.session_key))
    logout_user()
    cookie_session.clear()
    return redirect(url_for("auth.login"))


# --- wiring ------------------------------------------------------------------------------------------------

class _SessionCookies(SecureCookieSessionInterface):
    """The session cookie is Secure when the settings say so or when the request came over https."""

    def get_cookie_secure(self, app: Flask) -> bool:
        return bool(app.config["SESSION_COOKIE_SECURE"]) or (bool(request) and request.is_secure)


def _csrf_refused(error: CSRFError):
    return _refuse(403, f"the form's security token is missing or stale ({error.description}); "
                        "reload the page and send it again")


def _too_many(_error):
    return _refuse(429, "too many sign-in attempts from here; wait a minute and try again")


def init_app(app: Flask) -> None:
    """Sessions, CSRF, the sign-in rate limit and the guard; call before registering the other blueprints."""
    app.config.setdefault("LOGIN_RATE_LIMIT", "10 per minute")
    app.config.setdefault("WTF_CSRF_TIME_LIMIT", 12 * 3600)  # a shift: a round's form left open stays valid
    app.config.setdefault("PERMANENT_SESSION_LIFETIME", timedelta(hours=12))
    app.config["WTF_CSRF_CHECK_DEFAULT"] = False  # the guard checks, after it knows whether a token signed in
    app.session_interface = _SessionCookies()
    login_manager.init_app(app)
    csrf.init_app(app)
    app.before_request(_guard)
    app.teardown_request(_reset_actor)
    app.register_error_handler(CSRFError, _csrf_refused)
    app.register_error_handler(429, _too_many)
    app.register_blueprint(bp)
    # One limiter per app, counting in memory: a restart forgets, which is fine for slowing guessers.
    limiter = Limiter(get_remote_address, app=app, storage_uri="memory://")
    app.view_functions["auth.login"] = limiter.limit(lambda: app.config["LOGIN_RATE_LIMIT"],
                                                     methods=["POST"])(app.view_functions["auth.login"])

    @app.context_processor
    def signed_in():
        return {"signed_in": signed_in_user()}

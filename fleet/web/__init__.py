"""The dashboard: a small Flask app over the same services the CLI uses."""

import os

from flask import Flask

from fleet.db.engine import database_url, make_engine, make_session_factory
from fleet.resources import folder

TEMPLATES = folder("templates")


def create_app(test_config: dict | None = None) -> Flask:
    """Defaults, then the environment, then ``test_config``."""
    app = Flask(__name__, template_folder=str(TEMPLATES), static_folder="static")
    app.config.update(
        DATABASE_URL=database_url(None),
        SECRET_KEY=os.environ.get("FLEET_SECRET_KEY") or os.urandom(32),
        PAGE_SIZE=50,
        JSON_SORT_KEYS=False,
        # The session cookie: never readable by scripts, not sent on cross-site posts, https-only when asked
        # (FLEET_SECURE_COOKIES=1; a request that came over https gets a Secure cookie anyway, see fleet.web.auth).
        SESSION_COOKIE_HTTPONLY=True,
        SESSION_COOKIE_SAMESITE="Lax",
        SESSION_COOKIE_SECURE=os.environ.get("FLEET_SECURE_COOKIES") == "1",
        LOGIN_RATE_LIMIT=os.environ.get("FLEET_LOGIN_RATE_LIMIT") or "10 per minute",
    )
    if test_config:
        app.config.update(test_config)
    engine = make_engine(app.config["DATABASE_URL"])
    app.extensions["fleet_db"] = make_session_factory(engine)
    app.extensions["fleet_engine"] = engine

    from fleet.web import assets, auth, db, edge, filters, service_list

    edge.init_app(app)  # first of all: the size limit runs before anything reads the body
    db.init_app(app)
    auth.init_app(app)  # first: its guard runs before every view
    app.before_request(db.analysis_up_to_date)  # after the guard: only a signed-in read refreshes
    filters.init_app(app)
    app.register_blueprint(assets.bp)
    app.register_blueprint(service_list.bp)
    from fleet.web import api, pumps, rounds

    app.register_blueprint(pumps.bp)
    app.register_blueprint(rounds.bp)
    app.register_blueprint(api.bp)
    from fleet.web import plan, register, review

    app.register_blueprint(register.bp)
    app.register_blueprint(review.bp)
    app.register_blueprint(plan.bp)
    from fleet.web import forecasts, trash

    app.register_blueprint(trash.bp)
    from fleet.web import account, outbox

    app.register_blueprint(account.bp)
    app.register_blueprint(outbox.bp)
    app.register_blueprint(forecasts.bp)
    from fleet.web import corrections, find

    app.register_blueprint(find.bp)
    app.register_blueprint(corrections.bp)

    @app.context_processor
    def navigation():
        user = auth.signed_in_user()
        return {"nav_links": [(endpoint, label) for endpoint, label in NAV if endpoint in app.view_functions
                              and (endpoint not in NAV_ROLES or (user is not None and user.can(NAV_ROLES[endpoint])))]}

    return app


# The main menu, in the order people use it; an entry shows once its page exists.
NAV = (
    ("service_list.index", "Service list"),
    ("rounds.index", "Rounds"),
    ("review.weekly", "Weekly review"),
    ("plan.overhaul", "Overhaul plan"),
    ("forecasts.index", "Forecast record"),
    ("register.index", "Register"),
    ("trash.index", "Trash"),
    ("outbox.index", "Outbox"),
    ("account.page", "Your mail"),
)
# Menu entries only some roles see (the page itself refuses everyone else too).
NAV_ROLES = {"trash.index": "engineer", "outbox.index": "engineer"}

"""The edge of the dashboard: a request size limit answered before the body is read, and the security headers
every response carries."""

from flask import Flask, jsonify, render_template, request
from werkzeug.exceptions import RequestEntityTooLarge

MAX_REQUEST_BYTES = 20 * 1024 * 1024  # the largest upload a plant sends is a few MB of CSV; 20 MB leaves room
# Scripts and styles only from this site (plotly's script is served from the installed package); no plugins, no
# framing by any other page (the engineer's delete buttons cannot be clicked through a frame), forms post here.
CONTENT_SECURITY_POLICY = "; ".join([
    "default-src 'self'",
    "script-src 'self'",
    "style-src 'self' 'unsafe-inline'",  # plotly sets the styles of the charts it draws
    "img-src 'self' data: blob:",
    "font-src 'self'",
    "connect-src 'self'",
    "object-src 'none'",
    "base-uri 'self'",
    "form-action 'self'",
    "frame-ancestors 'none'",
])
HSTS = "max-age=31536000"


def _too_large(_error=None):
    reason = f"the request is larger than {MAX_REQUEST_BYTES // (1024 * 1024)} MB; nothing was read or stored"
    if request.blueprint == "api" or request.path.endswith((".json", ".csv", ".xlsx")) or request.is_json:
        return jsonify({"problems": [{"row": 0, "column": "", "reason": reason}]}), 413
    return render_template("auth/refused.html", status=413, reason=reason, sign_in=None), 413


def _refuse_large_bodies():
    # The declared length is checked before anything reads the body; werkzeug stops a body without one at the
    # limit too (MAX_CONTENT_LENGTH), and that error is answered the same way.
    if request.content_length is not None and request.content_length > MAX_REQUEST_BYTES:
        return _too_large()
    return None


def _security_headers(response):
    headers = response.headers
    headers.setdefault("Content-Security-Policy", CONTENT_SECURITY_POLICY)
    headers.setdefault("X-Content-Type-Options", "nosniff")
    headers.setdefault("X-Frame-Options", "DENY")
    headers.setdefault("Referrer-Policy", "same-origin")
    if request.is_secure:
        headers.setdefault("Strict-Transport-Security", HSTS)
    return response


def init_app(app: Flask) -> None:
    """Call first: the size check must run before any other hook reads the body."""
    app.config.setdefault("MAX_CONTENT_LENGTH", MAX_REQUEST_BYTES)
    app.before_request(_refuse_large_bodies)
    app.after_request(_security_headers)
    app.register_error_handler(RequestEntityTooLarge, _too_large)

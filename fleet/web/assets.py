"""Files the pages load, all served from this machine: plant networks are often offline."""

from pathlib import Path

import plotly
from flask import Blueprint, send_from_directory

bp = Blueprint("assets", __name__)
PLOTLY_DIR = Path(plotly.__file__).parent / "package_data"


@bp.route("/assets/plotly.min.js")
def plotly_js():
    return send_from_directory(PLOTLY_DIR, "plotly.min.js", mimetype="text/javascript", max_age=86400)

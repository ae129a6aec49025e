"""A figure as the page carries it: a <div> and the figure's JSON as data, drawn by the site's own script
(fleet/web/static/charts.js). No inline script, so the pages keep a strict Content-Security-Policy."""

import plotly.graph_objects as go

# The toolbar keeps what works offline (zoom, pan, reset, save as PNG) and offers nothing that uploads a plant's
# records to an online service.
CONFIG = {
    "displaylogo": False,
    "responsive": True,
    "showLink": False,
    "showSendToCloud": False,
    "showEditInChartStudio": False,
    "modeBarButtonsToRemove": ["sendDataToCloud", "editInChartStudio"],
}


def figure_html(fig: go.Figure, div_id: str) -> str:
    """The figure as an empty <div> with its JSON beside it; plotly.js and charts.js are loaded by the page."""
    data = fig.to_json().replace("</", "<\\/")  # the JSON cannot close its own <script> element
    return (f'<div id="{div_id}" class="plotly-chart" data-config=\'{_config_json()}\'></div>'
            f'<script type="application/json" id="{div_id}-figure">{data}</script>')


def _config_json() -> str:
    import json

    return json.dumps(CONFIG)

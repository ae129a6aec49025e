"""Every plotly figure of the dashboard, built from plain data; pages load plotly's JavaScript themselves.

A figure leaves this package as ``chart_html``: an empty ``<div>`` and the figure as JSON beside it. The page's
``charts.js`` draws every figure once the page is laid out, so each chart takes its card's width from the first
paint (an inline ``Plotly.newPlot`` ran while later cards were still missing, and drew at the wrong width).
"""

from html import escape

import plotly.graph_objects as go
from plotly.io.json import to_json_plotly

# Width follows the container; only offline tools in the toolbar (zoom, pan, reset, save as PNG), no link out.
CONFIG = {
    "responsive": True,
    "displaylogo": False,
    "showLink": False,
    "showSendToCloud": False,
    "showEditInChartStudio": False,
    "modeBarButtonsToRemove": ["sendDataToCloud", "editInChartStudio", "lasso2d", "select2d"],
    "toImageButtonOptions": {"format": "png", "scale": 2},
}


def chart_html(fig: go.Figure, div_id: str) -> str:
    """The figure as an empty <div> and a JSON <script> that the page's charts.js draws; no fixed width."""
    fig.update_layout(autosize=True, width=None)
    spec = fig.to_plotly_json()
    # to_json_plotly writes <, > and & as \\u escapes, so the JSON cannot close its <script> element.
    text = to_json_plotly({"data": spec["data"], "layout": spec["layout"], "config": CONFIG})
    name = escape(div_id, quote=True)
    return (f'<div id="{name}" class="fleet-chart"></div>\n'
            f'<script type="application/json" class="fleet-chart-spec" data-for="{name}">{text}</script>')

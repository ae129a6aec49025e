"""Every plotly figure of the dashboard, built from plain data; pages load plotly's JavaScript themselves.

A figure leaves this package as ``chart_html``: an empty ``<div>`` and the figure as JSON beside it. The page's
``charts.js`` draws every figure once the page is laid out, so each chart takes its card's width from the first
paint (an inline ``Plotly.newPlot`` ran while later cards were still missing, and drew at the wrong width).

A figure is a plotly.py ``go.Figure`` or, where building one costs too much (the pump page), a plain spec
(``plain_figure``) whose numbers are plotly's typed arrays (``typed``): the same JSON, without plotly.py's objects.
"""

import base64
from functools import cache
from html import escape

import numpy as np
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


def typed(values) -> dict:
    """Numbers as plotly.js reads a typed array: little-endian float64 in base64, one string rather than a list
    (as plotly.py writes a numpy array; NaN is a gap)."""
    array = np.ascontiguousarray(values, dtype="<f8")
    return {"dtype": "f8", "bdata": base64.b64encode(array.tobytes()).decode("ascii")}


@cache
def _default_template() -> dict:
    """The template a new go.Figure carries (plotly.py's default): a plain spec carries it too, so both look alike.
    Read once from the installed plotly; it holds no data of ours."""
    import plotly.io as pio

    return pio.templates[pio.templates.default].to_plotly_json()


def plain_figure(traces: list[dict], layout: dict) -> dict:
    """A figure spec as plain data: traces as plotly.js takes them, the layout with plotly.py's default template."""
    return {"data": traces, "layout": {"template": _default_template(), **layout}}


def chart_html(fig: go.Figure | dict, div_id: str) -> str:
    """The figure (a go.Figure or a plain_figure spec) as an empty <div> and a JSON <script> that the page's
    charts.js draws; no fixed width."""
    if isinstance(fig, dict):
        spec = {"data": fig["data"], "layout": {**fig["layout"], "autosize": True}}
        spec["layout"].pop("width", None)
    else:
        fig.update_layout(autosize=True, width=None)
        spec = fig.to_plotly_json()
    # to_json_plotly writes <, > and & as \\u escapes, so the JSON cannot close its <script> element.
    text = to_json_plotly({"data": spec["data"], "layout": spec["layout"], "config": CONFIG})
    name = escape(div_id, quote=True)
    return (f'<div id="{name}" class="fleet-chart"></div>\n'
            f'<script type="application/json" class="fleet-chart-spec" data-for="{name}">{text}</script>')

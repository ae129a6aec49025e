"""The forecast record's plot: how many days early or late each scored forecast was, by how far ahead it was made,
one marker shape per pump kind; a filled marker where the end fell inside the forecast's band, an open one where
it did not. Built from the page's own data (fleet.services.pages.forecasts)."""

import plotly.graph_objects as go

from fleet.charts import chart_html

CHART_ID = "forecast-record-chart"
_INK, _ACCENT, _GRID = "#1e2529", "#24525e", "#ece8df"
_SYMBOLS = ("circle", "square", "diamond", "triangle-up", "triangle-down", "star", "hexagon", "cross")


def record_figure(data: dict) -> go.Figure:
    """x: the lead (3, 6, 12 months, spread a little per kind so markers do not hide each other); y: forecast date
    minus the end, in days (above zero: the forecast was late)."""
    rows = [r for r in data["forecasts"] if r["error_days"] is not None]
    leads = data["leads"]
    kinds = sorted({r["kind"] for r in rows})
    figure = go.Figure()
    for k, kind in enumerate(kinds):
        mine = [r for r in rows if r["kind"] == kind]
        offset = (k - (len(kinds) - 1) / 2) * 0.08
        symbol = _SYMBOLS[k % len(_SYMBOLS)]
        figure.add_trace(go.Scatter(
            x=[leads.index(r["lead"]) + offset for r in mine], y=[r["error_days"] for r in mine], mode="markers",
            name=mine[0]["kind_label"],
            marker={"symbol": [symbol if r["band_held"] else f"{symbol}-open" for r in mine], "size": 11,
                    "color": _ACCENT, "line": {"color": _ACCENT, "width": 1.5}},
            text=[f"{r['pump']}: forecast of {r['forecast_made_at']}, {r['lead']} before the "
                  f"{data['outcome_words'].get(r['how'], r['how'])} of {r['ended_at']}: {r['error_days']:+,.0f} days; "
                  f"band {'held' if r['band_held'] else 'missed'}" for r in mine],
            hovertemplate="%{text}<extra></extra>",
        ))
    figure.add_hline(y=0, line={"color": _INK, "width": 1})
    figure.update_layout(
        height=360, margin={"l": 60, "r": 12, "t": 12, "b": 50}, paper_bgcolor="#ffffff", plot_bgcolor="#ffffff",
        font={"family": "system-ui, sans-serif", "size": 12, "color": _INK}, hovermode="closest",
        legend={"orientation": "h", "y": -0.2, "x": 0},
    )
    figure.update_xaxes(title_text="made this long before the interval ended", tickvals=list(range(len(leads))),
                        ticktext=leads, range=[-0.5, len(leads) - 0.5], gridcolor=_GRID, zeroline=False)
    figure.update_yaxes(title_text="days late (+) or early (−)", gridcolor=_GRID, zeroline=False)
    return figure


def record_html(data: dict) -> str:
    return chart_html(record_figure(data), CHART_ID)

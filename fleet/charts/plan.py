"""The overhaul plan's timeline: a bar per pump from the early to the late bound of its forecast limit date,
a marker at the expected date, shutdown windows as shaded bands. Built from the plan's own data dict."""

from datetime import date, timedelta

import plotly.graph_objects as go

from fleet.charts import chart_html
from fleet.horizon import date_text

CHART_ID = "plan-chart"
_INK, _ACCENT, _PAST, _WINDOW = "#1e2529", "#24525e", "#8c2f1c", "rgba(63, 95, 53, 0.18)"


def timeline_figure(plan: dict) -> go.Figure:
    rows = plan["pumps"]
    labels = [r["pump"] for r in rows]
    bar_x, bar_y = [], []
    for r in rows:
        low = r["limit_date_low"] or r["limit_date"]
        high = r["limit_date_high"] or plan["horizon_end"]  # an open late bound runs past the horizon
        bar_x += [low, high, None]
        bar_y += [r["pump"], r["pump"], None]
    figure = go.Figure()
    figure.add_trace(go.Scatter(x=bar_x, y=bar_y, mode="lines", name="early to late bound",
                                line={"color": _ACCENT, "width": 10}, hoverinfo="skip"))
    figure.add_trace(go.Scatter(
        x=[r["limit_date"] for r in rows], y=labels, mode="markers", name="expected limit date",
        marker={"symbol": ["x" if r["status"] == "past_limit" else "diamond" for r in rows], "size": 12,
                "color": [_PAST if r["fit"] in ("at_risk", "past_limit") else _INK for r in rows],
                "line": {"color": "#ffffff", "width": 1}},
        text=[f"{r['pump']}: {r['governing_limit'] or 'limit'} on {date_text(r['limit_date'], plan['today'])} "
              f"({date_text(r['limit_date_low'], plan['today'], '?')} to "
              f"{date_text(r['limit_date_high'], plan['today'], 'open')}); {plan['fit_words'][r['fit']]}"
              for r in rows],
        hovertemplate="%{text}<extra></extra>",
    ))
    for window in plan["windows"]:
        if window["past"]:
            continue
        figure.add_vrect(x0=window["starts_at"], x1=window["ends_at"], fillcolor=_WINDOW, line_width=0,
                         annotation_text=window["scope"], annotation_position="top left",
                         annotation_font_size=10)
    figure.add_vline(x=plan["today"], line_dash="dot", line_color=_INK)
    # Start a little before today, or before the earliest date drawn (a pump already past its limit).
    first = min([plan["today"], *[d for d in bar_x if d]])
    start = (date.fromisoformat(first) - timedelta(days=7)).isoformat()
    figure.update_layout(
        height=140 + 30 * max(len(rows), 1), margin={"l": 10, "r": 10, "t": 30, "b": 40},
        paper_bgcolor="#ffffff", plot_bgcolor="#ffffff", showlegend=True,
        legend={"orientation": "h", "y": -0.15 if rows else 0},
        xaxis={"type": "date", "range": [start, plan["horizon_end"]], "gridcolor": "#e4e0d6"},
        yaxis={"autorange": "reversed", "type": "category", "automargin": True},
        font={"family": "system-ui, sans-serif", "size": 12, "color": _INK},
    )
    return figure


def timeline_html(plan: dict) -> str:
    """The chart as a div and its data; the page loads plotly.js and charts.js itself from this server."""
    return chart_html(timeline_figure(plan), CHART_ID)

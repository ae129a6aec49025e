"""The overhaul plan's timeline: a bar per pump from the early to the late bound of its forecast limit date,
a marker at the expected date, shutdown windows as shaded bands. Built from the plan's own data dict."""

from datetime import date, timedelta

import plotly.graph_objects as go

from fleet.charts import chart_html
from fleet.horizon import date_text

CHART_ID = "plan-chart"
_INK, _ACCENT, _PAST, _WINDOW = "#1e2529", "#24525e", "#8c2f1c", "rgba(63, 95, 53, 0.18)"


def timeline_figure(plan: dict) -> go.Figure:
    rows = [_as_drawn(r) for r in plan["pumps"]]
    bar_x, bar_y = [], []
    for r in rows:
        low = r["limit_date_low"] or r["limit_date"]
        high = r["limit_date_high"] or plan["horizon_end"]  # an open late bound runs past the horizon
        bar_x += [low, high, None]
        bar_y += [r["pump"], r["pump"], None]
    figure = go.Figure()
    figure.add_trace(go.Scatter(x=bar_x, y=bar_y, mode="lines", name="early to late bound",
                                line={"color": _ACCENT, "width": 10}, hoverinfo="skip"))
    # Two marker traces so the legend tells a forecast (diamond) from a limit already crossed (cross).
    for past, name, symbol in ((False, "expected limit date", "diamond"), (True, "limit crossed", "x")):
        drawn = [r for r in rows if (r["status"] == "past_limit") == past]
        if not drawn:
            continue
        figure.add_trace(go.Scatter(
            x=[r["limit_date"] for r in drawn], y=[r["pump"] for r in drawn], mode="markers", name=name,
            marker={"symbol": symbol, "size": 12,
                    "color": [_PAST if r["fit"] in ("at_risk", "past_limit") else _INK for r in drawn],
                    "line": {"color": "#ffffff", "width": 1}},
            text=[f"{r['pump']}: {r['governing_limit'] or 'limit'} {'crossed around' if past else 'on'} "
                  f"{date_text(r['limit_date'], plan['today'])} "
                  f"({date_text(r['limit_date_low'], plan['today'], '?')} to "
                  f"{date_text(r['limit_date_high'], plan['today'], 'open')}); {plan['fit_words'][r['fit']]}"
                  for r in drawn],
            hovertemplate="%{text}<extra></extra>",
        ))
    ahead = [window for window in plan["windows"] if not window["past"]]
    for number, window in enumerate(ahead):
        # Alternate the names above and below the bars: windows close in time would print over each other.
        figure.add_vrect(x0=window["starts_at"], x1=window["ends_at"], fillcolor=_WINDOW, line_width=0,
                         annotation_text=window["scope"],
                         annotation_position="bottom left" if number % 2 else "top left",
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


def _as_drawn(row: dict) -> dict:
    """A pump past its limit is drawn at the date its trend crossed the limit, with that date's bounds."""
    if not row.get("crossed_date"):
        return row
    return {**row, "governing_limit": row["crossed_limit"], "limit_date": row["crossed_date"],
            "limit_date_low": row["crossed_date_low"], "limit_date_high": row["crossed_date_high"]}

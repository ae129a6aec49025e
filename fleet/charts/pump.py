"""Plotly figures of one pump, built from plain data frames; pages load plotly's JavaScript themselves.

Colours follow the dashboard's palette; every series is also told apart by marker shape or dash and by its
legend entry, so nothing rests on colour alone.
"""

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from fleet import units
from fleet.charts import chart_html
from fleet.physics.cleanliness import parse_code

INK = "#1e2529"
MUTED = "#5d676d"
ACCENT = "#24525e"
LIMIT = "#8c2f1c"
BAND = "rgba(36, 82, 94, 0.15)"
EVENT = "#8a5a00"
RAW = "#9aa3a8"


def _layout(fig: go.Figure, x_title: str, y_title: str, y_format: str | None = None) -> go.Figure:
    fig.update_layout(
        margin={"l": 56, "r": 12, "t": 12, "b": 44}, height=320, paper_bgcolor="#ffffff", plot_bgcolor="#ffffff",
        font={"family": "system-ui, sans-serif", "size": 12, "color": INK}, hovermode="closest",
        legend={"orientation": "h", "y": -0.22, "x": 0},
    )
    fig.update_xaxes(title_text=x_title, gridcolor="#ece8df", zeroline=False)
    fig.update_yaxes(title_text=y_title, gridcolor="#ece8df", zeroline=False, tickformat=y_format)
    return fig


def _limit_line(fig: go.Figure, value, text: str) -> None:
    # The shape and label add_hline would make, added directly: add_hline's general machinery cost most of a
    # pump page's chart time.
    if value is not None and pd.notna(value):
        y = float(value)
        fig.add_shape(type="line", xref="x domain", x0=0, x1=1, yref="y", y0=y, y1=y,
                      line={"color": LIMIT, "dash": "dash", "width": 2})
        fig.add_annotation(xref="x domain", x=0, xanchor="left", yref="y", y=y, yanchor="top", text=text,
                           showarrow=False, font={"color": LIMIT, "size": 11})


def _event_lines(fig: go.Figure, events: pd.DataFrame | None, x_column: str) -> None:
    """Maintenance events as labelled vertical markers."""
    if events is None or events.empty:
        return
    for x, label in zip(events[x_column], events["kind_label"], strict=True):
        if pd.notna(x):
            fig.add_shape(type="line", yref="y domain", y0=0, y1=1, xref="x", x0=x, x1=x,
                          line={"color": EVENT, "dash": "dot", "width": 1.5})  # as add_vline, without its cost
            fig.add_annotation(x=x, y=1, yref="paper", text=str(label), showarrow=False, textangle=-90,
                               xanchor="right", yanchor="top", font={"color": EVENT, "size": 10})


def efficiency_figure(readings: pd.DataFrame, band: pd.DataFrame | None, limit, events: pd.DataFrame | None = None
                      ) -> go.Figure:
    """eta_v,ref (and raw eta_v) against running hours, the fitted trend, its band, forecast and limit.

    readings: hours, eta_v, eta_v_ref. band: hours, mean, low, high, forecast (bool). events: chart_hours,
    kind_label.
    """
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=readings["hours"], y=readings["eta_v"], mode="markers", name="η_v as measured",
                             marker={"color": RAW, "symbol": "circle-open", "size": 6}))
    fig.add_trace(go.Scatter(x=readings["hours"], y=readings["eta_v_ref"], mode="markers",
                             name="η_v,ref (referred)", marker={"color": ACCENT, "symbol": "circle", "size": 7}))
    if band is not None and not band.empty:
        fig.add_trace(go.Scatter(x=band["hours"], y=band["high"], mode="lines", line={"width": 0},
                                 hoverinfo="skip", showlegend=False))
        fig.add_trace(go.Scatter(x=band["hours"], y=band["low"], mode="lines", line={"width": 0}, fill="tonexty",
                                 fillcolor=BAND, name="trend band"))
        fitted = band[~band["forecast"].astype(bool)]
        ahead = band[band["forecast"].astype(bool) | (band["hours"] == fitted["hours"].max())]
        fig.add_trace(go.Scatter(x=fitted["hours"], y=fitted["mean"], mode="lines", name="fitted trend",
                                 line={"color": INK, "width": 2}))
        fig.add_trace(go.Scatter(x=ahead["hours"], y=ahead["mean"], mode="lines", name="forecast",
                                 line={"color": INK, "width": 2, "dash": "dash"}))
    _limit_line(fig, limit, "limit")
    _event_lines(fig, events, "chart_hours")
    return _layout(fig, "running hours (h)", "volumetric efficiency", ".0%")


def drain_figure(readings: pd.DataFrame, limit_pct, events: pd.DataFrame | None = None) -> go.Figure:
    """Case drain as % of max flow, as measured and referred, against running hours, with its limit.

    readings: hours, case_drain_pct, case_drain_pct_ref.
    """
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=readings["hours"], y=readings["case_drain_pct"], mode="markers",
                             name="as measured", marker={"color": RAW, "symbol": "diamond-open", "size": 7}))
    fig.add_trace(go.Scatter(x=readings["hours"], y=readings["case_drain_pct_ref"], mode="lines+markers",
                             name="referred", marker={"color": ACCENT, "symbol": "diamond", "size": 7},
                             line={"color": ACCENT, "width": 1}))
    _limit_line(fig, limit_pct, "limit")
    _event_lines(fig, events, "chart_hours")
    return _layout(fig, "running hours (h)", "case drain, % of max flow")


def temperature_figure(readings: pd.DataFrame, min_c, max_c, events: pd.DataFrame | None = None,
                       unit: str = "degC") -> go.Figure:
    """Oil temperature at each reading against the site's local time, in ``unit``, with the pump's limits.

    readings: taken_at (ISO 8601 with offset), oil_temp_c. events: date, kind_label.
    """
    def shown(values):
        return units.from_canonical(np.asarray(values, dtype=float), "temperature", unit)

    min_c, max_c = (None if v is None else float(shown([v])[0]) for v in (min_c, max_c))
    fig = go.Figure()
    # plotly draws wall-clock times: the local time without its offset (the page names the zone)
    fig.add_trace(go.Scatter(x=readings["taken_at"].str[:16], y=shown(readings["oil_temp_c"]), mode="lines+markers",
                             name="oil temperature", marker={"color": ACCENT, "symbol": "square", "size": 6},
                             line={"color": ACCENT, "width": 1}))
    _limit_line(fig, max_c, "upper limit")
    _limit_line(fig, min_c, "lower limit")
    _event_lines(fig, events, "date")
    return _layout(fig, "date (site time)", f"oil temperature ({units.shown(unit)})")


def cleanliness_figure(samples: pd.DataFrame, target: tuple | None) -> go.Figure:
    """ISO 4406 scale numbers of each lab result against time, with the target code per channel.

    samples: sampled_at, code_4, code_6, code_14. target: (c4, c6, c14) scale numbers or None.
    """
    fig = go.Figure()
    styles = (("code_4", "≥4 µm(c)", "circle", "solid"), ("code_6", "≥6 µm(c)", "square", "dash"),
              ("code_14", "≥14 µm(c)", "triangle-up", "dot"))
    for column, name, symbol, dash in styles:
        fig.add_trace(go.Scatter(x=samples["sampled_at"], y=samples[column], mode="lines+markers", name=name,
                                 marker={"symbol": symbol, "size": 8, "color": ACCENT},
                                 line={"dash": dash, "color": ACCENT, "width": 1}))
    if target:
        for value, (_, name, _, _) in zip(target, styles, strict=True):
            if value is not None and pd.notna(value):
                _limit_line(fig, value, f"target {name}")
    return _layout(fig, "sampled", "ISO 4406 scale number")


def flow_test_figure(points: pd.DataFrame, baseline: pd.DataFrame, pressure_unit: str = "bar",
                     flow_unit: str = "L/min") -> go.Figure:
    """A multi-point flow test's flow against pressure, beside the line the pump's baseline slip gives, in the
    site's units.

    points, baseline: pressure_bar, flow_lpm.
    """
    def p(frame):
        return units.from_canonical(frame["pressure_bar"].to_numpy(float), "pressure", pressure_unit)

    def q(frame):
        return units.from_canonical(frame["flow_lpm"].to_numpy(float), "flow", flow_unit)

    fig = go.Figure()
    fig.add_trace(go.Scatter(x=p(baseline), y=q(baseline), mode="lines", name="baseline",
                             line={"color": MUTED, "dash": "dash", "width": 2}))
    fig.add_trace(go.Scatter(x=p(points), y=q(points), mode="lines+markers",
                             name="this test", marker={"color": ACCENT, "symbol": "circle", "size": 9},
                             line={"color": ACCENT, "width": 1}))
    return _layout(fig, f"outlet pressure ({units.shown(pressure_unit)})",
                   f"outlet flow ({units.shown(flow_unit)})")


def figure_html(fig: go.Figure, div_id: str) -> str:
    """The figure as a <div> and its data; plotly.js and charts.js are loaded once by the page."""
    return chart_html(fig, div_id)


def page_charts(data: dict) -> dict[str, str]:
    """The pump page's figures as HTML snippets, built from the same data its JSON twin carries
    (fleet.services.pages.pump)."""
    out = {}
    readings = pd.DataFrame(data["readings"])
    events = pd.DataFrame(data["events"], columns=["date", "chart_hours", "kind_label"])
    limits = data["limits"]
    site_units = data["site_units"]
    if len(readings):
        readings = readings.astype({c: float for c in ("hours", "eta_v", "eta_v_ref", "case_drain_pct",
                                                       "case_drain_pct_ref", "oil_temp_c")})
        band = pd.DataFrame(data["trend"]["points"]) if data["trend"] else None
        out["efficiency"] = figure_html(
            efficiency_figure(readings, band, limits["eta_v_limit"], events), "chart-efficiency")
        if data["pump"]["case_drain"]:
            out["drain"] = figure_html(
                drain_figure(readings, limits["drain_limit_pct"], events), "chart-drain")
        out["temperature"] = figure_html(
            temperature_figure(readings, limits["oil_temp_min_c"], limits["oil_temp_max_c"], events,
                               site_units["temperature"]),
            "chart-temperature")
    if data["samples"]:
        samples = pd.DataFrame(data["samples"]).astype({"code_4": float, "code_6": float, "code_14": float})
        out["cleanliness"] = figure_html(
            cleanliness_figure(samples, _target(limits["cleanliness_target"])), "chart-cleanliness")
    if data["flow_test"]:
        test = data["flow_test"]
        out["flow_test"] = figure_html(
            flow_test_figure(pd.DataFrame(test["points"]), pd.DataFrame(test["baseline"]), site_units["pressure"],
                             site_units["flow"]), "chart-flowtest")
    return out


def _target(code: str | None):
    if not code:
        return None
    try:
        return parse_code(code).channels()
    except ValueError:
        return None

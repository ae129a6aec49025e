"""The pump page's figures, written straight as plotly figure specs (plain dicts); pages load plotly's JavaScript.

No plotly.py figure objects: validating every property and shape through them cost most of a page's time. Numbers
go out as plotly's typed arrays (``fleet.charts.typed``), times as one list of text. plotly's own validators check
these specs in tests/test_pump_page_stored.py.

Colours follow the dashboard's palette; every series is also told apart by marker shape or dash and by its
legend entry, so nothing rests on colour alone.
"""

import math

import numpy as np

from fleet import units
from fleet.charts import chart_html, plain_figure, typed
from fleet.physics.cleanliness import parse_code

INK = "#1e2529"
MUTED = "#5d676d"
ACCENT = "#24525e"
LIMIT = "#8c2f1c"
BAND = "rgba(36, 82, 94, 0.15)"
EVENT = "#8a5a00"
RAW = "#9aa3a8"


def _numbers(column) -> np.ndarray:
    """A column of numbers (None for a missing one) as floats, NaN for the missing."""
    return np.asarray([np.nan if v is None else v for v in column] if isinstance(column, list) else column,
                      dtype=float)


def _present(value) -> bool:
    return value is not None and not (isinstance(value, float) and math.isnan(value))


def _axes(x_title: str, y_title: str, y_format: str | None = None) -> dict:
    y_axis = {"title": {"text": y_title}, "gridcolor": "#ece8df", "zeroline": False}
    if y_format is not None:
        y_axis["tickformat"] = y_format
    return {
        "margin": {"l": 56, "r": 12, "t": 12, "b": 44}, "height": 320, "paper_bgcolor": "#ffffff",
        "plot_bgcolor": "#ffffff", "font": {"family": "system-ui, sans-serif", "size": 12, "color": INK},
        "hovermode": "closest", "legend": {"orientation": "h", "y": -0.22, "x": 0},
        "xaxis": {"title": {"text": x_title}, "gridcolor": "#ece8df", "zeroline": False}, "yaxis": y_axis,
    }


def _scatter(x, y, mode: str, **style) -> dict:
    return {"type": "scatter", "x": x if isinstance(x, list) else typed(x), "y": typed(y), "mode": mode, **style}


class _Marks:
    """The horizontal limit lines and vertical event markers of one figure, with their labels."""

    def __init__(self):
        self.shapes: list[dict] = []
        self.annotations: list[dict] = []
        self.event_xs: list = []

    def limit(self, value, text: str) -> None:
        if _present(value):
            y = float(value)
            self.shapes.append({"type": "line", "xref": "x domain", "x0": 0, "x1": 1, "yref": "y", "y0": y, "y1": y,
                                "line": {"color": LIMIT, "dash": "dash", "width": 2}})
            self.annotations.append({"xref": "x domain", "x": 0, "xanchor": "left", "yref": "y", "y": y,
                                     "yanchor": "top", "text": text, "showarrow": False,
                                     "font": {"color": LIMIT, "size": 11}})

    def events(self, events: list[dict] | None, x_key: str) -> None:
        """Maintenance events as labelled vertical markers."""
        for event in events or ():
            x = event.get(x_key)
            if _present(x):
                self.event_xs.append(x)
                self.shapes.append({"type": "line", "yref": "y domain", "y0": 0, "y1": 1, "xref": "x", "x0": x,
                                    "x1": x, "line": {"color": EVENT, "dash": "dot", "width": 1.5}})
                self.annotations.append({"x": x, "y": 1, "yref": "paper", "text": str(event["kind_label"]),
                                         "showarrow": False, "textangle": -90, "xanchor": "right",
                                         "yanchor": "top", "font": {"color": EVENT, "size": 10}})

    def layout(self, axes: dict, xs=()) -> dict:
        """The marks' shapes and labels with ``axes``; ``xs``: the traces' x values (numbers, or ISO dates and times),
        which with the events span the x axis. An event's label runs down the left side of its line from the top of
        the plot, where an upper limit's label at the left end sits too: with events in the first tenth of the axis
        (an overhaul that opens the readings), the limits' labels start just right of the last of them."""
        start = _last_opening_event(self.event_xs, xs) if self.event_xs else None
        if start is not None:
            for label in self.annotations:
                if label.get("xref") == "x domain":  # a limit's: on the event's x, a few pixels right of its line
                    label.update(xref="x", x=start, xshift=6)
        marks = {"shapes": self.shapes} if self.shapes else {}
        if self.annotations:
            marks["annotations"] = self.annotations
        return {**marks, **axes}


def _axis_values(values) -> np.ndarray:
    """x values as floats: numbers as they are, ISO dates and times ("2026-12-03", "2026-12-03T08:08") as minutes."""
    values = list(values)
    if values and isinstance(values[0], str):
        return np.array(values, dtype="datetime64[m]").astype("int64").astype(float)
    return np.asarray(values, dtype=float)


def _last_opening_event(event_xs, xs):
    """The x of the last event in the first tenth of the x axis that ``xs`` and the events span; None where none
    is there."""
    events = _axis_values(event_xs)
    every = np.concatenate([_axis_values(xs), events])
    every = every[np.isfinite(every)]
    if not len(every) or every.max() <= every.min():
        return None
    share = (events - every.min()) / (every.max() - every.min())
    opening = np.flatnonzero(share <= 0.1)
    return event_xs[int(opening[np.argmax(share[opening])])] if len(opening) else None


def efficiency_figure(readings, band, limit, events: list[dict] | None = None) -> dict:
    """eta_v,ref (and raw eta_v) against running hours, the fitted trend, its band, forecast and limit.

    readings: columns hours, eta_v, eta_v_ref. band: columns hours, mean, low, high, forecast (bool), or None.
    events: dicts with chart_hours and kind_label.
    """
    hours = _numbers(readings["hours"])
    traces = [
        _scatter(hours, _numbers(readings["eta_v"]), "markers", name="η_v as measured",
                 marker={"color": RAW, "symbol": "circle-open", "size": 6}),
        _scatter(hours, _numbers(readings["eta_v_ref"]), "markers", name="η_v,ref (referred)",
                 marker={"color": ACCENT, "symbol": "circle", "size": 7}),
    ]
    if band is not None and len(band["hours"]):
        band_hours, mean = _numbers(band["hours"]), _numbers(band["mean"])
        ahead = np.asarray(band["forecast"], dtype=bool)
        fitted = ~ahead
        if fitted.any():  # the forecast starts where the fitted line ends
            ahead = ahead | (band_hours == band_hours[fitted].max())
        traces += [
            _scatter(band_hours, _numbers(band["high"]), "lines", line={"width": 0}, hoverinfo="skip",
                     showlegend=False),
            _scatter(band_hours, _numbers(band["low"]), "lines", line={"width": 0}, fill="tonexty",
                     fillcolor=BAND, name="trend band"),
            _scatter(band_hours[fitted], mean[fitted], "lines", name="fitted trend", line={"color": INK, "width": 2}),
            _scatter(band_hours[ahead], mean[ahead], "lines", name="forecast",
                     line={"color": INK, "width": 2, "dash": "dash"}),
        ]
    marks = _Marks()
    marks.limit(limit, "limit")
    marks.events(events, "chart_hours")
    shown = _efficiency_range(readings, band, limit)
    # Whole percent ticks repeat themselves on an axis a few percent tall (85 %, 85 %, 86 %): one decimal there.
    narrow = shown is not None and shown[1] - shown[0] < 0.06
    spanned = [hours, _numbers(band["hours"])] if band is not None and len(band["hours"]) else [hours]
    layout = marks.layout(_axes("running hours (h)", "volumetric efficiency", ".1%" if narrow else ".0%"),
                          np.concatenate(spanned))
    if shown is not None:
        layout["yaxis"]["range"] = shown
    if not np.isfinite(_numbers(readings["eta_v_ref"])).any() and (band is None or not len(band["hours"])):
        # An empty frame would look like a drawing fault: say why it is empty (the page's Why says more).
        layout.setdefault("annotations", []).append(
            {"xref": "paper", "yref": "paper", "x": 0.5, "y": 0.8, "showarrow": False, "font": {"color": INK},
             "bgcolor": "#ffffff",
             "text": "No reading of this pump can be referred yet: see Why above."})
    return plain_figure(traces, layout)


def _efficiency_range(readings, band, limit) -> list[float] | None:
    """The efficiency axis spans the readings, the trend line and its forecast, the limit, and the band where the
    readings are: far ahead a band can open to hundreds of percent below zero, which would flatten everything else
    into one line. The band beyond is cut at the axis; an efficiency below zero is never shown."""
    parts = [_numbers(readings["eta_v"]), _numbers(readings["eta_v_ref"])]
    if _present(limit):
        parts.append(np.array([float(limit)]))
    if band is not None and len(band["hours"]):
        fitted = ~np.asarray(band["forecast"], dtype=bool)
        parts += [_numbers(band["mean"]), _numbers(band["low"])[fitted], _numbers(band["high"])[fitted]]
    values = np.concatenate(parts)
    values = values[np.isfinite(values)]
    if not len(values):
        return None
    low, high = float(values.min()), float(values.max())
    pad = max(0.01, 0.08 * (high - low))
    return [max(low - pad, 0.0), high + pad]


def drain_figure(readings, limit_pct, events: list[dict] | None = None) -> dict:
    """Case drain as % of max flow, as measured and referred, against running hours, with its limit.

    readings: columns hours, case_drain_pct, case_drain_pct_ref.
    """
    hours = _numbers(readings["hours"])
    traces = [
        _scatter(hours, _numbers(readings["case_drain_pct"]), "markers", name="as measured",
                 marker={"color": RAW, "symbol": "diamond-open", "size": 7}),
        _scatter(hours, _numbers(readings["case_drain_pct_ref"]), "lines+markers", name="referred",
                 marker={"color": ACCENT, "symbol": "diamond", "size": 7}, line={"color": ACCENT, "width": 1}),
    ]
    marks = _Marks()
    marks.limit(limit_pct, "limit")
    marks.events(events, "chart_hours")
    return plain_figure(traces, marks.layout(_axes("running hours (h)", "case drain, % of max flow"), hours))


def temperature_figure(readings, min_c, max_c, events: list[dict] | None = None, unit: str = "degC") -> dict:
    """Oil temperature at each reading against the site's local time, in ``unit``, with the pump's limits.

    readings: columns taken_at (ISO 8601 with offset), oil_temp_c. events: dicts with date and kind_label.
    """
    def shown(values):
        return units.from_canonical(_numbers(values), "temperature", unit)

    min_c, max_c = (None if v is None else float(shown([v])[0]) for v in (min_c, max_c))
    # plotly draws wall-clock times: the local time without its offset (the page names the zone)
    taken = [text[:16] for text in readings["taken_at"]]
    traces = [_scatter(taken, shown(readings["oil_temp_c"]), "lines+markers",
                       name="oil temperature", marker={"color": ACCENT, "symbol": "square", "size": 6},
                       line={"color": ACCENT, "width": 1})]
    marks = _Marks()
    marks.limit(max_c, "upper limit")
    marks.limit(min_c, "lower limit")
    marks.events(events, "date")
    return plain_figure(traces, marks.layout(_axes("date (site time)", f"oil temperature ({units.shown(unit)})"),
                                             taken))


def cleanliness_figure(samples, target: tuple | None) -> dict:
    """ISO 4406 scale numbers of each lab result against time, with the target code per channel.

    samples: columns sampled_at, code_4, code_6, code_14. target: (c4, c6, c14) scale numbers or None.
    """
    styles = (("code_4", "≥4 µm(c)", "circle", "solid"), ("code_6", "≥6 µm(c)", "square", "dash"),
              ("code_14", "≥14 µm(c)", "triangle-up", "dot"))
    sampled = list(samples["sampled_at"])
    traces = [_scatter(sampled, _numbers(samples[column]), "lines+markers", name=name,
                       marker={"symbol": symbol, "size": 8, "color": ACCENT},
                       line={"dash": dash, "color": ACCENT, "width": 1})
              for column, name, symbol, dash in styles]
    marks = _Marks()
    if target:
        for value, (_, name, _, _) in zip(target, styles, strict=True):
            marks.limit(value, f"target {name}")
    return plain_figure(traces, marks.layout(_axes("sampled", "ISO 4406 scale number")))


def flow_test_figure(points, baseline, pressure_unit: str = "bar", flow_unit: str = "L/min") -> dict:
    """A multi-point flow test's flow against pressure, beside the line the pump's baseline slip gives, in the
    site's units.

    points, baseline: columns pressure_bar, flow_lpm.
    """
    def p(frame):
        return units.from_canonical(_numbers(frame["pressure_bar"]), "pressure", pressure_unit)

    def q(frame):
        return units.from_canonical(_numbers(frame["flow_lpm"]), "flow", flow_unit)

    traces = [
        _scatter(p(baseline), q(baseline), "lines", name="baseline", line={"color": MUTED, "dash": "dash", "width": 2}),
        _scatter(p(points), q(points), "lines+markers", name="this test",
                 marker={"color": ACCENT, "symbol": "circle", "size": 9}, line={"color": ACCENT, "width": 1}),
    ]
    return plain_figure(traces, _axes(f"outlet pressure ({units.shown(pressure_unit)})",
                                      f"outlet flow ({units.shown(flow_unit)})"))


def _columns(rows: list[dict], names) -> dict[str, list]:
    """Rows of the page's data as columns (the figures read whole columns)."""
    return {name: [row[name] for row in rows] for name in names}


def page_charts(data: dict) -> dict[str, str]:
    """The pump page's figures as HTML snippets, built from the same data its JSON twin carries
    (fleet.services.pages.pump)."""
    out = {}
    events = data["events"]
    limits = data["limits"]
    site_units = data["site_units"]
    if data["readings"]:
        readings = _columns(data["readings"], ("hours", "eta_v", "eta_v_ref", "case_drain_pct", "case_drain_pct_ref",
                                               "oil_temp_c", "taken_at"))
        band = _columns(data["trend"]["points"], ("hours", "mean", "low", "high", "forecast")) if data["trend"] \
            else None
        out["efficiency"] = chart_html(efficiency_figure(readings, band, limits["eta_v_limit"], events),
                                       "chart-efficiency")
        if data["pump"]["case_drain"]:
            out["drain"] = chart_html(drain_figure(readings, limits["drain_limit_pct"], events), "chart-drain")
        out["temperature"] = chart_html(
            temperature_figure(readings, limits["oil_temp_min_c"], limits["oil_temp_max_c"], events,
                               site_units["temperature"]),
            "chart-temperature")
    reported = [sample for sample in data["samples"] if sample["code"]]  # a sample still at the lab has no point
    if reported:
        samples = _columns(reported, ("sampled_at", "code_4", "code_6", "code_14"))
        out["cleanliness"] = chart_html(cleanliness_figure(samples, _target(limits["cleanliness_target"])),
                                        "chart-cleanliness")
    if data["flow_test"]:
        test = data["flow_test"]
        out["flow_test"] = chart_html(
            flow_test_figure(_columns(test["points"], ("pressure_bar", "flow_lpm")),
                             _columns(test["baseline"], ("pressure_bar", "flow_lpm")), site_units["pressure"],
                             site_units["flow"]), "chart-flowtest")
    return out


def _target(code: str | None):
    if not code:
        return None
    try:
        return parse_code(code).channels()
    except ValueError:
        return None

"""Every page has machine-readable twins: one data function, the format chosen last.

A page registered with ``twin_routes`` answers HTML at its path, JSON at ``path.json`` (or when the request
sends ``Accept: application/json``), CSV at ``path.csv`` and a spreadsheet at ``path.xlsx`` (the CSV's columns and
rows, numbers as numbers). Text in the CSV and the spreadsheet passes the formula guard (``fleet.io.formulas``).
"""

import csv
import io
from collections.abc import Callable, Sequence

from flask import Blueprint, Response, jsonify, render_template, request, url_for

from fleet.io.formulas import guard
from fleet.io.spreadsheet import XLSX_MIMETYPE, write_xlsx

TABLE_FORMATS = ("csv", "xlsx")  # the twins that carry a page's table
TWIN_FORMATS = ("json", *TABLE_FORMATS)


def twin_routes(bp: Blueprint, rule: str, json_rule: str | None = None, **options) -> Callable:
    base = json_rule or rule.rstrip("/")

    def decorator(view: Callable) -> Callable:
        endpoint = options.pop("endpoint", view.__name__)
        bp.add_url_rule(rule, endpoint, view, defaults={"fmt": None}, **options)
        for fmt in TWIN_FORMATS:
            bp.add_url_rule(f"{base}.{fmt}", endpoint, view, defaults={"fmt": fmt}, **options)
        return view

    return decorator


def wants_json(fmt: str | None) -> bool:
    if fmt == "json":
        return True
    if fmt is None:
        best = request.accept_mimetypes.best_match(["text/html", "application/json"])
        return best == "application/json" and request.accept_mimetypes["application/json"] > \
            request.accept_mimetypes["text/html"]
    return False


def twin_urls() -> dict[str, str]:
    """Links to this page's JSON, CSV and xlsx twins, keeping the query string."""
    args = {**request.view_args, **request.args.to_dict()}
    args.pop("fmt", None)
    endpoint = request.endpoint
    return {fmt: url_for(endpoint, fmt=fmt, **args) for fmt in TWIN_FORMATS}


def to_csv(rows: Sequence[dict], columns: Sequence[str]) -> str:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(columns), extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: guard(_cell(row.get(k))) for k in columns})
    return buffer.getvalue()


def to_xlsx(rows: Sequence[dict], columns: Sequence[str], title: str) -> bytes:
    return write_xlsx(list(columns), ([_cell(row.get(k)) for k in columns] for row in rows), title)


def _cell(value):
    if value is None:
        return ""
    if isinstance(value, list | tuple):
        return " | ".join(str(v) for v in value)
    return value


def is_table_format(fmt: str | None) -> bool:
    """True for the twins that answer the page's table (CSV, xlsx) rather than HTML or JSON."""
    return fmt in TABLE_FORMATS


def respond(data: dict, template: str, fmt: str | None, rows_key: str, columns: Sequence[str],
            filename: str, status: int = 200) -> Response:
    """HTML, JSON, CSV or xlsx of the same ``data``; CSV and xlsx take ``data[rows_key]`` with ``columns``."""
    if wants_json(fmt):
        response = jsonify(data)
        response.status_code = status
        return response
    if fmt == "csv":
        return Response(to_csv(data[rows_key], columns), status=status, mimetype="text/csv",
                        headers={"Content-Disposition": f'attachment; filename="{filename}.csv"'})
    if fmt == "xlsx":
        return Response(to_xlsx(data[rows_key], columns, filename), status=status, mimetype=XLSX_MIMETYPE,
                        headers={"Content-Disposition": f'attachment; filename="{filename}.xlsx"'})
    return Response(render_template(template, twins=twin_urls(), **data), status=status)

"""Every page has machine-readable twins: one data function, the format chosen last.

A page registered with ``twin_routes`` answers HTML at its path, JSON at ``path.json`` (or when the request
sends ``Accept: application/json``) and CSV at ``path.csv``.
"""

import csv
import io
from collections.abc import Callable, Sequence

from flask import Blueprint, Response, jsonify, render_template, request, url_for


def twin_routes(bp: Blueprint, rule: str, json_rule: str | None = None, **options) -> Callable:
    base = json_rule or rule.rstrip("/")

    def decorator(view: Callable) -> Callable:
        endpoint = options.pop("endpoint", view.__name__)
        bp.add_url_rule(rule, endpoint, view, defaults={"fmt": None}, **options)
        bp.add_url_rule(f"{base}.json", endpoint, view, defaults={"fmt": "json"}, **options)
        bp.add_url_rule(f"{base}.csv", endpoint, view, defaults={"fmt": "csv"}, **options)
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
    """Links to this page's JSON and CSV twins, keeping the query string."""
    args = {**request.view_args, **request.args.to_dict()}
    args.pop("fmt", None)
    endpoint = request.endpoint
    return {fmt: url_for(endpoint, fmt=fmt, **args) for fmt in ("json", "csv")}


def to_csv(rows: Sequence[dict], columns: Sequence[str]) -> str:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(columns), extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: _cell(row.get(k)) for k in columns})
    return buffer.getvalue()


def _cell(value):
    if value is None:
        return ""
    if isinstance(value, list | tuple):
        return " | ".join(str(v) for v in value)
    return value


def respond(data: dict, template: str, fmt: str | None, rows_key: str, columns: Sequence[str],
            filename: str, status: int = 200) -> Response:
    """HTML, JSON or CSV of the same ``data``; CSV takes ``data[rows_key]`` with ``columns``."""
    if wants_json(fmt):
        response = jsonify(data)
        response.status_code = status
        return response
    if fmt == "csv":
        return Response(to_csv(data[rows_key], columns), status=status, mimetype="text/csv",
                        headers={"Content-Disposition": f'attachment; filename="{filename}.csv"'})
    return Response(render_template(template, twins=twin_urls(), **data), status=status)

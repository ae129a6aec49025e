"""A CSV file uploaded on the register page: imported whole or not at all, with the CLI's row-numbered report."""

import io

import pandas as pd
from sqlalchemy.orm import Session, sessionmaker

from fleet.io.columns import KINDS
from fleet.io.parse import ImportRejected
from fleet.services.transfer.importing import import_table
from fleet.services.writes import perform

PROBLEM_COLUMNS = ("row", "column", "reason")


def upload_kinds() -> dict:
    """Every import kind with its columns, for the upload page's help."""
    return {kind: [{"name": c.name, "required": c.required, "help": c.help} for c in columns]
            for kind, columns in KINDS.items()}


def read_upload(data: bytes) -> pd.DataFrame:
    """Text cells of an uploaded CSV, read exactly as the CLI reads a file."""
    return pd.read_csv(io.BytesIO(data), dtype=str, keep_default_na=False, skipinitialspace=True,
                       encoding="utf-8-sig")


def upload_file(sessions: sessionmaker[Session], kind: str, data: bytes | None) -> dict:
    """Import ``data`` as ``kind`` in one unit of work. Returns the outcome; ``ok`` False means nothing was
    written, with ``problems`` as rows and ``report`` as the CLI prints it."""
    if kind not in KINDS:
        return _rejected(kind, [{"row": 1, "column": "kind", "reason": f"'{kind}' is not an import kind"}],
                         f"row 1, column 'kind': '{kind}' is not an import kind")
    if not data:
        return _rejected(kind, [{"row": 1, "column": "", "reason": "no file chosen, or the file is empty"}],
                         "no file chosen, or the file is empty")
    try:
        table = read_upload(data)
    except (ValueError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        reason = f"the file is not a readable CSV ({exc.__class__.__name__}: {str(exc).splitlines()[0]})"
        return _rejected(kind, [{"row": 1, "column": "", "reason": reason}], reason)
    try:
        outcome = perform(sessions, lambda session: import_table(session, kind, table, source="import"))
    except ImportRejected as rejected:
        rows = [{"row": p.row, "column": p.column, "reason": p.reason} for p in rejected.problems]
        return _rejected(kind, rows, rejected.report())
    result = outcome.value
    return {
        "ok": True, "kind": kind, "summary": result.summary(), "problems": [], "report": "",
        "rows": result.rows, "created": result.created, "updated": result.updated, "skipped": result.skipped,
        "pump_ids": sorted(outcome.pumps), "analysis": outcome.describe(),
    }


def _rejected(kind: str, problems: list[dict], report: str) -> dict:
    return {"ok": False, "kind": kind, "summary": f"{len(problems)} problem(s); nothing was imported",
            "problems": problems, "report": report, "rows": 0, "created": 0, "updated": 0, "skipped": 0,
            "pump_ids": [], "analysis": None}

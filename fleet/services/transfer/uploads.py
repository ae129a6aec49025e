"""A CSV or .xlsx file uploaded on the register page: imported whole or not at all, with the CLI's report."""

from sqlalchemy.orm import Session, sessionmaker

from fleet.io.columns import KINDS
from fleet.io.parse import ImportRejected
from fleet.services.transfer.importing import import_placed, read_readable
from fleet.services.writes import perform

PROBLEM_COLUMNS = ("row", "column", "reason", "cell")  # cell: a spreadsheet's reference, e.g. B7


def upload_kinds() -> dict:
    """Every import kind with its columns, for the upload page's help."""
    return {kind: [{"name": c.name, "required": c.required, "help": c.help} for c in columns]
            for kind, columns in KINDS.items()}


def upload_file(sessions: sessionmaker[Session], kind: str, data: bytes | None, filename: str | None = None) -> dict:
    """Import ``data`` (CSV, or an .xlsx workbook by its content or ``filename``) as ``kind`` in one unit of work.
    Returns the outcome; ``ok`` False means nothing was written, with ``problems`` as rows (a workbook's with
    their cell) and ``report`` as the CLI prints it."""
    if kind not in KINDS:
        reason = f"'{kind}' is not an import kind"
        return _rejected(kind, [{"row": 1, "column": "kind", "cell": None, "reason": reason}],
                         f"row 1, column 'kind': {reason}")
    if not data:
        reason = "no file chosen, or the file is empty"
        return _rejected(kind, [{"row": 1, "column": "", "cell": None, "reason": reason}], reason)
    try:
        table, places = read_readable(data, filename)
        outcome = perform(sessions, lambda session: import_placed(session, kind, table, places, source="import",
                                                                      skip_stored_same=True))
    except ImportRejected as rejected:
        rows = [{"row": p.row, "column": p.column, "reason": p.reason, "cell": p.cell} for p in rejected.problems]
        return _rejected(kind, rows, rejected.report())
    result = outcome.value
    return {
        "ok": True, "kind": kind, "summary": result.summary(), "problems": [], "report": "",
        "rows": result.rows, "created": result.created, "updated": result.updated, "skipped": result.skipped,
        "pump_ids": sorted(outcome.pumps), "analysis": outcome.describe(), "doubts": result.doubts,
    }


def _rejected(kind: str, problems: list[dict], report: str) -> dict:
    return {"ok": False, "kind": kind, "summary": f"{len(problems)} problem(s); nothing was imported",
            "problems": problems, "report": report, "rows": 0, "created": 0, "updated": 0, "skipped": 0,
            "pump_ids": [], "analysis": None, "doubts": []}

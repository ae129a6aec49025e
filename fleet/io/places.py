"""Where the rows of an imported table lie in their file, so that problems and doubts name the file's own rows.

A table that holds every row of its file under the header is numbered as the file is (fleet.io.parse.row_numbers:
position + 2, the header being row 1). A reader that leaves rows out (rows with every cell blank, which a
spreadsheet and a text editor still count) gives the file's row of each row it kept, and what the import found is
renamed to those rows before it is reported.
"""

from collections.abc import Sequence
from dataclasses import dataclass, replace

from fleet.io.parse import ImportRejected


@dataclass(frozen=True)
class RowPlaces:
    rows: Sequence[int]  # the file's row number of each table row (the header is row 1)

    def row(self, row: int) -> int:
        """The file's row of the table's row ``row`` (numbered as fleet.io.parse.row_numbers numbers them); row 1,
        the header, and anything outside the table stay as they are."""
        return row if row < 2 or row - 2 >= len(self.rows) else int(self.rows[row - 2])

    def locate(self, rejected: ImportRejected) -> ImportRejected:
        return ImportRejected([replace(problem, row=self.row(problem.row)) for problem in rejected.problems])

    def locate_doubts(self, doubts: list[dict]) -> list[dict]:
        """Doubts about stored rows (``row``, ``field``, ``code``, ``message``) with the file's rows."""
        return [{**doubt, "row": self.row(int(doubt["row"]))} for doubt in doubts]

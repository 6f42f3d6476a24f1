"""One record for an input row or feature that a reader rejected or adjusted.

Every reader of optional inputs (sites, crew log, lines, outages) returns a list of these beside
its table, so the CLI, the report and the widgets show problems one way.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Problem:
    """One rejected or adjusted item of an input file.

    Attributes
    ----------
    file : str
        File name or path.
    where : str
        ``"line 7"`` (line numbers count the header as line 1) or ``"feature 3"``.
    item_id : str
        The item's id (line, outage) when known, else "".
    message : str
        One sentence.
    severity : str
        ``"rejected"`` (left out of the analysis) or ``"note"`` (used with an adjustment).
    line : int or None
        The line number when the item is a CSV row.
    """

    file: str
    where: str
    item_id: str
    message: str
    severity: str = "rejected"
    line: int | None = None

    @classmethod
    def at_line(cls, file: str, line: int, message: str, item_id: str = "", severity: str = "rejected") -> "Problem":
        """A problem of CSV row `line`."""
        return cls(file, f"line {line}", item_id, message, severity, line)

    @property
    def reason(self) -> str:
        return self.message

    def text(self) -> str:
        ident = f" ({self.item_id})" if self.item_id and repr(self.item_id) not in self.message else ""  # said once
        return f"{self.file}, {self.where}{ident}: {self.message}"

    __str__ = text

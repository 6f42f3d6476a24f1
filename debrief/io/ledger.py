"""The data ledger: what a reader did with every row of one input file.

Every reader (strokes, sites, outages, ...) returns its table together with a :class:`Ledger`:
rows read = rows accepted + rows rejected (by reason, with the first line numbers) + duplicates
dropped. Nothing is dropped silently; the ledger goes into every report. The class knows nothing
about strokes: a reader supplies its own reason codes and their plain-English descriptions.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

#: How many line numbers are kept per reason (and for duplicates).
FIRST_LINES = 5


@dataclass
class Ledger:
    """Counts and notes for one input file.

    Attributes
    ----------
    source : str
        The input, as named to the user (usually the file path).
    rows_read : int
        Data rows in the file (header and blank lines not counted).
    rows_accepted : int
        Rows in the returned table.
    rejected : dict
        ``reason -> {"count": int, "first_lines": [int, ...], "description": str}``; the
        first lines are the smallest line numbers with that reason, at most ``FIRST_LINES``.
    duplicates_dropped : int
        Exact duplicate rows left out (the first occurrence is kept).
    duplicate_lines : list of int
        Line numbers of the first dropped duplicates.
    missing_ellipse : int
        Accepted rows without a (complete) location error ellipse; 0 for readers without one.
    zero_ellipse : int
        Of those, rows whose ellipse had a zero semi-axis (an export rounded to 0.0 km): the row
        is kept and treated as having no ellipse.
    zero_ellipse_lines : list of int
        Line numbers of the first such rows.
    notes : list of str
        Plain sentences: assumptions made, units converted, column mapping used, ...
    """

    source: str
    rows_read: int = 0
    rows_accepted: int = 0
    rejected: dict = field(default_factory=dict)
    duplicates_dropped: int = 0
    duplicate_lines: list = field(default_factory=list)
    missing_ellipse: int = 0
    zero_ellipse: int = 0
    zero_ellipse_lines: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    @property
    def rows_rejected(self) -> int:
        """Total rejected rows over every reason."""
        return int(sum(r["count"] for r in self.rejected.values()))

    # -- building -------------------------------------------------------------------------

    def reject(self, reason: str, lines, description: str) -> None:
        """Count rows rejected for `reason` at the given line numbers (may be called repeatedly).

        Parameters
        ----------
        reason : str
            Short snake_case code of the reader's own (e.g. ``bad_latitude``).
        lines : array-like of int
            Line numbers of the rejected rows (any order).
        description : str
            One plain-English phrase saying what the code means.
        """
        lines = np.asarray(lines, dtype=np.int64).ravel()
        if lines.size == 0:
            return
        entry = self.rejected.setdefault(reason, {"count": 0, "first_lines": [], "description": description})
        entry["count"] += int(lines.size)
        smallest = np.sort(lines)[:FIRST_LINES]
        entry["first_lines"] = sorted(set(entry["first_lines"]) | set(int(x) for x in smallest))[:FIRST_LINES]

    def add_duplicates(self, lines) -> None:
        """Count dropped duplicate rows at the given line numbers."""
        lines = np.asarray(lines, dtype=np.int64).ravel()
        self.duplicates_dropped += int(lines.size)
        merged = set(self.duplicate_lines) | set(int(x) for x in np.sort(lines)[:FIRST_LINES])
        self.duplicate_lines = sorted(merged)[:FIRST_LINES]

    def add_zero_ellipse(self, lines) -> None:
        """Count kept rows whose zero semi-axis made their ellipse missing, at these line numbers."""
        lines = np.asarray(lines, dtype=np.int64).ravel()
        self.zero_ellipse += int(lines.size)
        merged = set(self.zero_ellipse_lines) | set(int(x) for x in np.sort(lines)[:FIRST_LINES])
        self.zero_ellipse_lines = sorted(merged)[:FIRST_LINES]

    def note(self, text: str) -> None:
        """Add a note once (repeated notes are kept only the first time)."""
        if text not in self.notes:
            self.notes.append(text)

    # -- checking -------------------------------------------------------------------------

    def check(self) -> None:
        """Raise ValueError unless rows read = accepted + rejected + duplicates and counts agree.

        A failure here is a bug in a reader, not a user's mistake.
        """
        total = self.rows_accepted + self.rows_rejected + self.duplicates_dropped
        if self.rows_read != total:
            raise ValueError(
                f"ledger of {self.source}: rows read {self.rows_read} != accepted {self.rows_accepted}"
                f" + rejected {self.rows_rejected} + duplicates {self.duplicates_dropped}"
            )
        for reason, r in self.rejected.items():
            if r["count"] <= 0 or len(r["first_lines"]) != min(r["count"], FIRST_LINES):
                raise ValueError(f"ledger of {self.source}: inconsistent entry for {reason}: {r}")
        if min(self.rows_accepted, self.duplicates_dropped, self.missing_ellipse, self.zero_ellipse) < 0:
            raise ValueError(f"ledger of {self.source}: negative count")
        if self.missing_ellipse > self.rows_accepted:
            raise ValueError(f"ledger of {self.source}: more rows without ellipse than accepted rows")
        if self.zero_ellipse > self.missing_ellipse or len(self.zero_ellipse_lines) != min(self.zero_ellipse, FIRST_LINES):
            raise ValueError(f"ledger of {self.source}: zero-axis ellipses {self.zero_ellipse} do not agree with "
                             f"their lines {self.zero_ellipse_lines} or the rows without ellipse")

    @property
    def consistent(self) -> bool:
        """True when :meth:`check` passes."""
        try:
            self.check()
        except ValueError:
            return False
        return True

    # -- output ---------------------------------------------------------------------------

    def _reasons_by_count(self):
        return sorted(self.rejected.items(), key=lambda kv: (-kv[1]["count"], kv[0]))

    def to_dict(self) -> dict:
        """A JSON-ready dict (plain ints, lists and strings)."""
        return {
            "source": str(self.source),
            "rows_read": int(self.rows_read),
            "rows_accepted": int(self.rows_accepted),
            "rows_rejected": int(self.rows_rejected),
            "rejected": {
                k: {"count": int(v["count"]), "first_lines": [int(x) for x in v["first_lines"]],
                    "description": str(v["description"])}
                for k, v in self._reasons_by_count()
            },
            "duplicates_dropped": int(self.duplicates_dropped),
            "duplicate_lines": [int(x) for x in self.duplicate_lines],
            "missing_ellipse": int(self.missing_ellipse),
            "zero_ellipse": int(self.zero_ellipse),
            "zero_ellipse_lines": [int(x) for x in self.zero_ellipse_lines],
            "notes": [str(n) for n in self.notes],
        }

    def one_line(self) -> str:
        """One sentence for stderr, e.g. ``12 of 3,041 rows rejected (bad_latitude 7, zero_current 5);
        2 duplicates dropped; see the ledger``."""
        if self.rows_rejected:
            detail = ", ".join(f"{k} {v['count']:,}" for k, v in self._reasons_by_count())
            parts = [f"{self.rows_rejected:,} of {self.rows_read:,} rows rejected ({detail})"]
        else:
            parts = [f"no rows rejected of {self.rows_read:,}"]
        if self.duplicates_dropped:
            word = "duplicate" if self.duplicates_dropped == 1 else "duplicates"
            parts.append(f"{self.duplicates_dropped:,} {word} dropped")
        if self.zero_ellipse:
            parts.append(f"{self.zero_ellipse:,} with a 0 km ellipse axis taken as no ellipse")
        parts.append("see the ledger")
        return "; ".join(parts)

    def to_text(self) -> str:
        """A readable multi-line block (for the terminal and the report)."""
        w = max(len(f"{self.rows_read:,}"), 5)

        def row(label, n, tail=""):
            return f"  {label:<21}{n:>{w},}" + (f"  {tail}" if tail else "")

        def where(first, count):
            word = "line" if count == 1 else "lines"
            more = ", ..." if count > len(first) else ""
            return f"({word} {', '.join(str(x) for x in first)}{more})"

        lines = [
            f"Data ledger: {self.source}",
            row("rows read", self.rows_read),
            row("accepted", self.rows_accepted),
            row("rejected", self.rows_rejected),
        ]
        for k, v in self._reasons_by_count():
            lines.append(f"    {k:<19}{v['count']:>{w},}  {v['description']} {where(v['first_lines'], v['count'])}")
        tail = where(self.duplicate_lines, self.duplicates_dropped) if self.duplicates_dropped else ""
        lines.append(row("duplicates dropped", self.duplicates_dropped, tail))
        lines.append(row("without ellipse", self.missing_ellipse))
        if self.zero_ellipse:
            lines.append(f"    {'zero_ellipse':<19}{self.zero_ellipse:>{w},}  a semi-axis of 0 km, taken as no ellipse "
                         f"{where(self.zero_ellipse_lines, self.zero_ellipse)}")
        if self.notes:
            lines.append("Notes:")
            lines.extend(f"  - {n}" for n in self.notes)
        return "\n".join(lines)

"""Strokes per flash by polarity for the window, as a grid of buttons: click a cell to select.

Counts, percentages and means come from :func:`debrief.polarity.multiplicity_table` on the
window's flashes; a cell selects exactly the flashes it counts.
"""

from __future__ import annotations

import html

import ipywidgets as W
import numpy as np
import pandas as pd

from .. import palette
from .state import ExploreState, ensure_state

POLARITIES = ("negative", "positive")


def parse_table(table: pd.DataFrame) -> list[dict]:
    """Rows of :func:`multiplicity_table` as ``{"label", "lo", "hi", "count": {pol: n}, "pct": {pol: %}}``.

    ``lo``/``hi`` bound the multiplicities a row counts (``hi`` inf for the open row "10+").
    """
    rows = []
    for label, r in table.iterrows():
        label = str(label)
        lo = int(label.rstrip("+"))
        rows.append({"label": label, "lo": lo, "hi": float("inf") if label.endswith("+") else lo,
                     "count": {p: int(r[f"{p}_count"]) for p in POLARITIES},
                     "pct": {p: float(r[f"{p}_percent"]) for p in POLARITIES}})
    return rows


class MultiplicityTable(W.VBox):
    """Multiplicity (strokes per flash) by polarity of the window's flashes; cells are buttons."""

    def __init__(self, event_or_state, *, flash_type: str = "CG"):
        self.state: ExploreState = ensure_state(event_or_state)
        self.flash_type = flash_type
        self.grid = W.GridBox(layout=W.Layout(grid_template_columns="110px 150px 150px", grid_gap="2px"))
        self.note = W.HTML()
        self.buttons: dict[tuple[str, str], W.Button] = {}
        self.rows: list[dict] = []
        self.means: dict = {}
        self.mean_cells: dict = {}
        self._labels: list = []
        self.state.observe(self._update, names=["window"])
        super().__init__([self.grid, self.note])
        self._update()

    def _flashes(self) -> pd.DataFrame:
        _, flashes = self.state.window_tables()
        return flashes

    def _update(self, change=None):
        from ..polarity import mean_multiplicity, multiplicity_table

        flashes = self._flashes()
        self.table = multiplicity_table(flashes, type=self.flash_type)
        self.rows = parse_table(self.table)
        mm = mean_multiplicity(flashes, type=self.flash_type)
        self.means = {p: float(mm.loc[p, "mean_multiplicity"]) for p in POLARITIES if p in mm.index}
        labels = [r["label"] for r in self.rows]
        if labels != self._labels:  # build the grid once; later windows only relabel it
            self._build(labels)
        for r in self.rows:
            for p in POLARITIES:
                n, pct = r["count"][p], r["pct"][p]
                b = self.buttons[(r["label"], p)]
                with b.hold_sync():
                    b.description = f"{n:,}" + (f"  ({pct:.1f}%)" if np.isfinite(pct) else "")
                    b.disabled = n == 0
                    b.tooltip = f"select the {n} {p} flashes with {r['label']} strokes"
        for p, w in self.mean_cells.items():
            v = self.means.get(p, np.nan)
            w.value = "—" if not np.isfinite(v) else f"{v:.2f}"
        kind = "Ground" if self.flash_type == "CG" else "Cloud"
        self.note.value = (f"<small>{kind} flashes by the number of strokes the network reported; a network "
                           "that misses strokes shows lower multiplicity than the flashes had.</small>")

    def _build(self, labels):
        cells = [W.HTML("<b>strokes</b>")] + [W.HTML(f'<b style="color:{palette.stroke_colour("CG", p)}">{p} flashes</b>')
                                              for p in POLARITIES]
        self.buttons = {}
        for label in labels:
            cells.append(W.HTML(html.escape(label)))
            for p in POLARITIES:
                b = W.Button(layout=W.Layout(width="145px"))
                b.add_class("debrief-mult-cell")
                b.on_click(lambda _, label=label, p=p: self.select_cell(label, p))
                self.buttons[(label, p)] = b
                cells.append(b)
        self.mean_cells = {p: W.HTML() for p in POLARITIES}
        cells += [W.HTML("<i>mean</i>"), *self.mean_cells.values()]
        self.grid.children = cells
        self._labels = labels

    def cell_flash_ids(self, label: str, polarity: str) -> list[int]:
        """Flash ids counted in the cell (row `label`, column `polarity`)."""
        r = next(r for r in self.rows if r["label"] == label)
        f = self._flashes()
        # The same flashes multiplicity_table counts: its type (likely-cloud reports kept).
        f = f[(f["type"].astype(str) == self.flash_type).to_numpy()]
        m = f["multiplicity"].to_numpy()
        keep = (f["polarity"].to_numpy() == polarity) & (m >= r["lo"]) & (m <= r["hi"])
        return [int(v) for v in f["flash_id"].to_numpy()[keep]]

    def select_cell(self, label: str, polarity: str):
        self.state.select(flash_ids=self.cell_flash_ids(label, polarity))

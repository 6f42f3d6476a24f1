"""|Peak current| histogram by polarity (bqplot), first and subsequent strokes apart.

Counts come from :func:`debrief.polarity.polarity_histogram` on the window's strokes (type filter
applied); only bin counts go to the browser. Brushing a range on the x axis sets the state's
|kA| filter; clearing the brush clears it.
"""

from __future__ import annotations

import html
import math

import ipywidgets as W
import numpy as np
from bqplot import Axis, Bars, Figure, LinearScale
from bqplot.interacts import BrushIntervalSelector

from .. import palette
from .state import ExploreState, ensure_state

_SERIES = ("negative_first", "negative_subsequent", "positive_first", "positive_subsequent")


def default_edges_ka(abs_peak_ka, max_bins: int = 40, quantile: float = 0.995) -> np.ndarray:
    """Bin edges from 0 to about the 99.5th percentile of |kA|, in steps of 2, 5, 10, 20 or 50 kA.

    The few strongest strokes beyond the last edge are counted in the core's overflow row and
    named under the chart rather than squeezing the bulk of the distribution into a few bins.
    """
    a = np.asarray(abs_peak_ka, dtype=float)
    a = a[np.isfinite(a)]
    top = float(np.quantile(a, quantile)) if len(a) else 100.0
    top = max(top, 10.0)
    for w in (2.0, 5.0, 10.0, 20.0, 50.0, 100.0):
        if top / w <= max_bins:
            break
    return np.arange(0.0, math.ceil(top / w) * w + w / 2, w)


def type_argument(types) -> str | None:
    """The ``type`` argument of the polarity functions for the state's type filter."""
    return types[0] if len(types) == 1 else None


class PolarityHistogram(W.VBox):
    """Histogram of |peak current| for the window, negative and positive side by side.

    Parameters
    ----------
    event_or_state : Event or ExploreState
    bin_edges_ka : array_like, optional
        Bin edges, kA (default :func:`default_edges_ka` over the whole event).
    """

    def __init__(self, event_or_state, *, bin_edges_ka=None, height: str = "260px"):
        self.state: ExploreState = ensure_state(event_or_state)
        ev = self.state.event
        edges = default_edges_ka(np.abs(ev.strokes["peak_current_ka"].to_numpy(dtype=float))) if bin_edges_ka is None else bin_edges_ka
        self.edges_ka = np.asarray(edges, dtype=float)
        w = float(np.min(np.diff(self.edges_ka)))
        centres = (self.edges_ka[:-1] + self.edges_ka[1:]) / 2
        self.x_scale = LinearScale(min=float(self.edges_ka[0]), max=float(self.edges_ka[-1]))
        self.y_scale = LinearScale(min=0.0)
        zeros = np.zeros((2, len(centres)))
        # Each polarity takes half a bin (negative left, positive right); subsequent strokes are
        # stacked on first strokes, lighter.
        common = dict(scales={"x": self.x_scale, "y": self.y_scale}, type="stacked", padding=0.55,
                      stroke_width=0.0, opacity_mode="element", color_mode="element")
        self.neg_bars = Bars(x=centres - w / 4, y=zeros, colors=[palette.NEGATIVE_CG, palette.NEGATIVE_CG],
                             opacities=[1.0, 0.4], labels=["negative, first", "negative, subsequent (light)"], **common)
        self.pos_bars = Bars(x=centres + w / 4, y=zeros, colors=[palette.POSITIVE_CG, palette.POSITIVE_CG],
                             opacities=[1.0, 0.4], labels=["positive, first", "positive, subsequent (light)"], **common)
        self.brush = BrushIntervalSelector(scale=self.x_scale, marks=[self.neg_bars, self.pos_bars], color=palette.LINE)
        top = float(self.edges_ka[-1])
        tick = next(t for t in (5, 10, 20, 25, 50, 100, 200, 500) if top / t <= 10)
        ax_x = Axis(scale=self.x_scale, label="|peak current| (kA)", tick_values=np.arange(0.0, top + 1e-9, tick),
                    tick_format="d")
        ax_y = Axis(scale=self.y_scale, orientation="vertical", label="strokes", tick_format="d")
        self.figure = Figure(marks=[self.neg_bars, self.pos_bars], axes=[ax_x, ax_y], interaction=self.brush,
                             animation_duration=0,
                             fig_margin={"top": 10, "bottom": 45, "left": 55, "right": 10},
                             layout=W.Layout(height=height, width="100%"))
        self.note = W.HTML()
        sw = ('<span style="display:inline-block;width:10px;height:10px;background:{c};opacity:{o};'
              'margin:0 3px 0 10px;vertical-align:-1px"></span>{t}')
        self.legend = W.HTML("<small>" + "".join(sw.format(c=c, o=o, t=t) for c, o, t in (
            (palette.NEGATIVE_CG, 1.0, "negative, first"), (palette.NEGATIVE_CG, 0.4, "negative, subsequent"),
            (palette.POSITIVE_CG, 1.0, "positive, first"), (palette.POSITIVE_CG, 0.4, "positive, subsequent"))) + "</small>")
        self.counts = {k: np.zeros(len(centres)) for k in _SERIES}
        self._from_state = False
        self.brush.observe(self._on_brush, names="selected")
        self.state.observe(self._update, names=["window", "types"])
        self.state.observe(self._on_range, names="abs_ka_range")
        super().__init__([self.legend, self.figure, self.note])
        self._update()

    def _update(self, change=None):
        from ..polarity import polarity_histogram

        strokes, _ = self.state.window_tables()
        if not self.state.types:
            strokes = strokes.iloc[:0]
        table = polarity_histogram(strokes, self.edges_ka, type=type_argument(self.state.types))
        # The core adds an overflow row (hi = inf) and, when the first edge is above 0, an
        # underflow row; the bars show the requested bins and the note counts the rest.
        inside = (table["bin_lo_ka"].to_numpy() >= self.edges_ka[0]) & np.isfinite(table["bin_hi_ka"].to_numpy())
        self.table = table
        self.counts = {k: table[k].to_numpy(dtype=float)[inside] for k in _SERIES}
        with self.neg_bars.hold_sync():
            self.neg_bars.y = np.vstack([self.counts["negative_first"], self.counts["negative_subsequent"]])
        with self.pos_bars.hold_sync():
            self.pos_bars.y = np.vstack([self.counts["positive_first"], self.counts["positive_subsequent"]])
        total = int(sum(c.sum() for c in self.counts.values()))
        outside = int(table.loc[~inside, list(_SERIES)].to_numpy().sum())
        what = {"CG": "ground strokes", "IC": "cloud pulses"}.get(type_argument(self.state.types), "strokes")
        txt = f"{total:,} {what} (first strokes dark, subsequent strokes light)"
        if outside:
            txt += f"; {outside:,} outside {self.edges_ka[0]:g} to {self.edges_ka[-1]:g} kA, not drawn"
        self.note.value = f'<small>{html.escape(txt)}. Drag across the chart to filter by |kA|.</small>'

    def _on_brush(self, change):
        if self._from_state:
            return
        sel = change["new"]
        if sel is None or len(sel) < 2:
            self.state.abs_ka_range = (0.0, math.inf)
        else:
            lo, hi = sorted(float(v) for v in sel[:2])
            self.state.abs_ka_range = (lo, hi)

    def _on_range(self, change):
        lo, hi = change["new"]
        if lo == 0.0 and math.isinf(hi) and self.brush.selected is not None and len(self.brush.selected):
            self._from_state = True
            try:
                self.brush.selected = None
            finally:
                self._from_state = False

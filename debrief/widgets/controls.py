"""Time-window slider with play/step, and the type/polarity/|kA| filter bar."""

from __future__ import annotations

import html
import math

import ipywidgets as W
import numpy as np
import pandas as pd

from ..timeutil import format_times
from .state import ExploreState, ensure_state

#: Window widths offered, minutes (0: the whole event window).
WIDTHS_MIN = (1, 2, 5, 10, 15, 30, 60, 120, 0)


def count_line(n_strokes: int, n_flashes: int) -> str:
    """The count shown under the slider, e.g. ``1,234 strokes in window (456 flashes)``."""
    return f"{n_strokes:,} strokes in window ({n_flashes:,} flashes)"


class TimeWindow(W.VBox):
    """Scrub through the event: a window of chosen width moved in steps by slider, buttons or play.

    The window is ``[t0 + i * step, t0 + i * step + width]`` (clipped to the event end) with
    ``step = width / 3`` so consecutive windows overlap; it is written to ``state.window``.
    The label shows the window in UTC and the event's time zone and the stroke count of
    :meth:`ExploreState.window_tables`.
    """

    def __init__(self, event_or_state, *, width_min: int = 30, interval_ms: int = 900):
        self.state: ExploreState = ensure_state(event_or_state)
        ev = self.state.event
        self.t0, self.t1 = self.state.event.start, self.state.event.end
        self.tz = ev.config.time_zone
        opts = [(f"{m} min" if m < 60 else f"{m // 60} h", m) if m else ("whole event", 0) for m in WIDTHS_MIN]
        self.width = W.Dropdown(options=opts, value=width_min if width_min in WIDTHS_MIN else 0,
                                description="width", layout=W.Layout(width="170px"))
        self.slider = W.IntSlider(value=0, min=0, max=0, readout=False, continuous_update=False,
                                  description="window", layout=W.Layout(width="420px"))
        self.slider.add_class("debrief-time-slider")
        self.play = W.Play(value=0, min=0, max=0, step=1, interval=interval_ms, description="play")
        W.jslink((self.play, "value"), (self.slider, "value"))
        self.back = W.Button(description="◀ step", tooltip="previous window", layout=W.Layout(width="80px"))
        self.forward = W.Button(description="step ▶", tooltip="next window", layout=W.Layout(width="80px"))
        self.back.on_click(lambda _: self.step(-1))
        self.forward.on_click(lambda _: self.step(+1))
        self.label = W.HTML()
        self.label.add_class("debrief-window-label")
        self._syncing = False
        self.width.observe(self._on_width, names="value")
        self.slider.observe(self._on_slider, names="value")
        self.state.observe(self._on_window, names="window")
        self._on_width()
        super().__init__([W.HBox([self.play, self.back, self.slider, self.forward, self.width]), self.label])

    # -- arithmetic of the steps ----------------------------------------------------------------
    @property
    def width_ns(self) -> int:
        total = int((self.t1 - self.t0).value)
        return total if self.width.value == 0 else min(int(self.width.value) * 60_000_000_000, total)

    @property
    def step_ns(self) -> int:
        return max(self.width_ns // 3, 1)

    def window_of(self, i: int) -> tuple[pd.Timestamp, pd.Timestamp]:
        """The window at slider position `i` (UTC, inclusive)."""
        s = self.t0 + pd.Timedelta(int(i) * self.step_ns, unit="ns")
        return s, min(s + pd.Timedelta(self.width_ns, unit="ns"), self.t1)

    def n_positions(self) -> int:
        total = int((self.t1 - self.t0).value)
        if self.width.value == 0 or self.width_ns >= total:
            return 1
        return int(math.ceil((total - self.width_ns) / self.step_ns)) + 1

    def step(self, k: int):
        """Move the window by `k` steps (clipped at both ends)."""
        self.slider.value = int(np.clip(self.slider.value + k, 0, self.slider.max))

    # -- observers -------------------------------------------------------------------------------
    def _on_width(self, change=None):
        old_start = self.state.start
        n = self.n_positions()
        i = int(np.clip(round((old_start - self.t0).value / self.step_ns), 0, n - 1))
        self._syncing = True
        try:
            with self.slider.hold_sync(), self.play.hold_sync():
                self.slider.max = self.play.max = n - 1
                self.slider.value = self.play.value = i
            self.slider.disabled = self.play.disabled = n == 1
        finally:
            self._syncing = False
        self.state.window = self.window_of(i)
        self._on_window()

    def _on_slider(self, change):
        if not self._syncing:
            self.state.window = self.window_of(change["new"])

    def _on_window(self, change=None):
        strokes, flashes = self.state.window_tables()
        s, e = self.state.window
        self.label.value = (f'<b class="debrief-count">{html.escape(count_line(len(strokes), len(flashes)))}</b>'
                            f"<br><small>from {html.escape(format_times(s, self.tz))}"
                            f"<br>to&nbsp;&nbsp;&nbsp;{html.escape(format_times(e, self.tz))}"
                            " &nbsp;(a flash belongs to the window of its first stroke)</small>")


class FilterBar(W.HBox):
    """Type, polarity and |peak current| filters of the shared state."""

    def __init__(self, event_or_state):
        self.state: ExploreState = ensure_state(event_or_state)
        self.types = W.ToggleButtons(options=[("all", ("CG", "IC")), ("CG", ("CG",)), ("IC", ("IC",))],
                                     value=tuple(self.state.types), description="type",
                                     style={"button_width": "80px"})
        self.polarities = W.ToggleButtons(options=[("both", ("negative", "positive")), ("negative", ("negative",)),
                                                   ("positive", ("positive",))],
                                          value=tuple(self.state.polarities), description="polarity",
                                          style={"button_width": "80px"})
        self.ka = W.HTML()
        self.clear = W.Button(description="clear filters", layout=W.Layout(width="110px"))
        self.clear.on_click(lambda _: self.state.clear_filters())
        self.types.observe(lambda c: setattr(self.state, "types", c["new"]), names="value")
        self.polarities.observe(lambda c: setattr(self.state, "polarities", c["new"]), names="value")
        self.state.observe(self._sync, names=["types", "polarities", "abs_ka_range"])
        self._sync()
        super().__init__([self.types, self.polarities, self.ka, self.clear])

    def _sync(self, change=None):
        st = self.state
        if self.types.value != st.types and st.types in [o[1] for o in self.types.options]:
            self.types.value = st.types
        if self.polarities.value != st.polarities and st.polarities in [o[1] for o in self.polarities.options]:
            self.polarities.value = st.polarities
        lo, hi = st.abs_ka_range
        txt = "all |kA|" if lo == 0 and math.isinf(hi) else f"|kA| {lo:.1f} to {hi:.1f}"
        self.ka.value = f'<span style="line-height:28px;padding:0 8px">{html.escape(txt)}</span>'

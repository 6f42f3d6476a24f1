"""The one shared state of the explore widgets: event, time window, selection and filters.

Every widget observes an :class:`ExploreState` and writes to it; widgets never call each other.
The state holds no analysis: the window's tables come from :func:`debrief.flashes.select_window`
(cached per window so several widgets reading the same window cost one call).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from traitlets import Any, Dict, Float, HasTraits, Tuple, TraitError, validate

TYPES = ("CG", "IC")
POLARITIES = ("negative", "positive")


def as_utc(ts) -> pd.Timestamp:
    """A Timestamp in UTC at ns resolution; naive input is taken as UTC (stroke-time convention)."""
    t = pd.Timestamp(ts)
    if t is pd.NaT:
        raise TraitError("a window bound cannot be NaT")
    t = t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")
    return t.as_unit("ns")


class ExploreState(HasTraits):
    """Shared state of one explore session.

    Attributes
    ----------
    event : debrief.event.Event
        The loaded event (read-only for widgets).
    window : tuple of (Timestamp, Timestamp)
        Current time window, UTC, inclusive at both ends (``start``/``end`` properties). A flash
        is in the window when its first stroke is (the :func:`~debrief.flashes.select_window`
        rule), and so are all its strokes.
    selected_flash_ids : tuple of int
        Selected flashes (``flash_id``).
    selected_stroke_ids : tuple of int
        Selected strokes (row labels of ``event.strokes``).
    types : tuple of str
        Stroke types shown, subset of ``("CG", "IC")``.
    polarities : tuple of str
        Polarities shown, subset of ``("negative", "positive")``.
    abs_ka_range : tuple of float
        Shown |peak current| range, kA, inclusive (``(0, inf)``: everything).
    site : dict
        The site in focus, ``{"name", "latitude", "longitude", "radius_km"}``, or empty.
    cc_rules : dict
        Continuing-current thresholds in use (``positive_min_ka``, ``negative_max_abs_ka``,
        ``min_interval_ms``); defaults from the event's ``[continuing_current]`` settings.
    """

    event = Any()
    window = Tuple(Any(), Any())
    selected_flash_ids = Tuple()
    selected_stroke_ids = Tuple()
    types = Tuple(TYPES)
    polarities = Tuple(POLARITIES)
    abs_ka_range = Tuple(Float(), Float(), default_value=(0.0, math.inf))
    site = Dict()
    cc_rules = Dict()

    def __init__(self, event, *, start=None, end=None, **kwargs):
        super().__init__(**kwargs)
        self._cache_key = None
        self._cache = None
        self.event = event
        self.window = (as_utc(start if start is not None else event.start), as_utc(end if end is not None else event.end))
        if not self.cc_rules:
            self.cc_rules = dict(event.config["continuing_current"])

    # -- window -------------------------------------------------------------------------------
    @validate("window")
    def _valid_window(self, proposal):
        s, e = (as_utc(v) for v in proposal["value"])
        if e < s:
            raise TraitError(f"window end {e} is before its start {s}")
        return (s, e)

    @property
    def start(self) -> pd.Timestamp:
        return self.window[0]

    @start.setter
    def start(self, value):
        self.window = (value, self.window[1])

    @property
    def end(self) -> pd.Timestamp:
        return self.window[1]

    @end.setter
    def end(self, value):
        self.window = (self.window[0], value)

    def window_tables(self):
        """(strokes, flashes) of the current window, from :func:`debrief.flashes.select_window`."""
        key = (self.window[0].value, self.window[1].value, id(self.event))
        if key != self._cache_key:
            from ..flashes import select_window

            self._cache = select_window(self.event.strokes, self.event.flashes, self.window[0], self.window[1])
            self._cache_key = key
        return self._cache

    # -- filters ------------------------------------------------------------------------------
    @validate("types")
    def _valid_types(self, proposal):
        bad = set(proposal["value"]) - set(TYPES)
        if bad:
            raise TraitError(f"unknown stroke type(s) {sorted(bad)}: use CG and/or IC")
        return tuple(t for t in TYPES if t in proposal["value"])

    @validate("polarities")
    def _valid_polarities(self, proposal):
        bad = set(proposal["value"]) - set(POLARITIES)
        if bad:
            raise TraitError(f"unknown polarity {sorted(bad)}: use negative and/or positive")
        return tuple(p for p in POLARITIES if p in proposal["value"])

    @validate("abs_ka_range")
    def _valid_range(self, proposal):
        lo, hi = (float(v) for v in proposal["value"])
        if math.isnan(lo) or math.isnan(hi):
            raise TraitError("the |kA| range cannot be NaN")
        lo, hi = max(0.0, min(lo, hi)), max(lo, hi)
        return (lo, hi)

    def filter_mask(self, stroke_type, peak_current_ka) -> np.ndarray:
        """Boolean mask of strokes passing the type, polarity and |kA| filters (vectorised).

        Parameters
        ----------
        stroke_type : array_like of str
            ``CG``/``IC`` per stroke.
        peak_current_ka : array_like of float
            Signed peak current, kA.
        """
        ip = np.asarray(peak_current_ka, dtype=float)
        ty = np.asarray(stroke_type, dtype=object)
        return filter_mask_codes(self, (ty == "IC").astype(np.int8), ip)

    def select(self, *, flash_ids=(), stroke_ids=()):
        """Replace the selection (both parts at once)."""
        with self.hold_trait_notifications():
            self.selected_flash_ids = tuple(int(v) for v in flash_ids)
            self.selected_stroke_ids = tuple(int(v) for v in stroke_ids)

    def clear_filters(self):
        with self.hold_trait_notifications():
            self.types = TYPES
            self.polarities = POLARITIES
            self.abs_ka_range = (0.0, math.inf)


def filter_mask_codes(state: ExploreState, is_ic, peak_current_ka) -> np.ndarray:
    """Filter mask from precomputed codes: `is_ic` (0 CG, 1 IC) and signed peak current (kA)."""
    ip = np.asarray(peak_current_ka, dtype=float)
    is_ic = np.asarray(is_ic)
    m = np.ones(ip.shape, dtype=bool)
    if not state.types or not state.polarities:
        return np.zeros(ip.shape, dtype=bool)
    if len(state.types) == 1:
        m &= is_ic == (1 if state.types[0] == "IC" else 0)
    if len(state.polarities) == 1:
        m &= (ip > 0) if state.polarities[0] == "positive" else (ip < 0)
    lo, hi = state.abs_ka_range
    if lo > 0.0 or math.isfinite(hi):
        a = np.abs(ip)
        m &= (a >= lo) & (a <= hi)
    return m


def ensure_state(event_or_state) -> ExploreState:
    """The given state, or a new one about the given event (so a widget can be used alone)."""
    if isinstance(event_or_state, ExploreState):
        return event_or_state
    return ExploreState(event_or_state)


_SITE_COLUMNS = ("name", "latitude", "longitude", "radius_km")


def load_sites(event) -> pd.DataFrame:
    """The event's sites (``name``, ``latitude``, ``longitude``, ``radius_km``, ...), maybe empty.

    Taken from ``event.sites`` (read once by :func:`debrief.event.load_event`) and kept, prepared
    for drawing, in ``event.extras["sites"]``.
    """
    extras = getattr(event, "extras", None)
    if isinstance(extras, dict) and isinstance(extras.get("sites"), pd.DataFrame):
        return extras["sites"]
    empty = pd.DataFrame({c: pd.Series(dtype=object if c == "name" else float) for c in _SITE_COLUMNS})
    table = empty
    sites = getattr(event, "sites", None)  # read by debrief.event.load_event with the sites reader
    if isinstance(sites, pd.DataFrame):
        table = sites.copy()
        if "stop_km" in table.columns:  # a crew site's ring is its stop radius
            table["radius_km"] = table["radius_km"].fillna(table["stop_km"])
        table["name"] = table["name"].astype(str)
    if isinstance(extras, dict):
        extras["sites"] = table
    return table

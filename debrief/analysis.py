"""One analysis of an event and a window: every result the CLI, the report and the widgets show.

:func:`analyse` applies the window rule once and computes, on demand and once each, the results
that the commands, the report's sections and the dashboard display, so that the same event and
window give the same numbers everywhere.

The window rule
---------------
* **Strokes by stroke time**: a stroke is in the window when its own time is (site checks,
  alert periods, line exposure).
* **Flashes by first-stroke time**: a flash and all its strokes are in the window when its first
  stroke is (counts, polarity, multiplicity, intervals, continuing-current flags).
* **Outages by trip time**: an outage whose trip falls outside the window gets the verdict
  ``outside_window``; one inside is matched against every stroke within its clock tolerance,
  even one a few seconds past the window's edge.
* **Site periods** (a claim's ``start``/``end``) are searched where they meet the window; a part
  outside the window or the data's coverage makes the answer ``partial`` (all of it: ``outside``,
  "no conclusion").
* **Alert periods** see strokes in the window; one still running at the window's (or data's) end
  is ``open_at_end``, one that may have begun before its start ``open_at_start``.

Coverage: :mod:`debrief.coverage` (declared in event.toml or the data's extent), narrowed in time
by the window.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .coverage import Coverage, data_coverage
from .errors import InputError
from .timeutil import iso_utc

#: Written once, shown in the report's record and the docs.
WINDOW_RULE = (
    "Strokes are in the window by their own time (site checks, alert periods, line exposure); flashes by the "
    "time of their first stroke (counts, polarity, multiplicity, continuing-current flags); outages by their trip "
    "time (an outage outside the window is listed as outside_window; one inside is matched against every stroke "
    "within its clock tolerance). A claim period is searched where it meets the window; a part outside the window "
    "or the data's coverage is stated, and all of it outside gives no conclusion."
)


@dataclass
class Analysis:
    """The results of one event over one window (computed on first use, then kept).

    Attributes
    ----------
    event : debrief.event.Event
    start, end : Timestamp
        The analysis window, UTC.
    coverage : Coverage
        The data's coverage, narrowed in time by the window.
    include_likely_ic : bool
        Site checks count low-amplitude positive ground reports.
    detection_efficiency, de_source : float, str or None
        Override the event's flash detection efficiency for the unrecorded-flash chance.
    """

    event: object
    start: pd.Timestamp
    end: pd.Timestamp
    coverage: Coverage
    include_likely_ic: bool = False
    detection_efficiency: float | None = None
    de_source: str | None = None
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def config(self):
        return self.event.config

    def _cached(self, key, fn):
        if key not in self._cache:
            self._cache[key] = fn()
        return self._cache[key]

    # --- tables in the window -------------------------------------------------------------------

    @property
    def strokes(self) -> pd.DataFrame:
        """Strokes whose own time is in the window."""
        def make():
            t = self.event.strokes["time"]
            return self.event.strokes[((t >= self.start) & (t <= self.end)).to_numpy()]
        return self._cached("strokes", make)

    @property
    def flash_tables(self):
        """(strokes, flashes) of the flashes whose first stroke is in the window."""
        from .flashes import select_window

        return self._cached("flash_tables", lambda: select_window(self.event.strokes, self.event.flashes,
                                                                  self.start, self.end))

    @property
    def flashes(self) -> pd.DataFrame:
        return self.flash_tables[1]

    @property
    def flash_strokes(self) -> pd.DataFrame:
        return self.flash_tables[0]

    # --- site checks ----------------------------------------------------------------------------

    @property
    def stroke_index(self):
        from .sites import StrokeIndex

        return self._cached("stroke_index", lambda: StrokeIndex(self.event.strokes, self.config))

    def contact_index(self, include_likely_ic: bool | None = None):
        from .sites import build_contact_index

        inc = self.include_likely_ic if include_likely_ic is None else bool(include_likely_ic)
        return self._cached(("contact_index", inc),
                            lambda: build_contact_index(self.event.strokes, self.config, inc))

    def _clip(self, start, end):
        """A site period met with the window (None: the window's own bound)."""
        a = self.start if start is None or pd.isna(start) else max(pd.Timestamp(start), self.start)
        b = self.end if end is None or pd.isna(end) else min(pd.Timestamp(end), self.end)
        return a, b

    def check_site(self, lat_deg, lon_deg, radius_km, *, start=None, end=None, parcel=None, name="the site",
                   include_likely_ic: bool | None = None):
        """:func:`debrief.sites.check_site` under the window rule and the data's coverage.

        `start`/`end` (UTC Timestamps) are the claim period; None means the window.
        """
        from .sites import check_site

        inc = self.include_likely_ic if include_likely_ic is None else bool(include_likely_ic)
        return check_site(None, lat_deg, lon_deg, radius_km, start=start, end=end, config=self.config, parcel=parcel,
                          include_likely_ic=inc, detection_efficiency=self.detection_efficiency,
                          de_source=self.de_source, name=name, index=self.stroke_index,
                          contact_index=self.contact_index(inc), coverage=self.coverage)

    def check_sites(self, sites: pd.DataFrame, *, return_candidates: bool = False, sentences: bool = True):
        """:func:`debrief.sites.check_sites` for the claim rows of `sites`, under the window rule."""
        from .sites import check_sites

        return check_sites(None, sites, self.config, include_likely_ic=self.include_likely_ic,
                           detection_efficiency=self.detection_efficiency, de_source=self.de_source,
                           index=self.stroke_index, contact_index=self.contact_index(),
                           sentences=sentences, return_candidates=return_candidates, coverage=self.coverage)

    def claim_sites(self, sites: pd.DataFrame | None = None) -> pd.DataFrame:
        """The rows of the sites table that are claims (a ``radius_km``)."""
        s = self.event.sites if sites is None else sites
        if s is None or not len(s) or "radius_km" not in s:
            return pd.DataFrame(columns=["name", "latitude", "longitude", "radius_km"])
        return s[np.isfinite(s["radius_km"].to_numpy(dtype=float))].reset_index(drop=True)

    @property
    def site_results(self):
        """(summary, candidates) of the event's claim sites (empty tables without any)."""
        from .sites import SITES_COLUMNS

        def make():
            claims = self.claim_sites()
            if not len(claims):
                return pd.DataFrame(columns=list(SITES_COLUMNS)), pd.DataFrame()
            return self.check_sites(claims, return_candidates=True)
        return self._cached("site_results", make)

    # --- alert periods --------------------------------------------------------------------------

    def alerts(self, sites: pd.DataFrame | None = None, crew_log: pd.DataFrame | None = None):
        """(periods, totals, comparison or None) for the crew sites, under the window rule."""
        from . import alerts

        s = self.event.sites if sites is None else sites
        log = self.event.crew_log if crew_log is None else crew_log
        key = ("alerts", id(s), id(log))

        def make():
            crew = alerts.alert_sites(s).copy()
            for col in ("start", "end"):
                if col not in crew:
                    crew[col] = pd.NaT
                crew[col] = pd.to_datetime(crew[col], utc=True).astype("datetime64[ns, UTC]")
            clear = pd.Timedelta(minutes=float(self.config["alerts"]["all_clear_min"]))
            # Sites' own periods met with the window (their start already looks back one all-clear).
            crew["start"] = crew["start"].fillna(self.start + clear).clip(lower=self.start + clear)
            crew["end"] = crew["end"].fillna(self.end).clip(upper=self.end)
            periods = alerts.alert_periods(self.strokes, crew, self.config, data_end=self.coverage.t1,
                                           data_start=self.coverage.t0, coverage=self.coverage)
            totals = alerts.site_totals(periods, crew["name"].astype(str).tolist())
            comparison = None
            if log is not None:
                comparison = alerts.compare_crew_log(periods, log, data_end=self.coverage.t1,
                                                     data_start=self.coverage.t0, sites=list(crew["name"].astype(str)),
                                                     all_clear_min=float(self.config["alerts"]["all_clear_min"]))
            return periods, totals, comparison
        return self._cached(key, make)

    # --- outages and lines ----------------------------------------------------------------------

    def outages(self, outages: pd.DataFrame | None = None, lines: pd.DataFrame | None = None):
        """:func:`debrief.outages.match_outages` under the window rule and the data's coverage."""
        from .outages import match_outages

        o = self.event.outages if outages is None else outages
        ln = self.event.lines if lines is None else lines
        return self._cached(("outages", id(o), id(ln)), lambda: match_outages(
            self.event.strokes, o, ln, self.config, window=(self.start, self.end), coverage=self.coverage))

    def exposure(self, lines: pd.DataFrame | None = None):
        """:func:`debrief.outages.line_exposure` of the strokes in the window."""
        from .outages import line_exposure

        ln = self.event.lines if lines is None else lines
        return self._cached(("exposure", id(ln)), lambda: line_exposure(self.strokes, ln, self.config))

    # --- statistics -----------------------------------------------------------------------------

    def summary(self, top: int = 10) -> dict:
        """The storm summary (:func:`debrief.cli.summary.summarise` numbers) of the window."""
        from .summary import summarise

        return self._cached(("summary", top), lambda: summarise(self, top=top))

    def record(self) -> dict:
        """The window, the rule and the coverage, for the record."""
        return {"window_start": iso_utc(self.start), "window_end": iso_utc(self.end), "window_rule": WINDOW_RULE,
                **self.coverage.to_dict()}


def analyse(event, start=None, end=None, *, include_likely_ic: bool = False, detection_efficiency=None,
            de_source=None) -> Analysis:
    """The one analysis of `event` over a window.

    Parameters
    ----------
    event : debrief.event.Event
        From :func:`debrief.event.load_event`.
    start, end : Timestamp, optional
        The window, UTC (default: the event's window: event.toml ``start``/``end`` or the data).
    include_likely_ic : bool
        Site checks count low-amplitude positive ground reports.
    detection_efficiency, de_source : optional
        Override the event's flash detection efficiency and its source.
    """
    # Without a stated window, the data's extent to the minute (the same span as its coverage).
    a = (event.start if event.config.get("start") else event.start.floor("min")) if start is None else pd.Timestamp(start)
    b = (event.end if event.config.get("end") else event.end.ceil("min")) if end is None else pd.Timestamp(end)
    if b < a:  # equal is allowed: a file of one stroke has a window of one instant
        raise InputError(f"the window's end ({iso_utc(b)}) is before its start ({iso_utc(a)})")
    cov = _coverage_of(event).with_window(a, b)
    return Analysis(event=event, start=a, end=b, coverage=cov, include_likely_ic=bool(include_likely_ic),
                    detection_efficiency=detection_efficiency, de_source=de_source)


def _coverage_of(event) -> Coverage:
    if "coverage" not in event.extras:
        event.extras["coverage"] = data_coverage(event.strokes, event.config)
    return event.extras["coverage"]

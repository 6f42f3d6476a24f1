"""Site check panel: pick or type a site and radius, see what the event's analysis says.

The check is :meth:`debrief.analysis.Analysis.check_site` (the same call as ``debrief site``):
the event's window and data coverage apply, and the chosen period is the claim period.

The result (summary, the plain sentence and the cautions) is the core function's; the panel only
shows it, puts the site in focus (the map zooms to it with its radius ring) and selects the
candidate strokes (the map draws their error ellipses).
"""

from __future__ import annotations

import html
import math

import ipywidgets as W
import numpy as np
import pandas as pd

from ..errors import InputError
from .state import ExploreState, ensure_state, load_sites

SITE_CAUTION = ("A record of what the lightning location network reported, not a warning service. Networks miss "
                "some flashes (detection efficiency) and place each stroke only within its error ellipse; a "
                "probability here is that of the reported location, not proof of a strike. Conclusions about "
                "damage or cause need qualified people and defer to local codes and licensed practice.")


def _summary_html(summary) -> str:
    """The core's summary dict as a small two-column table (probabilities as the core words them)."""
    if summary is None:
        return ""
    if isinstance(summary, pd.Series):
        summary = summary.to_dict()
    if not isinstance(summary, dict):
        return f"<p>{html.escape(str(summary))}</p>"
    rows = "".join(f"<tr><td style='padding-right:12px'>{html.escape(str(k).replace('_', ' '))}</td>"
                   f"<td>{html.escape(_fmt(k, v))}</td></tr>" for k, v in summary.items())
    return f"<table style='font-size:12px'>{rows}</table>"


def _fmt(key: str, v) -> str:
    from ..sites import percent

    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "—"
    if isinstance(v, pd.Timestamp):
        return v.strftime("%Y-%m-%d %H:%M:%S UTC") if v.tzinfo else str(v)
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (float, np.floating)):
        if key.startswith("p_") or key.startswith("max_p"):
            return percent(v)
        if key in ("latitude", "longitude"):
            return f"{v:.5f}°"
        return f"{v:,.3f}".rstrip("0").rstrip(".") if abs(v) < 1e6 else f"{v:,.4g}"
    return str(v)


class SitePanel(W.VBox):
    """Did lightning strike near a site: choose it, set the radius, check."""

    def __init__(self, event_or_state):
        self.state: ExploreState = ensure_state(event_or_state)
        ev = self.state.event
        self.sites = load_sites(ev)
        opts = [("(type a position)", None)] + [(str(n), i) for i, n in enumerate(self.sites["name"])]
        self.pick = W.Dropdown(options=opts, value=None, description="site", layout=W.Layout(width="320px"))
        self.pick.add_class("debrief-site-pick")
        lat0, lon0 = float(ev.strokes["latitude"].median()), float(ev.strokes["longitude"].median())
        self.lat = W.BoundedFloatText(value=round(lat0, 4), min=-90, max=90, step=0.001, description="latitude (°)",
                                      style={"description_width": "90px"}, layout=W.Layout(width="210px"))
        self.lon = W.BoundedFloatText(value=round(lon0, 4), min=-180, max=180, step=0.001, description="longitude (°)",
                                      style={"description_width": "90px"}, layout=W.Layout(width="210px"))
        self.radius = W.BoundedFloatText(value=float(ev.config["alerts"]["stop_km"]), min=0.01, max=500, step=0.5,
                                         description="radius (km)", style={"description_width": "90px"},
                                         layout=W.Layout(width="190px"))
        self.period = W.Dropdown(options=[("the current window", "window"), ("the whole event", "event")], value="window",
                                 description="period", layout=W.Layout(width="300px"))
        self.run = W.Button(description="check site", button_style="primary")
        self.run.add_class("debrief-site-check")
        self.output = W.HTML()
        self.result = None
        self._index = None
        self.pick.observe(self._on_pick, names="value")
        self.run.on_click(lambda _: self.check())
        super().__init__([W.HBox([self.pick, self.period]), W.HBox([self.lat, self.lon, self.radius, self.run]),
                          self.output])
        self.add_class("debrief-site-panel")

    def _site_row(self):
        return None if self.pick.value is None else self.sites.iloc[int(self.pick.value)]

    def _on_pick(self, change):
        base = [("the current window", "window"), ("the whole event", "event")]
        r = self._site_row()
        if r is None:
            self.period.options = base
            self.period.value = "window"
            return
        self.lat.value, self.lon.value = float(r["latitude"]), float(r["longitude"])
        if np.isfinite(r.get("radius_km", np.nan)):
            self.radius.value = float(r["radius_km"])
        has_own = "start" in r.index and not (pd.isna(r["start"]) and pd.isna(r["end"]))
        self.period.options = ([("the site's own period", "site")] if has_own else []) + base
        self.period.value = "site" if has_own else "window"

    def period_bounds(self):
        """(start, end) the check uses: the site's own period, the current window or the event's."""
        ev = self.state.event
        if self.period.value == "event":
            return ev.start, ev.end
        if self.period.value == "site":
            r = self._site_row()
            return (ev.start if pd.isna(r["start"]) else r["start"]), (ev.end if pd.isna(r["end"]) else r["end"])
        return self.state.window

    def check(self):
        """Run the analysis's site check for the fields' site and show the result."""
        from ..analysis import analyse

        ev = self.state.event
        if self._index is None:  # the event's one analysis (its indexes are built once and reused)
            self._index = analyse(ev)
        start, end = self.period_bounds()
        name = self.pick.label if self.pick.value is not None else f"{self.lat.value:.4f}, {self.lon.value:.4f}"
        try:
            parcel = None
            r = self._site_row()
            if r is not None and str(r.get("parcel_file", "") or ""):
                from ..io.sites import read_parcel

                parcel = read_parcel(r["parcel_file"])
            res = self._index.check_site(float(self.lat.value), float(self.lon.value), float(self.radius.value),
                                         start=start, end=end, parcel=parcel, name=name)
        except InputError as e:
            self.result = None
            self.output.value = f'<p style="color:#b00">{html.escape(str(e))}</p>'
            return None
        self.result = res
        ids = self.candidate_ids(res.candidates)
        self.state.select(stroke_ids=ids)
        # The site last, so the map ends zoomed on the site and its ring, not on the candidates.
        self.state.site = {"name": name, "latitude": float(self.lat.value), "longitude": float(self.lon.value),
                           "radius_km": float(self.radius.value)}
        cautions = getattr(res, "cautions", None)
        if cautions:
            items = cautions if isinstance(cautions, (list, tuple)) else [cautions]
            caution_html = "".join(f"<li>{html.escape(str(c))}</li>" for c in items)
        else:
            caution_html = f"<li>{html.escape(SITE_CAUTION)}</li>"
        self.output.value = (f"<h4 style='margin:6px 0'>{html.escape(name)}</h4>"
                             f"<p class='debrief-site-sentence'>{html.escape(str(res.sentence))}</p>"
                             f"{_summary_html(res.summary)}"
                             f"<p><small>{len(ids):,} candidate strokes selected on the map.</small></p>"
                             f"<ul style='font-size:11px'>{caution_html}</ul>")
        return res

    def candidate_ids(self, candidates: pd.DataFrame) -> list[int]:
        """Stroke ids (labels of ``event.strokes``) of the candidates, matched by ``source_row``."""
        if candidates is None or len(candidates) == 0:
            return []
        strokes = self.state.event.strokes
        if "source_row" in candidates.columns and "source_row" in strokes.columns:
            lookup = pd.Series(strokes.index.to_numpy(), index=strokes["source_row"].to_numpy())
            lookup = lookup[~lookup.index.duplicated()]
            return [int(v) for v in lookup.reindex(candidates["source_row"].to_numpy()).dropna()]
        return [int(v) for v in candidates.index if v in strokes.index]

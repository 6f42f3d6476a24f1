"""Data coverage: which times and places a stroke file can speak about.

A stroke file says what the network recorded in some period over some area. Outside that period
or area it says nothing: a site check there has no answer ("no conclusion"), never "no lightning".
The coverage is declared in event.toml (``coverage_start``, ``coverage_end``, and
``coverage_bbox = [west, south, east, north]`` or ``coverage_file``, a GeoJSON polygon) or, when
not declared, taken from the data's own extent (first to last stroke, widened to whole minutes;
the strokes' bounding box widened by :data:`DATA_EXTENT_MARGIN_KM`) and said so (``coverage_source`` ``data_extent``). The analysis window narrows the time further:
a time outside the window was not analysed.

Every answer about a place and a period states its coverage:

* ``inside``: the whole period and the whole circle (or corridor) are covered;
* ``partial``: part of either is not (the note says which part);
* ``outside``: none of the period, or none of the circle, is covered.

Place tests use one azimuthal equidistant plane about the covered area's centre (distances from
the centre exact, to the area's edge within about 1 % for areas up to 1,500 km across); a
circle is inside when its centre is inside and at least its radius from the edge.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import shapely

from .errors import InputError
from .geodesy import LocalPlane, centre_of
from .timeutil import iso_utc, parse_user_time

#: A site farther than this outside the covered area, or a radius above it, earns a warning, km.
SUSPECT_KM = 50.0

#: Margin about the strokes' bounding box when the area is taken from the data, km (a setting of ours).
DATA_EXTENT_MARGIN_KM = 10.0

STATES = ("inside", "partial", "outside")


@dataclass(frozen=True)
class Coverage:
    """The times and area a stroke file covers.

    Attributes
    ----------
    start, end : Timestamp
        Covered time, UTC (inclusive).
    area : shapely Polygon or MultiPolygon
        Covered area, longitude/latitude degrees (split at 180 degrees where it crosses).
    time_source, area_source : str
        ``declared`` (event.toml) or ``data_extent``.
    area_text : str
        The area in words, for the record.
    """

    start: pd.Timestamp
    end: pd.Timestamp
    area: object
    time_source: str
    area_source: str
    area_text: str
    window_start: pd.Timestamp | None = None
    window_end: pd.Timestamp | None = None
    _plane: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def source(self) -> str:
        """``declared`` when time and area are both declared, else ``data_extent``."""
        return "declared" if self.time_source == self.area_source == "declared" else "data_extent"

    @property
    def t0(self) -> pd.Timestamp:
        """Start of the time that can be answered: coverage and analysis window together."""
        return max(self.start, self.window_start) if self.window_start is not None else self.start

    @property
    def t1(self) -> pd.Timestamp:
        return min(self.end, self.window_end) if self.window_end is not None else self.end

    def with_window(self, start, end) -> "Coverage":
        """The same coverage, with the analysis window that also bounds it in time."""
        return Coverage(self.start, self.end, self.area, self.time_source, self.area_source, self.area_text,
                        start, end)

    def describe(self) -> str:
        """One line for the record: the covered time and area and where each comes from."""
        src = {"declared": "declared in event.toml", "data_extent": "taken from the data's own extent"}
        return (f"Data coverage: {iso_utc(self.start)} to {iso_utc(self.end)} ({src[self.time_source]}); "
                f"area {self.area_text} ({src[self.area_source]}).")

    def to_dict(self) -> dict:
        return {"coverage_start": iso_utc(self.start), "coverage_end": iso_utc(self.end),
                "coverage_area": self.area_text, "coverage_time_source": self.time_source,
                "coverage_area_source": self.area_source, "coverage_source": self.source}

    def plane(self):
        """(LocalPlane about the area's centre, the area in that plane, prepared)."""
        if "p" not in self._plane:
            c = self.area.representative_point() if self.area.is_empty else self.area.centroid
            pts = np.asarray(shapely.get_coordinates(self.area))
            lat0, lon0 = centre_of(pts[:, 1], pts[:, 0]) if len(pts) else (c.y, c.x)
            plane = LocalPlane(lat0, lon0)
            dense = shapely.segmentize(self.area, 0.05)  # degrees: edges follow the meridians and parallels

            def tr(xy):
                x, y = plane.to_xy_km(xy[:, 1], xy[:, 0])
                return np.column_stack([x, y])

            area_xy = shapely.make_valid(shapely.transform(dense, tr))
            shapely.prepare(area_xy)
            self._plane["p"] = (plane, area_xy, area_xy.boundary)
        return self._plane["p"]


def _bbox_polygon(w, s, e, n):
    """[west, south, east, north] as a (Multi)Polygon; west > east crosses the antimeridian."""
    if w <= e:
        return shapely.box(w, s, e, n)
    return shapely.MultiPolygon([shapely.box(w, s, 180.0, n), shapely.box(-180.0, s, e, n)])


def _lon_extent(lon):
    """(west, east) of longitudes, the shorter way round (west > east when it crosses 180)."""
    lon = np.asarray(lon, dtype=float)
    w, e = float(lon.min()), float(lon.max())
    shifted = np.where(lon < 0.0, lon + 360.0, lon)
    w2, e2 = float(shifted.min()), float(shifted.max())
    if e2 - w2 < e - w:
        return ((w2 + 180.0) % 360.0) - 180.0, ((e2 + 180.0) % 360.0) - 180.0
    return w, e


def data_coverage(strokes: pd.DataFrame, config=None) -> Coverage:
    """The coverage of a stroke file: event.toml's declaration, else the data's extent.

    Parameters
    ----------
    strokes : DataFrame
        The whole stroke file as read (every stroke, ground and cloud).
    config : EventConfig, optional
        ``coverage_start``, ``coverage_end``, ``coverage_bbox``, ``coverage_file``, ``time_zone``.

    Raises
    ------
    InputError
        A malformed declaration (naming the key and the fix).
    """
    get = config.get if config is not None else (lambda k: None)
    tz = config.time_zone if config is not None else None
    t = pd.to_datetime(strokes["time"], utc=True) if len(strokes) else pd.Series([], dtype="datetime64[ns, UTC]")
    t_src = "declared"
    start = parse_user_time(get("coverage_start"), tz, what="event.toml coverage_start") if get("coverage_start") else None
    end = parse_user_time(get("coverage_end"), tz, what="event.toml coverage_end") if get("coverage_end") else None
    if start is None or end is None:
        t_src = "data_extent" if start is None and end is None else "declared"
        if not len(t):
            raise InputError("no strokes to take the data's coverage from: declare coverage_start and coverage_end in event.toml")
        # The first and last strokes, widened to whole minutes: exports are cut at a query's
        # limits, and a few seconds before the first stroke are not news (a setting of ours).
        start = start if start is not None else t.min().floor("min")
        end = end if end is not None else t.max().ceil("min")
        if get("coverage_start") or get("coverage_end"):
            t_src = "data_extent"  # only half declared: the other half is the data's
    toml = (config.event_dir / "event.toml") if config is not None and config.event_dir is not None else "event.toml"
    if end < start:
        a = "coverage_start" if get("coverage_start") else "the first stroke (no coverage_start)"
        b = "coverage_end" if get("coverage_end") else "the last stroke (no coverage_end)"
        raise InputError(f"{toml}: {b} ({iso_utc(end)}) is before {a} ({iso_utc(start)})")
    bbox, path = get("coverage_bbox"), get("coverage_file")
    if bbox is not None and path is not None:
        raise InputError(f"{toml}: give coverage_bbox or coverage_file, not both")
    if bbox is not None:
        area, text = _declared_bbox(bbox)
        a_src = "declared"
    elif path is not None:
        from .io.sites import read_parcel

        p = config.path("coverage_file") if hasattr(config, "path") else path
        try:
            area = read_parcel(p, what="coverage_file")
        except InputError as e:
            raise InputError(str(e).replace("parcel file", "coverage_file")) from None
        w, s, e_, n = area.bounds
        text = f"the polygon of {p.name if hasattr(p, 'name') else p} (within {w:.3f} to {e_:.3f} E, {s:.3f} to {n:.3f} N)"
        a_src = "declared"
    if (bbox is not None or path is not None) and len(strokes):
        _check_declared_area(area, strokes, bbox)
    if bbox is None and path is None:
        if not len(strokes):
            raise InputError("no strokes to take the data's coverage from: declare coverage_bbox in event.toml")
        lat = strokes["latitude"].to_numpy(float)
        w, e_ = _lon_extent(strokes["longitude"].to_numpy(float))
        s, n = float(lat.min()), float(lat.max())
        # Widened by DATA_EXTENT_MARGIN_KM: strokes are sparse at a storm's edge, and a network
        # that located them also watched the ground just beyond (a setting of ours).
        dlat = DATA_EXTENT_MARGIN_KM / 111.0
        dlon = DATA_EXTENT_MARGIN_KM / (111.0 * max(math.cos(math.radians(min(max(abs(s), abs(n)) + dlat, 89.0))), 1e-3))
        s, n = max(s - dlat, -90.0), min(n + dlat, 90.0)
        if (e_ - w) % 360.0 + 2 * dlon < 360.0:
            w, e_ = ((w - dlon + 180.0) % 360.0) - 180.0, ((e_ + dlon + 180.0) % 360.0) - 180.0
        else:
            w, e_ = -180.0, 180.0
        area = _bbox_polygon(w, s, e_, n)
        text = f"the strokes' bounding box widened by {DATA_EXTENT_MARGIN_KM:g} km, {_bbox_text(w, s, e_, n)}"
        a_src = "data_extent"
    return Coverage(start=start, end=end, area=area, time_source=t_src, area_source=a_src, area_text=text)


def _check_declared_area(area, strokes, bbox) -> None:
    """A declared area that holds none of the file's strokes is a mistake, not a coverage."""
    lon = strokes["longitude"].to_numpy(float)
    lat = strokes["latitude"].to_numpy(float)
    if np.any(shapely.contains_xy(area, lon, lat)):
        return
    key = "coverage_bbox" if bbox is not None else "coverage_file"
    hint = ""
    if bbox is not None:
        w, s, e, n = (float(v) for v in bbox)
        if np.any(shapely.contains_xy(_bbox_polygon(e, s, w, n), lon, lat)):
            hint = (f"; with west and east swapped ([{e:g}, {s:g}, {w:g}, {n:g}]) it would hold them: west > east "
                    "means an area across 180 degrees")
    raise InputError(f"event.toml {key}: none of the file's {len(lon):,} strokes lies inside the declared area{hint}")


def _bbox_text(w, s, e, n) -> str:
    return f"west {w:.4f}, south {s:.4f}, east {e:.4f}, north {n:.4f}"


def _declared_bbox(bbox):
    from .config import check_bbox

    w, s, e, n = check_bbox(bbox)
    return _bbox_polygon(w, s, e, n), _bbox_text(w, s, e, n)


def _as_ns(v, n, fill):
    if v is None:
        return np.full(n, fill, dtype=np.int64)
    if isinstance(v, pd.Timestamp):
        return np.full(n, v.value, dtype=np.int64)
    return np.broadcast_to(np.asarray(v, dtype=np.int64), (n,)).copy()


def check_places(coverage: Coverage, lat_deg, lon_deg, radius_km, start=None, end=None) -> pd.DataFrame:
    """Coverage of circles (site and radius) over periods, vectorised.

    Parameters
    ----------
    coverage : Coverage
    lat_deg, lon_deg, radius_km : array_like
        Circle centres (degrees) and radii (km).
    start, end : Timestamp or array of int64 ns, optional
        Each period (default: the coverage's own time, i.e. always covered).

    Returns
    -------
    DataFrame
        ``coverage`` (inside/partial/outside), ``coverage_source`` (``declared`` when both the time and
        the area are declared, else ``data_extent``), ``coverage_time_source``,
        ``coverage_area_source``, ``coverage_limit`` (``window`` when only the analysis window cuts
        the question, which the data may still answer; ``data`` otherwise; empty inside),
        ``coverage_note`` (plain words,
        empty when inside), ``uncovered_area_share`` (0-1), ``outside_km`` (distance of the centre
        outside the area, 0 inside), ``coverage_warning`` (a likely mistake, or empty).
    """
    lat = np.atleast_1d(np.asarray(lat_deg, dtype=float))
    lon = np.atleast_1d(np.asarray(lon_deg, dtype=float))
    n = lat.size
    r = np.broadcast_to(np.asarray(radius_km, dtype=float), (n,)).astype(float)
    c0, c1 = coverage.t0.value, coverage.t1.value
    t0 = _as_ns(start, n, c0)
    t1 = _as_ns(end, n, c1)
    t0 = np.where(t0 == np.iinfo(np.int64).min, c0, t0)
    t1 = np.where(t1 == np.iinfo(np.int64).max, c1, t1)
    # Time: a period that only touches the covered time (no overlap of any length) is outside.
    t_out = np.where(t1 > t0, (t1 <= c0) | (t0 >= c1), (t1 < c0) | (t0 > c1))
    t_in = (t0 >= c0) & (t1 <= c1)
    # Place.
    plane, area_xy, edge = coverage.plane()
    x, y = plane.to_xy_km(lat, lon)
    pts = shapely.points(np.atleast_1d(x), np.atleast_1d(y))
    with np.errstate(invalid="ignore"):  # a point near the plane's antipode projects to inf: far outside
        contained = shapely.contains(area_xy, pts)
        d_edge = np.where(np.isfinite(x) & np.isfinite(y), shapely.distance(edge, pts), np.inf)
    p_in = contained & (d_edge >= r)
    p_out = ~contained & (d_edge >= r)
    share = np.where(p_out, 1.0, 0.0)
    part = ~p_in & ~p_out
    if np.any(part):
        circles = shapely.buffer(pts[part], r[part], quad_segs=32)
        covered = shapely.area(shapely.intersection(circles, area_xy)) / shapely.area(circles)
        share[part] = np.clip(1.0 - covered, 0.0, 1.0)
    state = np.where(t_out | p_out, "outside", np.where(t_in & p_in, "inside", "partial")).astype(object)
    # What limits the answer: the analysis window alone (the data may hold more), or the data.
    d0, d1 = coverage.start.value, coverage.end.value
    data_t_in = (t0 >= d0) & (t1 <= d1)
    limit = np.where(~p_in, "data", np.where(t_in, "", np.where(data_t_in, "window", "data"))).astype(object)
    notes, warns = [], []
    for i in range(n):
        parts = []
        if t_out[i]:
            before = t1[i] <= c0
            side = "before the start" if before else "after the end"
            parts.append(f"the period lies {side} of the time covered, {_span(c0, c1)}, set by {_why(coverage, before)}")
        elif not t_in[i]:
            miss = []
            if t0[i] < c0:
                miss.append(f"{_minutes(c0 - t0[i])} before {iso_utc(pd.Timestamp(c0, tz='UTC'))}, the start of "
                            f"{_why(coverage, True)}")
            if t1[i] > c1:
                miss.append(f"{_minutes(t1[i] - c1)} after {iso_utc(pd.Timestamp(c1, tz='UTC'))}, the end of "
                            f"{_why(coverage, False)}")
            parts.append("part of the period is not covered: " + " and ".join(miss))
        if p_out[i]:
            parts.append(f"the place lies {d_edge[i]:.1f} km outside the area covered, {coverage.area_text}")
        elif part[i]:
            parts.append(f"{100.0 * share[i]:.0f}% of the {r[i]:g} km circle lies outside the area covered, "
                         f"{coverage.area_text}")
        notes.append("; ".join(parts))
        warns.append(_suspect(coverage, lat[i], lon[i], r[i], 0.0 if contained[i] else d_edge[i]))
    return pd.DataFrame({
        "coverage": state, "coverage_source": coverage.source, "coverage_time_source": coverage.time_source,
        "coverage_area_source": coverage.area_source, "coverage_note": notes,
        "coverage_limit": limit,
        "uncovered_area_share": share, "outside_km": np.where(contained, 0.0, d_edge),
        "coverage_warning": warns,
    })


def _why(coverage, before):
    """What limits the answerable time on one side: the analysis window or the data's coverage."""
    if coverage.window_start is not None and before and coverage.window_start > coverage.start:
        return "the analysis window"
    if coverage.window_end is not None and not before and coverage.window_end < coverage.end:
        return "the analysis window"
    return ("the coverage declared in event.toml" if coverage.time_source == "declared"
            else "the data: the file's first and last strokes, to the minute")


def _span(a_ns, b_ns) -> str:
    return f"{iso_utc(pd.Timestamp(int(a_ns), tz='UTC'))} to {iso_utc(pd.Timestamp(int(b_ns), tz='UTC'))}"


def _minutes(ns) -> str:
    m = ns / 60e9
    if m < 1.0:
        return f"{ns / 1e9:.0f} s"
    return f"{m:.0f} min" if m < 180 else f"{m / 60.0:.1f} h"


def _suspect(coverage, lat, lon, radius_km, outside_km) -> str:
    """A likely typing mistake behind a far-away site or a huge radius, in words (or "")."""
    out = []
    if radius_km > SUSPECT_KM:
        out.append(f"a radius of {radius_km:g} km is unusually large: was it typed in metres "
                   f"({radius_km:g} m = {radius_km / 1000.0:g} km)?")
    if outside_km > SUSPECT_KM:
        plane, area_xy, _edge = coverage.plane()
        tries = (("longitude's sign flipped", lat, -lon), ("latitude's sign flipped", -lat, lon),
                 ("latitude and longitude swapped", lon, lat), ("both signs flipped", -lat, -lon))
        hint = ""
        for what, la, lo in tries:
            if abs(la) <= 90.0 and abs(lo) <= 180.0:
                x, y = plane.to_xy_km(la, lo)
                if shapely.contains(area_xy, shapely.points(float(x), float(y))):
                    hint = f"; with the {what} ({la:.5f}, {lo:.5f}) it would be inside: a dropped minus sign or swapped coordinates?"
                    break
        out.append(f"the site ({lat:.5f}, {lon:.5f}) is {outside_km:.0f} km outside the area the data cover{hint or '; check its coordinates'}")
    return " ".join(out[:1] + [o[0].upper() + o[1:] for o in out[1:]]) if out else ""


def check_span(coverage: Coverage, start, end) -> tuple[str, str]:
    """Coverage state and note of a period alone (anywhere inside the area)."""
    c0, c1 = coverage.t0.value, coverage.t1.value
    a, b = pd.Timestamp(start).value, pd.Timestamp(end).value
    if b < c0 or a > c1:
        return "outside", f"the period lies outside the time covered ({_span(c0, c1)})"
    if a >= c0 and b <= c1:
        return "inside", ""
    return "partial", f"part of the period is not covered (covered: {_span(c0, c1)})"


def check_lines(coverage: Coverage, lines: pd.DataFrame, search_km: float) -> pd.DataFrame:
    """Coverage of each line's search corridor (place only), per line.

    Returns
    -------
    DataFrame
        ``line_id``, ``coverage`` (inside/partial/outside), ``coverage_note``.
    """
    plane, area_xy, _edge = coverage.plane()
    rows = []
    for _, row in lines.iterrows():
        geom = shapely.buffer(shapely.transform(row["geometry"], lambda xy: np.column_stack(plane.to_xy_km(xy[:, 1], xy[:, 0]))),
                              float(search_km))
        if shapely.contains(area_xy, geom):
            state, note_ = "inside", ""
        elif not shapely.intersects(area_xy, geom):
            state, note_ = "outside", f"the line and its {search_km:g} km search corridor lie outside the area covered"
        else:
            share = 1.0 - shapely.area(shapely.intersection(geom, area_xy)) / shapely.area(geom)
            state, note_ = "partial", f"{100.0 * share:.0f}% of the line's {search_km:g} km search corridor lies outside the area covered"
        rows.append({"line_id": row["line_id"], "coverage": state, "coverage_note": note_})
    return pd.DataFrame(rows, columns=["line_id", "coverage", "coverage_note"])


def combine(a: str, b: str) -> str:
    """The weaker of two coverage states (outside < partial < inside)."""
    return STATES[max(STATES.index(a), STATES.index(b))]

"""Readers for sites.csv, crew logs and parcel outlines (GeoJSON, RFC 7946).

Each table reader returns the accepted rows and a list of problems, one per rejected row, that
names the file's line number (header = line 1): a bad row is reported, never dropped silently,
and the other rows are still used. A missing required column is fatal (:class:`InputError`).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..timeutil import parse_user_time
from .problems import Problem

#: sites.csv columns: required first, then optional.
SITE_REQUIRED = ("name", "latitude", "longitude")
SITE_OPTIONAL = ("radius_km", "stop_km", "warn_km", "start", "end", "parcel_file")
CREW_REQUIRED = ("site", "stopped", "resumed")


def _read_csv(path, what: str) -> pd.DataFrame:
    p = Path(path)
    if not p.exists():
        raise InputError(f"{what} file not found: {p}")
    try:
        frame = pd.read_csv(p, dtype=str, keep_default_na=False, skipinitialspace=True, comment=None)
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as e:
        raise InputError(f"cannot read {what} file {p}: {str(e).splitlines()[0] if str(e) else e}") from None
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    return frame


def _number(text: str, what: str = "value"):
    t = text.strip()
    if t == "":
        return None
    try:
        v = float(t)
    except ValueError:
        raise ValueError(f"{what} {t!r} is not a number") from None
    if not math.isfinite(v):
        raise ValueError(f"{what} {t!r} is not a finite number")
    return v


def read_sites(path, *, time_zone: str | None = None, time_format: str | None = None):
    """Read a sites table (claim sites with a radius, crew sites with a stop radius).

    Parameters
    ----------
    path : path
        CSV with columns ``name, latitude, longitude`` and at least one of ``radius_km`` or
        ``stop_km``; optional ``warn_km``, ``start``, ``end`` (ISO 8601 or `time_format`; without
        an offset read in `time_zone`) and ``parcel_file`` (GeoJSON path, relative to the sites
        file's folder).
    time_zone : str, optional
        IANA zone for typed times without an offset.
    time_format : str, optional
        ``typed_time_format``: strptime pattern for times that are not ISO 8601. Any other text
        is refused (the row is a problem naming the line, the value and the fix).

    Returns
    -------
    sites : DataFrame
        ``name, latitude, longitude, radius_km, stop_km, warn_km`` (float, NaN when blank),
        ``start, end`` (datetime64[ns, UTC], NaT when blank), ``parcel_file`` (str or ""),
        ``source_row`` (line number).
    problems : list of Problem
        One per rejected row.
    """
    p = Path(path)
    raw = _read_csv(p, "sites")
    missing = [c for c in SITE_REQUIRED if c not in raw.columns]
    if missing or not ({"radius_km", "stop_km"} & set(raw.columns)):
        need = missing or ["radius_km or stop_km"]
        raise InputError(f"sites file {p}: missing column(s) {', '.join(need)} (found: {', '.join(raw.columns)})")
    rows, problems = [], []
    for i, rec in enumerate(raw.to_dict("records")):
        line = i + 2
        try:
            rows.append(_site_row(rec, line, time_zone, p.parent, time_format))
        except (ValueError, InputError) as e:
            problems.append(Problem.at_line(str(p), line, str(e), item_id=str(rec.get("name", "") or "").strip()))
    cols = ["name", "latitude", "longitude", "radius_km", "stop_km", "warn_km", "start", "end", "parcel_file", "source_row"]
    sites = pd.DataFrame(rows, columns=cols)
    for c in ("latitude", "longitude", "radius_km", "stop_km", "warn_km"):
        sites[c] = sites[c].astype(float)
    for c in ("start", "end"):
        sites[c] = pd.to_datetime(sites[c], utc=True).astype("datetime64[ns, UTC]")
    sites["source_row"] = sites["source_row"].astype("int64")
    return sites, problems


def _site_row(rec: dict, line: int, tz, folder: Path, time_format=None) -> dict:
    name = rec.get("name", "").strip()
    if not name:
        raise ValueError("the site has no name")
    lat = _number(rec.get("latitude", ""), f"site {name!r}: latitude")
    lon = _number(rec.get("longitude", ""), f"site {name!r}: longitude")
    if lat is None or lon is None:
        raise ValueError(f"site {name!r} has no latitude/longitude")
    if not -90.0 <= lat <= 90.0:
        raise ValueError(f"site {name!r}: latitude {lat} is outside [-90, 90]")
    if not -180.0 <= lon <= 180.0:
        raise ValueError(f"site {name!r}: longitude {lon} is outside [-180, 180]")
    out = {"name": name, "latitude": lat, "longitude": lon, "source_row": line}
    for c in ("radius_km", "stop_km", "warn_km"):
        v = _number(rec.get(c, ""), f"site {name!r}: {c}")
        if v is not None and v <= 0.0:
            raise ValueError(f"site {name!r}: {c} must be positive, got {v}")
        out[c] = np.nan if v is None else v
    if math.isnan(out["radius_km"]) and math.isnan(out["stop_km"]):
        raise ValueError(f"site {name!r} has neither radius_km nor stop_km")
    if not math.isnan(out["warn_km"]) and not math.isnan(out["stop_km"]) and out["warn_km"] < out["stop_km"]:
        raise ValueError(f"site {name!r}: warn_km ({out['warn_km']}) is smaller than stop_km ({out['stop_km']})")
    for c in ("start", "end"):
        t = rec.get(c, "").strip()
        out[c] = parse_user_time(t, tz, what=f"site {name!r} {c}", time_format=time_format) if t else pd.NaT
    if out["start"] is not pd.NaT and out["end"] is not pd.NaT and out["end"] <= out["start"]:
        raise ValueError(f"site {name!r}: end is not after start")
    parcel = rec.get("parcel_file", "").strip()
    if parcel and not Path(parcel).is_absolute():
        parcel = str(folder / parcel)
    if parcel and not Path(parcel).is_file():  # one missing outline must not stop every other site's check
        raise ValueError(f"site {out['name']!r}: parcel file not found: {parcel}")
    out["parcel_file"] = parcel
    return out


def read_crew_log(path, *, time_zone: str | None = None, time_format: str | None = None):
    """Read a crew log: when work stopped and resumed at each site.

    Parameters
    ----------
    path : path
        CSV with ``site, stopped, resumed`` (typed times, ISO 8601 or `time_format`; without an
        offset read in `time_zone`; ``resumed`` may be blank when work did not resume within the log).
    time_zone : str, optional
        IANA zone for typed times without an offset.
    time_format : str, optional
        ``typed_time_format``: strptime pattern for times that are not ISO 8601.

    Returns
    -------
    log : DataFrame
        ``site`` (str), ``stopped``, ``resumed`` (datetime64[ns, UTC]; NaT when blank),
        ``source_row``.
    problems : list of Problem
    """
    p = Path(path)
    raw = _read_csv(p, "crew log")
    missing = [c for c in CREW_REQUIRED if c not in raw.columns]
    if missing:
        raise InputError(f"crew log {p}: missing column(s) {', '.join(missing)} (found: {', '.join(raw.columns)})")
    rows, problems = [], []
    for i, rec in enumerate(raw.to_dict("records")):
        line = i + 2
        try:
            site = rec["site"].strip()
            if not site:
                raise ValueError("no site name")
            if not rec["stopped"].strip():
                raise ValueError(f"site {site!r}: no stopped time")
            stopped = parse_user_time(rec["stopped"], time_zone, what=f"site {site!r} stopped", time_format=time_format)
            resumed = (parse_user_time(rec["resumed"], time_zone, what=f"site {site!r} resumed", time_format=time_format)
                       if rec["resumed"].strip() else pd.NaT)
            if resumed is not pd.NaT and resumed < stopped:
                raise ValueError(f"site {site!r}: resumed before it stopped")
            rows.append({"site": site, "stopped": stopped, "resumed": resumed, "source_row": line})
        except (ValueError, InputError) as e:
            problems.append(Problem.at_line(str(p), line, str(e)))
    log = pd.DataFrame(rows, columns=["site", "stopped", "resumed", "source_row"])
    for c in ("stopped", "resumed"):
        log[c] = pd.to_datetime(log[c], utc=True).astype("datetime64[ns, UTC]")
    log["source_row"] = log["source_row"].astype("int64")
    return log, problems


def read_parcel(path, *, what: str = "parcel file"):
    """Read a parcel outline: GeoJSON (RFC 7946) Polygon or MultiPolygon, WGS84 lon/lat.

    Accepts a bare geometry, a Feature or a FeatureCollection (polygons of all features are
    joined). A ``crs`` member (not part of RFC 7946), an unclosed ring, a ring with fewer than
    four positions, a self-intersecting ring or coordinates out of range is an InputError.

    `what` names the file in messages (the same reader serves ``coverage_file``).

    Returns
    -------
    shapely Polygon or MultiPolygon
        In longitude, latitude (degrees).
    """
    import shapely

    p = Path(path)
    if not p.exists():
        raise InputError(f"{what} not found: {p}")
    try:
        doc = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as e:
        raise InputError(f"{what} {p} is not valid JSON: {e}") from None
    if not isinstance(doc, dict):
        raise InputError(f"{what} {p}: expected a GeoJSON object")
    geoms = []

    def visit(obj, where):
        if not isinstance(obj, dict):
            raise InputError(f"{what} {p}: {where} is not a GeoJSON object")
        if "crs" in obj:
            raise InputError(f"{what} {p}: a 'crs' member is not allowed (RFC 7946: coordinates are WGS84 longitude, latitude)")
        kind = obj.get("type")
        if kind == "FeatureCollection":
            for k, f in enumerate(obj.get("features") or []):
                visit(f, f"feature {k + 1}")
        elif kind == "Feature":
            if obj.get("geometry") is None:
                raise InputError(f"{what} {p}: {where} has no geometry")
            visit(obj["geometry"], where)
        elif kind == "Polygon":
            geoms.append(_polygon(obj.get("coordinates"), p, where))
        elif kind == "MultiPolygon":
            for k, rings in enumerate(obj.get("coordinates") or []):
                geoms.append(_polygon(rings, p, f"{where}, polygon {k + 1}"))
        else:
            raise InputError(f"{what} {p}: {where} is a {kind!r}; a parcel must be a Polygon or MultiPolygon")

    visit(doc, "the document")
    if not geoms:
        raise InputError(f"{what} {p} holds no polygon")
    shape = geoms[0] if len(geoms) == 1 else shapely.MultiPolygon(geoms)
    if not shape.is_valid:
        raise InputError(f"{what} {p}: the polygons overlap or are invalid ({shapely.is_valid_reason(shape)})")
    return shape


def _polygon(rings, p: Path, where: str):
    import shapely

    if not isinstance(rings, list) or not rings:
        raise InputError(f"parcel file {p}: {where} has no rings")
    shells = []
    for k, ring in enumerate(rings):
        what = f"{where}, ring {k + 1}"
        try:
            xy = np.asarray(ring, dtype=float)
        except (TypeError, ValueError):
            raise InputError(f"parcel file {p}: {what} has malformed coordinates") from None
        if xy.ndim != 2 or xy.shape[1] < 2 or xy.shape[0] < 4:
            raise InputError(f"parcel file {p}: {what} needs at least 4 positions [lon, lat] (first = last)")
        xy = xy[:, :2]
        if not np.all(np.isfinite(xy)) or np.any(np.abs(xy[:, 0]) > 180) or np.any(np.abs(xy[:, 1]) > 90):
            raise InputError(f"parcel file {p}: {what} has coordinates outside longitude [-180, 180] / latitude [-90, 90]")
        if not np.array_equal(xy[0], xy[-1]):
            raise InputError(f"parcel file {p}: {what} is not closed (its first and last positions differ)")
        if not shapely.LinearRing(xy).is_simple:
            raise InputError(f"parcel file {p}: {what} intersects itself")
        shells.append(xy)
    poly = shapely.Polygon(shells[0], shells[1:])
    if not poly.is_valid:
        raise InputError(f"parcel file {p}: {where} is not a valid polygon ({shapely.is_valid_reason(poly)})")
    return poly

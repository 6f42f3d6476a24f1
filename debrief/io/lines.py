"""Readers for power lines (``lines.geojson``) and the outage log (``outages.csv``).

Both return a table and a list of :class:`Problem`: a bad feature or row is left out of the
analysis (lines) or kept with its problem text (outages, so that the report still lists it),
and every one is named with its feature or line number. Only whole-file mistakes (missing or
unreadable file, not GeoJSON, a ``crs`` member, missing columns, times without offset when no
time zone is set) raise :class:`debrief.errors.InputError`.

Missing ``height_m`` or ``cfo_kv`` on a line: when ``[lines] default_height_m`` /
``default_cfo_kv`` is set, that value is used and a note says so for each line; otherwise the
line is rejected with a message naming the setting.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
from shapely.geometry import LineString, MultiLineString

from ..errors import InputError
from ..geodesy import WGS84, centre_of, lon_near_deg
from ..timeutil import read_typed_time, zone
from .problems import Problem

LINE_COLUMNS = ["line_id", "name", "height_m", "cfo_kv", "spacing_m", "shielded", "height_defaulted",
                "cfo_defaulted", "length_km", "feature", "geometry"]
OUTAGE_COLUMNS = ["outage_id", "time", "line_id", "fault_latitude", "fault_longitude", "device",
                  "clock_tolerance_s", "reclose_times", "source_row", "problem"]


def problems_frame(problems) -> pd.DataFrame:
    """Problems as a table (file, where, item_id, severity, message)."""
    cols = ["file", "where", "item_id", "severity", "message"]
    return pd.DataFrame([{c: getattr(p, c) for c in cols} for p in problems], columns=cols)


def _number(v):
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        return None
    return float(v)


def _positions(coords, where):
    """Validated list of (lon, lat) from a GeoJSON coordinate list, or an error message."""
    if not isinstance(coords, list):
        return None, "coordinates are not a list of positions"
    out = []
    for k, pos in enumerate(coords, start=1):
        if not isinstance(pos, list) or len(pos) < 2:
            return None, f"position {k} is not [longitude, latitude]"
        lon, lat = _number(pos[0]), _number(pos[1])
        if lon is None or lat is None:
            return None, f"position {k} has a non-numeric coordinate"
        if not (-180.0 <= lon <= 180.0) or not (-90.0 <= lat <= 90.0):
            return None, f"position {k} ({pos[0]}, {pos[1]}) is outside longitude [-180, 180] / latitude [-90, 90] (RFC 7946 order is longitude, latitude)"
        out.append((lon, lat))
    distinct = {p for p in out}
    if len(distinct) < 2:
        return None, f"a line needs at least two distinct points, got {len(distinct)}"
    return out, None


def read_lines(path, *, config=None):
    """Read power lines from a GeoJSON FeatureCollection (RFC 7946, WGS84 longitude/latitude).

    Parameters
    ----------
    path : path
        ``lines.geojson``: LineString or MultiLineString features with properties ``id``,
        ``name``, ``height_m`` (conductor height, m), ``cfo_kv`` (critical flashover voltage,
        kV), optional ``spacing_m`` (outer-conductor spacing, m, default 0) and ``shielded``
        (true/false; recorded, not modelled).
    config : EventConfig, optional
        Supplies ``[lines] default_height_m`` and ``default_cfo_kv``.

    Returns
    -------
    lines : DataFrame
        Columns ``LINE_COLUMNS``; ``geometry`` holds shapely lines in (lon, lat) degrees, as
        given, ``length_km`` the geodesic length (each segment the shorter geodesic between its
        ends).
    problems : list of Problem

    Notes
    -----
    Lines across the antimeridian: a MultiLineString cut at longitude 180 (RFC 7946 section
    3.1.9) is read as one line, its parts joined where they meet at +180/-180
    (:func:`connected_parts_lonlat`). A LineString whose consecutive positions differ by more
    than 180 degrees of longitude (e.g. 179.9 then -179.9) is taken the short way across 180
    degrees, as a segment of a power line always is, and kept with a ``note`` in the problems
    naming the positions; to mean the long way, add vertices.
    """
    p = Path(path)
    name = p.name
    if not p.exists():
        raise InputError(f"lines file not found: {p}")
    try:
        data = json.loads(p.read_text(encoding="utf-8-sig"))
    except (OSError, UnicodeDecodeError) as e:
        raise InputError(f"cannot read {p}: {e}") from None
    except json.JSONDecodeError as e:
        raise InputError(f"{p}: not valid JSON (line {e.lineno}: {e.msg})") from None
    if not isinstance(data, dict):
        raise InputError(f"{p}: expected a GeoJSON FeatureCollection object")
    if "crs" in data:
        raise InputError(f"{p}: has a 'crs' member; GeoJSON (RFC 7946) is WGS84 longitude/latitude only, so remove it and give WGS84 coordinates")
    if data.get("type") == "Feature":
        features = [data]
    elif data.get("type") == "FeatureCollection" and isinstance(data.get("features"), list):
        features = data["features"]
    else:
        raise InputError(f"{p}: expected a GeoJSON FeatureCollection with a 'features' list")

    lines_cfg = config["lines"] if config is not None else {}
    default_h = lines_cfg.get("default_height_m")
    default_cfo = lines_cfg.get("default_cfo_kv")
    rows, problems, seen = [], [], set()
    for n, feat in enumerate(features, start=1):
        where = f"feature {n}"
        if not isinstance(feat, dict) or feat.get("type") != "Feature":
            problems.append(Problem(name, where, "", "is not a GeoJSON Feature"))
            continue
        if "crs" in feat:
            raise InputError(f"{p}, {where}: has a 'crs' member; RFC 7946 GeoJSON is WGS84 only")
        props = feat.get("properties") or {}
        fid = props.get("id", feat.get("id"))
        fid = "" if fid is None else str(fid).strip()
        if not fid:
            problems.append(Problem(name, where, "", "has no 'id' property"))
            continue
        if fid in seen:
            problems.append(Problem(name, where, fid, "repeats a line id already used by an earlier feature"))
            continue
        geom = feat.get("geometry") or {}
        gtype = geom.get("type")
        if gtype == "LineString":
            pts, err = _positions(geom.get("coordinates"), where)
            shape = LineString(pts) if pts else None
        elif gtype == "MultiLineString":
            parts, err = [], None
            coords = geom.get("coordinates")
            for k, part in enumerate(coords if isinstance(coords, list) else [None], start=1):
                pts, err = _positions(part, where)
                if err:
                    err = f"part {k}: {err}"
                    break
                parts.append(pts)
            if not parts and not err:
                err = "has no parts"
            shape = MultiLineString(parts) if not err else None
        else:
            problems.append(Problem(name, where, fid, f"geometry is {gtype or 'missing'}; only LineString and MultiLineString are lines"))
            continue
        if err:
            problems.append(Problem(name, where, fid, err))
            continue
        vals, bad, defaulted = {}, None, {}
        for key, default, setting in (("height_m", default_h, "default_height_m"), ("cfo_kv", default_cfo, "default_cfo_kv")):
            raw = props.get(key)
            v = _number(raw)
            if raw is None or raw == "":
                if default is None:
                    bad = f"has no '{key}'; add it or set [lines] {setting} in event.toml"
                    break
                vals[key], defaulted[key] = float(default), True
                problems.append(Problem(name, where, fid, f"has no '{key}'; used [lines] {setting} = {default:g}", "note"))
            elif v is None or v <= 0:
                bad = f"'{key}' must be a positive number, got {raw!r}"
                break
            else:
                vals[key], defaulted[key] = v, False
        if bad:
            problems.append(Problem(name, where, fid, bad))
            continue
        spacing = props.get("spacing_m", 0.0)
        spacing = 0.0 if spacing is None or spacing == "" else _number(spacing)
        if spacing is None or spacing < 0:
            problems.append(Problem(name, where, fid, f"'spacing_m' must be a number >= 0, got {props.get('spacing_m')!r}"))
            continue
        shielded = props.get("shielded", False)
        if shielded is None or shielded == "":
            shielded = False
        if not isinstance(shielded, bool):
            problems.append(Problem(name, where, fid, f"'shielded' must be true or false, got {shielded!r}"))
            continue
        for k, part in enumerate(line_points_lonlat(shape), start=1):
            for j in antimeridian_jumps(part):
                in_part = f"part {k}, " if gtype == "MultiLineString" else ""
                problems.append(Problem(name, where, fid, (
                    f"{in_part}positions {j + 1} and {j + 2} ({part[j, 0]:g} and {part[j + 1, 0]:g} degrees longitude) "
                    "cross the antimeridian without a cut at 180 (RFC 7946 section 3.1.9); taken as the short way "
                    "across 180 degrees"), "note"))
        seen.add(fid)
        rows.append({
            "line_id": fid, "name": str(props.get("name") or fid), "height_m": vals["height_m"],
            "cfo_kv": vals["cfo_kv"], "spacing_m": float(spacing), "shielded": shielded,
            "height_defaulted": defaulted["height_m"], "cfo_defaulted": defaulted["cfo_kv"],
            "length_km": WGS84.geometry_length(shape) / 1000.0, "feature": n, "geometry": shape,
        })
    lines = pd.DataFrame(rows, columns=LINE_COLUMNS)
    lines = lines.astype({"height_m": float, "cfo_kv": float, "spacing_m": float, "length_km": float,
                          "shielded": bool, "height_defaulted": bool, "cfo_defaulted": bool, "feature": "int64"})
    return lines, problems


def _read_time(text, tz, what, time_format=None):
    """(Timestamp UTC ns, None) or (None, message); no offset and no zone is fatal."""
    s = str(text).strip()
    try:
        ts = read_typed_time(s, time_format=time_format)
    except ValueError as e:
        return None, f"{what} {e}"
    if ts.tzinfo is None:
        z = zone(tz)
        if z is None:
            raise InputError(
                f"{what} {s!r} has no UTC offset and no time zone is set; add offsets, pass --tz ZONE, "
                "or set time_zone in event.toml (the zone the control system logs in)")
        try:
            ts = ts.tz_localize(z, ambiguous="raise", nonexistent="raise")
        except Exception:
            return None, f"{what} {s!r} does not exist or is ambiguous in {tz} (a DST change); add an offset"
    try:
        return ts.tz_convert("UTC").as_unit("ns"), None
    except (ValueError, OverflowError):
        return None, f"{what} {s!r} is outside the years 1678-2261"


def read_outages(path, *, tz: str | None, line_ids=None, time_format: str | None = None):
    """Read an outage log.

    Parameters
    ----------
    path : path
        ``outages.csv`` with columns ``id``, ``time``, ``line_id``; optional fault location
        ``latitude`` and ``longitude`` (both or neither), ``device``, ``clock_tolerance_s`` (s,
        overrides ``[lines] clock_tolerance_s``) and ``reclose_times``: the later operations of a
        reclosing sequence, ``;``-separated, each either seconds after ``time`` (``0.5;15.5``)
        or a time (read like ``time``). Times are ISO 8601 or `time_format`; any other text
        (``01/11/2026``) makes the row a problem naming the line, the value and the fix.
    tz : str or None
        Zone of times without an offset (the event's ``time_zone`` or ``--tz``). With None, such
        a time stops the read with a message asking for a zone.
    line_ids : iterable of str, optional
        Known line ids; an outage naming another is kept with a problem and not analysed.
    time_format : str, optional
        ``typed_time_format``: strptime pattern for times that are not ISO 8601.

    Returns
    -------
    outages : DataFrame
        Columns ``OUTAGE_COLUMNS``: ``time`` UTC (ns); ``clock_tolerance_s`` NaN when not given;
        ``reclose_times`` a tuple of UTC Timestamps; ``source_row`` the file line (header = 1);
        ``problem`` empty when the row is usable, else why it is not analysed.
    problems : list of Problem
    """
    p = Path(path)
    name = p.name
    if not p.exists():
        raise InputError(f"outage file not found: {p}")
    try:
        raw = pd.read_csv(p, dtype=str, keep_default_na=False, skipinitialspace=True, encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as e:
        raise InputError(f"cannot read {p} as CSV: {str(e).splitlines()[0] if str(e) else e}") from None
    raw.columns = [str(c).strip().lower() for c in raw.columns]
    missing = [c for c in ("id", "time", "line_id") if c not in raw.columns]
    if missing:
        raise InputError(f"{p}: missing column(s) {', '.join(missing)} (need id, time, line_id)")
    if ("latitude" in raw.columns) != ("longitude" in raw.columns):
        raise InputError(f"{p}: a fault location needs both 'latitude' and 'longitude' columns")
    known = None if line_ids is None else set(map(str, line_ids))
    rows, problems, seen = [], [], set()
    for i, rec in enumerate(raw.to_dict("records")):
        lineno = i + 2
        where = f"line {lineno}"
        oid = rec["id"].strip()
        row = {"outage_id": oid, "time": pd.NaT, "line_id": rec["line_id"].strip(), "fault_latitude": np.nan,
               "fault_longitude": np.nan, "device": rec.get("device", "").strip(), "clock_tolerance_s": np.nan,
               "reclose_times": (), "source_row": lineno, "problem": ""}

        def bad(msg):
            row["problem"] = msg
            problems.append(Problem(name, where, oid, msg))

        if not oid:
            problems.append(Problem(name, where, "", "has no outage id; row skipped"))
            continue
        if oid in seen:
            problems.append(Problem(name, where, oid, "repeats an outage id already used above; row skipped"))
            continue
        seen.add(oid)
        rows.append(row)
        ts, err = _read_time(rec["time"], tz, f"{name} {where}: time", time_format)
        if err:
            bad(err.replace(f"{name} {where}: ", ""))
            continue
        row["time"] = ts
        if not row["line_id"]:
            bad("has no line_id")
            continue
        if known is not None and row["line_id"] not in known:
            bad(f"names line {row['line_id']!r}, which is not among the usable lines")
            continue
        if "latitude" in raw.columns:
            la, lo = rec["latitude"].strip(), rec["longitude"].strip()
            if la or lo:
                try:
                    lat, lon = float(la), float(lo)
                except ValueError:
                    bad(f"fault location ({la!r}, {lo!r}) is not a pair of numbers")
                    continue
                if not (-90 <= lat <= 90 and -180 <= lon <= 180):
                    bad(f"fault location ({la}, {lo}) is outside latitude [-90, 90] / longitude [-180, 180]")
                    continue
                row["fault_latitude"], row["fault_longitude"] = lat, lon
        tol = rec.get("clock_tolerance_s", "").strip()
        if tol:
            try:
                t = float(tol)
            except ValueError:
                t = -1.0
            if not math.isfinite(t) or t < 0:
                bad(f"clock_tolerance_s must be a number >= 0, got {tol!r}")
                continue
            row["clock_tolerance_s"] = t
        rec_text = rec.get("reclose_times", "").strip()
        if rec_text:
            ops, err = [], None
            for item in (s.strip() for s in rec_text.split(";") if s.strip()):
                try:
                    sec = float(item)
                    t_op = ts + pd.Timedelta(seconds=sec) if math.isfinite(sec) else None
                    if t_op is None:
                        err = f"reclose time {item!r} is not finite"
                except ValueError:
                    t_op, err = _read_time(item, tz, "reclose time", time_format)
                if err:
                    break
                if t_op < ts:
                    err = f"reclose time {item!r} is before the outage time"
                    break
                ops.append(t_op)
            if err:
                bad(err)
                continue
            row["reclose_times"] = tuple(sorted(ops))
    out = pd.DataFrame(rows, columns=OUTAGE_COLUMNS)
    out["time"] = pd.to_datetime(out["time"], utc=True).astype("datetime64[ns, UTC]")
    out = out.astype({"fault_latitude": float, "fault_longitude": float, "clock_tolerance_s": float, "source_row": "int64"})
    return out, problems


def line_points_lonlat(geometry) -> list[np.ndarray]:
    """The parts of a (Multi)LineString as (n, 2) arrays of (lon, lat)."""
    if isinstance(geometry, MultiLineString):
        return [np.asarray(g.coords)[:, :2] for g in geometry.geoms]
    return [np.asarray(geometry.coords)[:, :2]]


#: Two part ends on the antimeridian within this latitude difference are one point, degrees
#: (11 cm: the resolution of coordinates written with 6 decimals).
ANTIMERIDIAN_JOIN_DEG = 1e-6


def _on_antimeridian(pt) -> bool:
    return abs(float(pt[0])) >= 180.0 - ANTIMERIDIAN_JOIN_DEG


def connected_parts_lonlat(geometry) -> list[np.ndarray]:
    """The parts of a line as (n, 2) arrays of (lon, lat), parts cut at the antimeridian joined.

    A line crossing 180 degrees should be cut there into a MultiLineString (RFC 7946 section
    3.1.9): two parts that end at longitude +180 and -180 (or the same sign) on the same latitude
    (within :data:`ANTIMERIDIAN_JOIN_DEG`) are one point of one line, so they are joined there
    (at the mean latitude). Other parts stay separate. Longitudes are returned as given, so a
    joined part steps by 360 degrees at the join: project it (e.g. with
    :class:`debrief.geodesy.LocalPlane`, which takes longitudes modulo 360) before measuring.

    A single part whose consecutive vertices differ by more than 180 degrees of longitude is
    taken the short way across 180 by the same projection (:func:`antimeridian_jumps` finds
    them; :func:`read_lines` notes them).
    """
    parts = [p.copy() for p in line_points_lonlat(geometry)]
    joined = True
    while joined and len(parts) > 1:
        joined = False
        for i in range(len(parts)):
            for j in range(i + 1, len(parts)):
                a, b = parts[i], parts[j]
                for ra, rb in ((False, False), (False, True), (True, False), (True, True)):
                    aa = a[::-1] if ra else a  # candidate: aa's last point meets bb's first
                    bb = b[::-1] if rb else b
                    if (_on_antimeridian(aa[-1]) and _on_antimeridian(bb[0])
                            and abs(aa[-1, 1] - bb[0, 1]) <= ANTIMERIDIAN_JOIN_DEG):
                        mid = np.array([[aa[-1, 0], 0.5 * (aa[-1, 1] + bb[0, 1])]])
                        parts[i] = np.vstack([aa[:-1], mid, bb[1:]])
                        del parts[j]
                        joined = True
                        break
                if joined:
                    break
            if joined:
                break
    return parts


def antimeridian_jumps(points_lonlat) -> np.ndarray:
    """Indices k (0-based) where vertex k+1 is more than 180 degrees of longitude from vertex k."""
    lon = np.asarray(points_lonlat, dtype=float)[:, 0]
    return np.flatnonzero(np.abs(np.diff(lon)) > 180.0)


def line_box_deg(geometry) -> tuple[float, float, float, float]:
    """(lon_min, lat_min, lon_max, lat_max) of a line, continuous across the antimeridian.

    Longitudes are taken within 180 degrees of the line's mean longitude
    (:func:`debrief.geodesy.centre_of`), so the box of a line crossing 180 degrees is narrow and
    may reach beyond [-180, 180] (e.g. 179.9 to 180.1); for any other line it is the plain
    lon/lat bounds. Compare a longitude with it after :func:`debrief.geodesy.lon_near_deg`.
    """
    allp = np.vstack(line_points_lonlat(geometry))
    lon0 = centre_of(allp[:, 1], allp[:, 0])[1]
    lon = lon_near_deg(allp[:, 0], lon0)
    return float(lon.min()), float(allp[:, 1].min()), float(lon.max()), float(allp[:, 1].max())


"""Invented feeders and an outage log for the Marrowfield Basin example event.

Reads the example storm (``strokes.csv`` and the generator's ``truth.csv`` in the event folder)
and writes ``lines.geojson`` and ``outages.csv`` beside them. Lines and names are invented. Some
outages are caused by lightning by construction: the line is routed past the TRUE position of a
real stroke of the storm (the network reports it elsewhere, within its error ellipse), and the
outage is logged shortly after the TRUE stroke time. Others are not. The scenarios
(:data:`SCENARIOS`) are:

==========  ======================================  ===========================================
outage      line                                    constructed cause
==========  ======================================  ===========================================
OUT-101     Brackwater feeder 12 (10 m, 150 kV)     direct strike: strong stroke 15 m from it
OUT-102     Sallow Lane tap (9 m, 110 kV)           induced flashover: strong stroke in the band
                                                    between y_min and y_fo (IEEE Std 1410)
OUT-103     Kestrel Ridge 69 kV tie (18 m, 400 kV)  direct strike; the log's clock is 6.4 s fast
OUT-104     Fennick Road feeder 4 (11 m, 160 kV)    direct strike, then a reclosing sequence
OUT-105     Ollery Mill feeder 7 (10 m, 150 kV)     not lightning: no stroke near in time
OUT-106     Hatherby 34 kV line (15 m, 250 kV)      not lightning: nearest stroke 1.5 km away
OUT-107     "Tamsin Creek feeder 3"                 a log row naming a line not in the map
==========  ======================================  ===========================================

Outage times are written as the control system logs them: local time of the event's
``time_zone`` (America/Chicago), no offset, millisecond resolution. Trips follow the stroke by
a relay-and-breaker delay of 50-150 ms (our choice).

Selection of the causal strokes uses only the generator's truth and the reported ellipses
(strong, detected, reported as ground strokes, small error ellipse), never the verdict code.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .geodesy import LocalPlane
from .io.atomic import write_csv_atomic, write_text_atomic

CENTRE = (45.50, -93.20)
TIME_ZONE = "America/Chicago"

#: outage id -> (line id, constructed cause)
SCENARIOS = {
    "OUT-101": ("BW12", "direct"),
    "OUT-102": ("SLTAP", "induced"),
    "OUT-103": ("KR69", "direct_clock_offset"),
    "OUT-104": ("FR4", "direct_reclosing"),
    "OUT-105": ("OM7", "none_quiet"),
    "OUT-106": ("HB34", "none_far"),
    "OUT-107": ("TC3", "unknown_line"),
}

LINES = {  # id: (name, height_m, cfo_kv, spacing_m, shielded)
    "BW12": ("Brackwater feeder 12", 10.0, 150.0, 1.2, False),
    "SLTAP": ("Sallow Lane tap", 9.0, 110.0, 0.0, False),
    "KR69": ("Kestrel Ridge 69 kV tie", 18.0, 400.0, 3.0, True),
    "FR4": ("Fennick Road feeder 4", 11.0, 160.0, 1.2, False),
    "OM7": ("Ollery Mill feeder 7", 10.0, 150.0, 1.2, False),
    "HB34": ("Hatherby 34 kV line", 15.0, 250.0, 2.0, False),
}

CLOCK_OFFSET_S = 6.4
RECLOSE_S = (0.5, 0.62, 15.6)


def _load(event_dir: Path):
    s_path, t_path = event_dir / "strokes.csv", event_dir / "truth.csv"
    for p in (s_path, t_path):
        if not p.exists():
            raise InputError(f"{p} not found: write the example storm first (python -m debrief.synth {event_dir})")
    obs = pd.read_csv(s_path)
    truth = pd.read_csv(t_path)
    obs["source_row"] = np.arange(len(obs)) + 2
    obs = obs.set_index("source_row")
    truth = truth[truth["detected"].astype(bool) & truth["source_row"].notna()].copy()
    truth["source_row"] = truth["source_row"].astype(np.int64)
    j = obs.loc[truth["source_row"].to_numpy()]
    for c in ("latitude", "longitude", "peak_current_ka", "type", "semi_major_km", "semi_minor_km", "major_bearing_deg", "time"):
        truth["obs_" + c] = j[c].to_numpy()
    truth["time"] = pd.to_datetime(truth["time"], utc=True)
    truth["obs_time"] = pd.to_datetime(truth["obs_time"], utc=True, errors="coerce")
    for c in ("obs_latitude", "obs_longitude", "obs_peak_current_ka", "obs_semi_major_km", "obs_semi_minor_km", "obs_major_bearing_deg"):
        truth[c] = pd.to_numeric(truth[c], errors="coerce")
    ok = (truth["type"] == "CG") & (truth["obs_type"] == "CG") & truth["obs_latitude"].between(-90, 90) & \
        (truth["obs_peak_current_ka"].abs() > 0) & truth["obs_time"].notna()
    truth = truth[ok].reset_index(drop=True)
    obs_all = obs.reset_index()
    obs_all["time"] = pd.to_datetime(obs_all["time"], utc=True, errors="coerce")
    for c in ("latitude", "longitude"):
        obs_all[c] = pd.to_numeric(obs_all[c], errors="coerce")
    obs_all = obs_all[obs_all["latitude"].between(-90, 90) & obs_all["longitude"].between(-180, 180)
                      & obs_all["time"].notna()].reset_index(drop=True)
    return truth, obs_all


def _axis(bearing_deg):
    b = np.radians(bearing_deg)
    return np.array([np.sin(b), np.cos(b)])  # x east, y north


def _route(anchor_xy, u, n_away, length_km, rng):
    """A feeder through `anchor_xy`, straight for 2 km each side along `u`, then bending away
    from the stroke side (`n_away`), so no vertex comes closer to the stroke than the anchor."""
    a = np.asarray(anchor_xy)
    half = 0.5 * length_km
    k1, k2 = rng.uniform(0.15, 0.35, 2)
    pts = [a - half * u + (half - 2.0) * k1 * n_away, a - 2.0 * u, a + 2.0 * u, a + half * u + (half - 2.0) * k2 * n_away]
    return np.array(pts)


def _perp_offset_km(plane, line_xy, lat, lon):
    import shapely

    x, y = plane.to_xy_km(lat, lon)
    return shapely.distance(shapely.LineString(line_xy), shapely.points(np.atleast_1d(x), np.atleast_1d(y)))


def build_grid(event_dir, seed: int = 7):
    """Lines (GeoJSON dict) and outage log (DataFrame of text) for the example event.

    Returns
    -------
    geojson : dict
    outages : DataFrame
        Columns id, time (local, no offset), line_id, latitude, longitude, device,
        clock_tolerance_s, reclose_times.
    truth : dict
        outage id -> {"cause", "source_row" (strokes.csv line of the causal stroke or None),
        "offset_m" (true stroke-to-line distance by construction)}.
    """
    import shapely

    event_dir = Path(event_dir)
    truth, obs = _load(event_dir)
    rng = np.random.default_rng(seed)
    plane = LocalPlane(*CENTRE)
    tx, ty = plane.to_xy_km(truth["latitude"].to_numpy(), truth["longitude"].to_numpy())
    truth["x"], truth["y"] = tx, ty
    ox, oy = plane.to_xy_km(obs["latitude"].to_numpy(), obs["longitude"].to_numpy())
    obs["x"], obs["y"] = ox, oy
    inner = (np.abs(tx) < 30) & (np.abs(ty) < 30)
    used = set()
    lines_xy, outages, known = {}, [], {}

    def pick(cand, offset_m, lid, accept):
        """First suitable stroke of `cand`; the line runs along its ellipse's major axis at
        `offset_m` (so the perpendicular location error is the ellipse's minor axis)."""
        for _, s in cand.iterrows():
            if int(s["source_row"]) in used:
                continue
            off = offset_m(s) if callable(offset_m) else offset_m
            u = _axis(s["obs_major_bearing_deg"])
            n = np.array([u[1], -u[0]]) * (1 if rng.random() < 0.5 else -1)
            anchor = np.array([s["x"], s["y"]]) + off / 1000.0 * n
            xy = _route(anchor, u, n, rng.uniform(8.0, 14.0), rng)
            rep = float(_perp_offset_km(plane, xy, s["obs_latitude"], s["obs_longitude"])[0]) * 1000.0
            if accept(rep, s):
                used.add(int(s["source_row"]))
                lines_xy[lid] = xy
                return s, rep
        raise InputError(f"no suitable stroke in the example storm for line {lid}")

    def strong(min_ka, max_minor_km):
        c = truth[inner & (truth["peak_current_ka"].abs() >= min_ka) & (truth["obs_peak_current_ka"].abs() >= min_ka)
                  & (truth["obs_semi_minor_km"] <= max_minor_km) & (truth["stroke_order"] == 1)]
        return c.sort_values("obs_semi_minor_km", kind="stable")

    def trip_time(t, delay_s):
        return t + pd.Timedelta(seconds=delay_s)

    from .lines import flashover_band_m

    # OUT-101 direct strike: 15 m from the true point; the reported point not far off either.
    s, _ = pick(strong(40, 0.12), 15.0, "BW12", lambda rep, s: rep < 40.0)
    outages.append(("OUT-101", trip_time(s["time"], rng.uniform(0.05, 0.15)), "BW12", "", "recloser R-12", "", ""))
    known["OUT-101"] = {"cause": "direct", "source_row": int(s["source_row"]), "offset_m": 15.0}

    # OUT-102 induced flashover: the true point in the middle of the band y_min < y < y_fo.
    h, cfo = LINES["SLTAP"][1], LINES["SLTAP"][2]

    def band_mid(s):
        ymin, yfo = flashover_band_m(abs(s["peak_current_ka"]), h, cfo)
        return float(ymin), float(yfo)

    big = truth[inner & (truth["peak_current_ka"].abs() >= 60) & (truth["obs_peak_current_ka"].abs() >= 60)
                & (truth["obs_semi_minor_km"] <= 0.12)]
    big = big.sort_values("peak_current_ka", key=np.abs, ascending=False, kind="stable")
    big = big[[band_mid(r)[1] - band_mid(r)[0] > 60 for _, r in big.iterrows()]]
    s, rep = pick(big, lambda r: 0.5 * sum(band_mid(r)), "SLTAP",
                  lambda rep, r: band_mid(r)[0] < rep < band_mid(r)[1])
    mid = 0.5 * sum(band_mid(s))
    outages.append(("OUT-102", trip_time(s["time"], rng.uniform(0.05, 0.15)), "SLTAP", "", "fuse F-3", "", ""))
    known["OUT-102"] = {"cause": "induced", "source_row": int(s["source_row"]), "offset_m": mid}

    # OUT-103 direct strike on the 69 kV tie; the control system clock runs 6.4 s fast.
    s, _ = pick(strong(30, 0.15), 20.0, "KR69", lambda rep, s: rep < 50.0)
    outages.append(("OUT-103", trip_time(s["time"], CLOCK_OFFSET_S + 0.08), "KR69", "", "breaker 52-KR", "", ""))
    known["OUT-103"] = {"cause": "direct_clock_offset", "source_row": int(s["source_row"]), "offset_m": 20.0}

    # OUT-104 direct strike, recloser sequence: reclose 0.5 s, re-trip 0.62 s, reclose 15.6 s.
    s, _ = pick(strong(25, 0.15), 10.0, "FR4", lambda rep, s: rep < 50.0)
    outages.append(("OUT-104", trip_time(s["time"], 0.1), "FR4", "", "recloser R-4", "",
                    ";".join(f"{v:g}" for v in RECLOSE_S)))
    known["OUT-104"] = {"cause": "direct_reclosing", "source_row": int(s["source_row"]), "offset_m": 10.0}

    # OUT-106 lightning 1.5 km away only: no other reported stroke within 2.5 km within ±30 s.
    cg_obs = obs[obs["type"] == "CG"]
    t_obs = cg_obs["time"].dt.tz_localize(None).to_numpy()

    def lonely(xy, rep, s):
        """Reported 1.3-1.7 km from the line and the only reported ground stroke within 2.5 km in ±30 s."""
        if not 1300.0 < rep < 1700.0:
            return False
        line = shapely.LineString(xy)
        near_t = np.abs((t_obs - s["obs_time"].tz_localize(None).to_datetime64()) / np.timedelta64(1, "s")) <= 30
        d = shapely.distance(line, shapely.points(cg_obs["x"].to_numpy()[near_t], cg_obs["y"].to_numpy()[near_t]))
        return int(np.sum(d <= 2.5)) == 1

    cand = truth[inner & truth["peak_current_ka"].abs().between(10, 40)].sort_values("time")
    found = None
    for _, s in cand.iterrows():
        u = _axis(rng.uniform(0, 180))
        n = np.array([u[1], -u[0]])
        anchor = np.array([s["x"], s["y"]]) + 1.5 * n
        xy = _route(anchor, u, n, rng.uniform(8.0, 14.0), rng)
        rep = float(_perp_offset_km(plane, xy, s["obs_latitude"], s["obs_longitude"])[0]) * 1000.0
        if lonely(xy, rep, s):
            found = s
            lines_xy["HB34"] = xy
            break
    if found is None:
        raise InputError("no isolated stroke for the 1.5 km scenario")
    outages.append(("OUT-106", trip_time(found["time"], 2.1), "HB34", "", "breaker 52-HB", "", ""))
    known["OUT-106"] = {"cause": "none_far", "source_row": int(found["source_row"]), "offset_m": 1500.0}

    # OUT-105 quiet: a line in the quietest corner and a time with no reported stroke within
    # 10 km of it in ±120 s.
    corners = [np.array([-25.0, 25.0]), np.array([25.0, -25.0]), np.array([-25.0, -25.0]), np.array([25.0, 25.0])]
    dens = [np.sum(np.hypot(cg_obs["x"] - c[0], cg_obs["y"] - c[1]) < 15) for c in corners]
    c = corners[int(np.argmin(dens))]
    u = _axis(60.0)
    xy = _route(c, u, np.array([u[1], -u[0]]), 9.0, rng)
    lines_xy["OM7"] = xy
    d_all = shapely.distance(shapely.LineString(xy), shapely.points(obs["x"].to_numpy(), obs["y"].to_numpy()))
    t_near = obs["time"][d_all <= 10.0].dropna().sort_values().dt.tz_localize(None).to_numpy()
    t0 = pd.Timestamp("2026-07-14T19:00:00Z")
    quiet = None
    for k in range(40, 200):
        t = t0 + pd.Timedelta(minutes=k) + pd.Timedelta(seconds=float(rng.uniform(0, 59)))
        if not np.any(np.abs((t_near - t.tz_localize(None).to_datetime64()) / np.timedelta64(1, "s")) <= 120):
            quiet = t
            break
    outages.append(("OUT-105", quiet, "OM7", "", "recloser R-7", "", ""))
    known["OUT-105"] = {"cause": "none_quiet", "source_row": None, "offset_m": None}

    # OUT-107: a log row naming a line that the map does not have (shows the problem list).
    outages.append(("OUT-107", quiet + pd.Timedelta(minutes=7, seconds=13.25), "TC3", "", "fuse F-31", "", ""))
    known["OUT-107"] = {"cause": "unknown_line", "source_row": None, "offset_m": None}

    feats = []
    for lid, (name, hm, cfo_kv, sp, sh) in LINES.items():
        xy = lines_xy[lid]
        lat, lon = plane.to_latlon(xy[:, 0], xy[:, 1])
        coords = [[round(float(a), 7), round(float(b), 7)] for a, b in zip(lon, lat)]
        geom = {"type": "LineString", "coordinates": coords}
        if lid == "FR4":  # a feeder with a lateral: MultiLineString
            v = (xy[2] - xy[1]) / np.linalg.norm(xy[2] - xy[1])
            away = np.array([v[1], -v[0]])  # from the far end vertex, square to the main run
            lat2, lon2 = plane.to_latlon(np.array([xy[3][0], xy[3][0] + 3.0 * away[0]]),
                                         np.array([xy[3][1], xy[3][1] + 3.0 * away[1]]))
            geom = {"type": "MultiLineString",
                    "coordinates": [coords, [[round(float(a), 7), round(float(b), 7)] for a, b in zip(lon2, lat2)]]}
        feats.append({"type": "Feature", "geometry": geom,
                      "properties": {"id": lid, "name": name, "height_m": hm, "cfo_kv": cfo_kv, "spacing_m": sp, "shielded": sh}})
    geojson = {"type": "FeatureCollection",
               "name": "Marrowfield Basin feeders (invented)",
               "features": feats}
    rows = []
    tz = TIME_ZONE
    for oid, t, lid, _fault, device, tol, rec in sorted(outages, key=lambda r: r[1]):
        local = pd.Timestamp(t).tz_convert(tz).tz_localize(None)
        rows.append({"id": oid, "time": local.strftime("%Y-%m-%d %H:%M:%S.%f")[:-3], "line_id": lid,
                     "device": device, "clock_tolerance_s": tol, "reclose_times": rec})
    return geojson, pd.DataFrame(rows), known


def write_grid(event_dir, seed: int = 7) -> dict:
    """Write ``lines.geojson`` and ``outages.csv`` into `event_dir`; return the scenario truth."""
    event_dir = Path(event_dir)
    geojson, outages, known = build_grid(event_dir, seed=seed)
    write_text_atomic(event_dir / "lines.geojson", json.dumps(geojson, indent=1) + "\n")
    write_csv_atomic(event_dir / "outages.csv", outages)
    return known


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="python -m debrief.synth_grid",
                                 description="Write invented feeders (lines.geojson) and an outage log (outages.csv) for the example event.")
    ap.add_argument("event_dir", help="event folder holding strokes.csv and truth.csv")
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args(argv)
    try:
        known = write_grid(args.event_dir, seed=args.seed)
    except InputError as e:
        print(f"synth_grid: {e}", file=sys.stderr)
        return 2
    for oid, k in known.items():
        print(f"{oid}: {k['cause']}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

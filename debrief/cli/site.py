"""``debrief site``, ``debrief sites`` and ``debrief alerts``: strokes near a site, many sites, crew alert periods.

Thin: read and group the strokes, call :mod:`debrief.sites` / :mod:`debrief.alerts`, print and
write. Every number comes from those core functions.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from ..config import with_overrides
from ..errors import InputError
from ..io.atomic import write_csv_atomic, write_text_atomic
from ..timeutil import format_times, iso_utc, iso_utc_many, parse_user_time
from .common import add_stroke_options, analysis_from_args, config_from_args, window_from_args

CANDIDATE_COLUMNS = (
    "time", "latitude", "longitude", "peak_current_ka", "type", "flash_id", "ground_contact", "likely_ic",
    "distance_km", "bearing_deg", "p_within", "p_within_parcel", "semi_major_km", "semi_minor_km",
    "major_bearing_deg", "ellipse_from_default", "source_row",
)


def register(subparsers) -> None:
    _register_site(subparsers)
    _register_sites(subparsers)
    _register_alerts(subparsers)


def _common_site_options(p):
    add_stroke_options(p)
    p.add_argument("--detection-efficiency", type=float, metavar="DE", help="the network's flash detection efficiency (0-1]")
    p.add_argument("--de-source", metavar="TEXT", help="where the detection efficiency comes from (required with it)")
    p.add_argument("--include-likely-ic", action="store_true",
                   help="count low-amplitude positive ground reports (flagged likely_ic)")


def _register_site(subparsers):
    p = subparsers.add_parser(
        "site", help="did lightning strike near a site: candidates and probabilities",
        description="List every stroke whose error ellipse could reach a circle about the site in "
                    "the window, with distance, bearing and the probability that it terminated "
                    "within the radius; summarise in a sentence a letter can quote.")
    _common_site_options(p)
    p.add_argument("--lat", type=float, metavar="LAT", help="site latitude, degrees (default: the parcel's centre)")
    p.add_argument("--lon", type=float, metavar="LON", help="site longitude, degrees (default: the parcel's centre)")
    p.add_argument("--radius-km", type=float, required=True, metavar="R", help="circle radius, km")
    p.add_argument("--start", metavar="ISO", help="claim period start (default: the analysis window's: event.toml start, else the data)")
    p.add_argument("--end", metavar="ISO", help="claim period end (default: the analysis window's: event.toml end, else the data)")
    p.add_argument("--parcel", metavar="PARCEL.geojson", help="parcel outline (GeoJSON Polygon, RFC 7946)")
    p.add_argument("--name", default="the site", metavar="NAME", help="site name for the summary")
    p.add_argument("--out", metavar="CANDIDATES.csv", help="write the candidate strokes as CSV")
    p.add_argument("--geojson", metavar="FILE", help="write candidates, their ellipses and the circle as GeoJSON")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.set_defaults(func=run_site)


def _register_sites(subparsers):
    p = subparsers.add_parser(
        "sites", help="check every site of a sites table in one pass",
        description="Check each claim site of a sites table (rows with radius_km) and write one "
                    "row per site with the summary figures.")
    _common_site_options(p)
    p.add_argument("--sites", metavar="SITES.csv", help="sites table (default: the event's sites file)")
    p.add_argument("--out", required=True, metavar="RESULTS.csv", help="one row per site")
    p.add_argument("--candidates-out", metavar="CANDIDATES.csv", help="also write every candidate with its site")
    p.set_defaults(func=run_sites)


def _register_alerts(subparsers):
    p = subparsers.add_parser(
        "alerts", help="crew alert periods at sites (a record, not a live warning)",
        description="Reconstruct stop (and warning) periods at crew sites: a period starts with "
                    "the first ground stroke within the radius and ends at the all-clear after "
                    "the last one. Optionally compare with a crew log.")
    add_stroke_options(p)
    p.add_argument("--sites", metavar="SITES.csv", help="sites table (default: the event's sites file)")
    p.add_argument("--stop-km", type=float, metavar="KM", help="stop radius for sites without stop_km (default 10)")
    p.add_argument("--warn-km", type=float, metavar="KM", help="warning radius for sites without warn_km (default none)")
    p.add_argument("--all-clear-min", type=float, metavar="MIN", help="all-clear after the last stroke (default 30)")
    p.add_argument("--include-ic", action="store_true", default=None, help="cloud pulses also start and extend periods")
    p.add_argument("--crew-log", metavar="FILE", help="crew log CSV: site, stopped, resumed")
    p.add_argument("--out", metavar="PERIODS.csv", help="write the periods as CSV")
    p.add_argument("--comparison-out", metavar="FILE", help="write the crew-log comparison as CSV")
    p.add_argument("--start", metavar="ISO", help="analysis window start (default: event.toml start, else the data)")
    p.add_argument("--end", metavar="ISO", help="analysis window end (default: event.toml end, else the data)")
    p.set_defaults(func=run_alerts)


# --- helpers ----------------------------------------------------------------------------------

def _config(args):
    cfg = config_from_args(args)
    return with_overrides(cfg, {"default_uncertainty_km": getattr(args, "default_uncertainty_km", None)})


def _check_out(path, *inputs):
    if path is None:
        return
    p = Path(path)
    if not p.parent.exists() and str(p.parent) not in ("", "."):
        raise InputError(f"output folder does not exist: {p.parent}")
    for i in inputs:
        if i and Path(i).exists() and p.exists() and p.resolve() == Path(i).resolve():
            raise InputError(f"the output {p} would overwrite an input")


def _iso_frame(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.copy()
    for c in out.columns:
        if isinstance(out[c].dtype, pd.DatetimeTZDtype):
            out[c] = iso_utc_many(out[c])
    return out


def _de_args(args):
    if args.detection_efficiency is not None and not 0.0 < args.detection_efficiency <= 1.0:
        raise InputError(f"--detection-efficiency must be in (0, 1], got {args.detection_efficiency}")
    if args.detection_efficiency is not None and not args.de_source:
        raise InputError("--detection-efficiency needs --de-source TEXT saying where the figure comes from")
    return args.detection_efficiency, args.de_source


def _print_cautions(cautions):
    print("\nCautions:")
    for c in cautions:
        print(f"  - {c}")


def _with_unchecked_rows(summary: pd.DataFrame, claim: pd.DataFrame, problems) -> pd.DataFrame:
    """The results table with a row for every sites row that could not be read, in file order:
    nothing a claim handler sent in goes missing from the results (``coverage`` ``not_checked``,
    ``problem`` says why)."""
    out = summary.copy()
    out.insert(0, "source_row", claim["source_row"].to_numpy())
    out["problem"] = ""
    if problems:
        bad = pd.DataFrame({"source_row": [p.line for p in problems], "name": [p.item_id for p in problems],
                            "coverage": "not_checked",
                            "problem": [p.message for p in problems],
                            "sentence": [f"Not checked: {p.message}" for p in problems]})
        out = pd.concat([out, bad], ignore_index=True).sort_values("source_row", kind="stable").reset_index(drop=True)
        for c in ("n_candidates", "n_ground_candidates", "n_ground_within", "n_contacts", "n_set_aside_within"):
            out[c] = out[c].astype("Int64")
    return out


def _period_from_args(args, cfg):
    """A claim period from ``--start/--end`` only (None where not given: the window's bound)."""
    tz, fmt = cfg.time_zone, cfg.get("typed_time_format")
    start = parse_user_time(args.start, tz, what="--start", time_format=fmt) if args.start else None
    end = parse_user_time(args.end, tz, what="--end", time_format=fmt) if args.end else None
    if start is not None and end is not None and end <= start:
        raise InputError(f"--end ({args.end}) is not after --start ({args.start})")
    return start, end


def _sites_path(args, cfg):
    if args.sites:
        return Path(args.sites)
    if getattr(args, "event", None):
        return cfg.path("sites")
    raise InputError("give --sites SITES.csv (or --event with a sites file)")


# --- site -------------------------------------------------------------------------------------

def run_site(args) -> int:
    from ..io.sites import read_parcel
    from ..sites import CAUTIONS, candidates_geojson

    cfg = _config(args)
    from ..uncertainty import sigma_scale

    sigma_scale(cfg.get("ellipse_confidence"))  # a bad confidence fails before the work
    start, end = _period_from_args(args, cfg)
    de, src = _de_args(args)
    parcel = read_parcel(args.parcel) if args.parcel else None
    lat, lon = args.lat, args.lon
    if lat is None or lon is None:
        if parcel is None:
            raise InputError("give --lat and --lon (or --parcel to use the parcel's centre)")
        c = parcel.representative_point()
        lat = c.y if lat is None else lat
        lon = c.x if lon is None else lon
    from ..sites import _validate_site

    _validate_site(lat, lon, args.radius_km)
    for o in (args.out, args.geojson):
        _check_out(o, args.strokes, args.parcel)
    # --start/--end are the claim period; the analysis window is the event's (event.toml or the data).
    event_window = window_from_args(argparse.Namespace(), cfg)  # event.toml's, not the claim period
    an = analysis_from_args(args, cfg, window=event_window, include_likely_ic=args.include_likely_ic,
                            detection_efficiency=de, de_source=src)
    res = an.check_site(lat, lon, args.radius_km, start=start, end=end, parcel=parcel, name=args.name)
    if args.out:
        cols = [c for c in CANDIDATE_COLUMNS if c in res.candidates.columns]
        write_csv_atomic(args.out, _iso_frame(res.candidates[cols]))
    if args.geojson:
        write_text_atomic(args.geojson, json.dumps(candidates_geojson(res, parcel)))
    if args.json:
        print(json.dumps(res.to_dict(), indent=2, ensure_ascii=False))
        return 0
    s = res.summary
    tz = cfg.time_zone
    print(f"Site check: {res.name} ({s['latitude']:.5f}, {s['longitude']:.5f}), radius {s['radius_km']:g} km")
    print(f"Claim period: {format_times(s['start'], tz)} to {format_times(s['end'], tz)}")
    searched = (f"{format_times(s['searched_start'], tz)} to {format_times(s['searched_end'], tz)}"
                if s["searched_start"] is not pd.NaT else "nothing (outside the coverage)")
    print(f"Searched: {searched}; analysis window {iso_utc(an.start)} to {iso_utc(an.end)}")
    cov = {"inside": "inside", "partial": "PARTIAL", "outside": "OUTSIDE (no conclusion)"}.get(s["coverage"], s["coverage"])
    print(f"Coverage: {cov} (time {s['coverage_time_source']}, area {s['coverage_area_source']})"
          + (f": {s['coverage_note']}" if s["coverage_note"] else ""))
    if s["coverage_warning"]:
        print(f"Warning: {s['coverage_warning']}")
    print(f"Ellipse confidence {s['ellipse_confidence']:g}; {s['n_ellipse_from_default']} candidate(s) used default_uncertainty_km")
    if s["coverage"] != "outside":
        print(f"Candidates: {s['n_candidates']} (ground {s['n_ground_candidates']}), ground strokes within the radius: "
              f"{s['n_ground_within']}")
    near = "none" if not np.isfinite(s["nearest_km"]) else f"{s['nearest_km']:.3f} km"
    if s["coverage"] != "outside":
        print(f"Nearest ground stroke: {near}; largest p_within of a ground contact {s['max_p_within']:.4f} "
              f"(of a single stroke {s['max_p_within_stroke']:.4f}); p(at least one ground contact within) "
              f"{s['p_any_within']:.4f} over {s['n_contacts']} contact(s), each contact's strokes combined into one "
              "fix, contacts taken as independent")
    if "p_any_within_parcel" in s and s["coverage"] != "outside":
        print(f"Parcel: {s['parcel_area_km2']:.4g} km2, largest p {s['max_p_within_parcel']:.4f}, "
              f"p(at least one) {s['p_any_within_parcel']:.4f}")
    r = res.residual
    if r:
        print(f"Unrecorded-flash chance: DE {r['detection_efficiency']:g} ({r['de_source']}); "
              f"{r['n_ground_flashes_in_ring']} recorded ground flashes in the ring {r['ring_inner_km']:g}-{r['ring_outer_km']:g} km "
              f"({r['ring_area_km2']:.1f} km2) -> {r['density_per_km2']:.4g} per km2; circle {r['area_km2']:.4g} km2; "
              f"expected unrecorded {r['expected_unrecorded']:.4g}; chance 1 - exp(-lambda) = {r['p_unrecorded']:.4f} "
              f"({100 * r['upper_confidence']:.0f}% upper bound {r['p_unrecorded_upper']:.4f})")
    elif s["coverage"] != "inside":
        print("Unrecorded-flash chance: not stated (the question is not wholly inside the data's coverage)")
    else:
        print("Unrecorded-flash chance: not stated (no detection efficiency given: --detection-efficiency with --de-source, "
              "or flash_detection_efficiency in event.toml)")
    top = res.candidates.sort_values("p_within", ascending=False).head(10)
    if len(top):
        print("\nMost likely candidates:")
        print(f"  {'time':<24} {'kA':>7} {'type':<4} {'km':>7} {'bearing':>7} {'p_within':>9}")
        for row in top.itertuples(index=False):
            print(f"  {iso_utc(row.time):<24} {row.peak_current_ka:>7.1f} {row.type:<4} {row.distance_km:>7.3f} "
                  f"{row.bearing_deg:>7.1f} {row.p_within:>9.4f}")
    print("\n" + res.sentence)
    _print_cautions(CAUTIONS)
    if args.out:
        print(f"\n{len(res.candidates)} candidates -> {args.out}")
    return 0


# --- sites ------------------------------------------------------------------------------------

def run_sites(args) -> int:
    from ..io.sites import read_sites
    from ..sites import CAUTIONS

    cfg = _config(args)
    de, src = _de_args(args)
    path = _sites_path(args, cfg)
    _check_out(args.out, args.strokes, path)
    _check_out(args.candidates_out, args.strokes, path)
    sites, problems = read_sites(path, time_zone=cfg.time_zone, time_format=cfg.get("typed_time_format"))
    for pr in problems:
        print(f"debrief sites: {pr} (row skipped)", file=sys.stderr)
    claim = sites[sites["radius_km"].notna()]
    skipped = len(sites) - len(claim)
    if len(claim) == 0:
        raise InputError(f"no site in {path} has a radius_km to check")
    an = analysis_from_args(args, cfg, include_likely_ic=args.include_likely_ic, detection_efficiency=de, de_source=src)
    summary, cand = an.check_sites(claim, return_candidates=True)
    write_csv_atomic(args.out, _iso_frame(_with_unchecked_rows(summary, claim, problems)))
    if args.candidates_out:
        cols = ["site"] + [c for c in CANDIDATE_COLUMNS if c in cand.columns]
        write_csv_atomic(args.candidates_out, _iso_frame(cand[cols]))
    print(f"{len(summary)} site(s) checked -> {args.out}" + (f"; {skipped} alert-only site(s) without radius_km left out" if skipped else ""))
    print(f"Window: {iso_utc(an.start)} to {iso_utc(an.end)}; {an.coverage.describe()}")
    print(f"  {'site':<32} {'km':>5} {'coverage':>8} {'within':>6} {'nearest':>8} {'max p':>7} {'p any':>7}")
    for row in summary.itertuples(index=False):
        near = f"{row.nearest_km:8.3f}" if np.isfinite(row.nearest_km) else f"{'-':>8}"
        mp = f"{row.max_p_within:>7.4f}" if np.isfinite(row.max_p_within) else f"{'-':>7}"
        pa = f"{row.p_any_within:>7.4f}" if np.isfinite(row.p_any_within) else f"{'-':>7}"
        within = f"{row.n_ground_within:>6d}" if not pd.isna(row.n_ground_within) else f"{'-':>6}"
        print(f"  {str(row.name)[:32]:<32} {row.radius_km:>5g} {row.coverage:>8} {within} {near} {mp} {pa}")
        if row.coverage_warning:
            print(f"    warning: {row.coverage_warning}")
    if problems:
        print(f"{len(problems)} bad row(s) in {path} skipped (see stderr)")
    _print_cautions(CAUTIONS)
    return 0


# --- alerts -----------------------------------------------------------------------------------

def run_alerts(args) -> int:
    from ..alerts import RECORD_NOTE, alert_sites
    from ..io.sites import read_crew_log, read_sites
    from ..sites import CAUTIONS

    cfg = with_overrides(config_from_args(args), {
        "alerts.stop_km": args.stop_km, "alerts.warn_km": args.warn_km,
        "alerts.all_clear_min": args.all_clear_min, "alerts.include_ic": args.include_ic,
    })
    start, end = window_from_args(args, cfg)
    path = _sites_path(args, cfg)
    _check_out(args.out, args.strokes, path)
    _check_out(args.comparison_out, args.strokes, path)
    sites, problems = read_sites(path, time_zone=cfg.time_zone, time_format=cfg.get("typed_time_format"))
    for pr in problems:
        print(f"debrief alerts: {pr} (row skipped)", file=sys.stderr)
    log = None
    if args.crew_log:
        log, log_problems = read_crew_log(args.crew_log, time_zone=cfg.time_zone, time_format=cfg.get("typed_time_format"))
        for pr in log_problems:
            print(f"debrief alerts: {pr} (row skipped)", file=sys.stderr)
    crew = alert_sites(sites)
    if len(crew) == 0:
        raise InputError(f"no usable site in {path}")
    an = analysis_from_args(args, cfg, window=(start, end))
    periods, totals, cmp_ = an.alerts(crew, log)
    tz = cfg.time_zone
    a = cfg["alerts"]
    print(f"Alert periods at {len(crew)} site(s): stop radius {a['stop_km']:g} km unless the site sets stop_km"
          + (f", warning radius {a['warn_km']:g} km" if a["warn_km"] else "")
          + f", all-clear {a['all_clear_min']:g} min after the last {'stroke or pulse' if a['include_ic'] else 'ground stroke'}")
    print(f"Window: {iso_utc(an.start)} to {iso_utc(an.end)}; {an.coverage.describe()}")
    for row in periods.itertuples(index=False):
        flag = ("  (still open where the analysis window or the data end)" if row.open_at_end else "") + \
               ("  (may have begun before the analysis window or the data start)" if row.open_at_start else "") + \
               (f"  [coverage {row.coverage}: {row.coverage_note}]" if row.coverage not in ("inside", "not_checked") else "")
        print(f"  {row.site} [{row.level}] {format_times(row.start, tz)} -> all clear {format_times(row.all_clear, tz)}: "
              f"{row.duration_min:.0f} min, {row.n_strokes} strokes, nearest {row.nearest_km:.2f} km{flag}")
    print("Total time in stop periods:")
    for row in totals[totals["level"] == "stop"].itertuples(index=False):
        lb = " (at least: a period was still open)" if row.open_at_end else ""
        print(f"  {row.site}: {row.total_min:.0f} min in {row.n_periods} period(s){lb}")
    if args.out:
        write_csv_atomic(args.out, _iso_frame(periods))
    if log is not None:
        print("Crew log compared with the stop periods:" if len(cmp_) else "Crew log: matches the stop periods (to the minute).")
        for row in cmp_.itertuples(index=False):
            span = f"{format_times(row.start, tz)} to {format_times(row.end, tz)}" if not pd.isna(row.start) else ""
            mins = f" ({row.minutes:.0f} min)" if np.isfinite(row.minutes) else ""
            line = f" [crew log line {row.crew_log_line}]" if not pd.isna(row.crew_log_line) else ""
            print(f"  {row.site}: {row.finding} {span}{mins}{line}")
        if args.comparison_out:
            write_csv_atomic(args.comparison_out, _iso_frame(cmp_))
    print("\n" + RECORD_NOTE)
    _print_cautions(CAUTIONS[:1])
    return 0

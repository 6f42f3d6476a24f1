"""``debrief outages``: match an outage log to strokes and give each outage a verdict.

Writes one CSV row per (outage, candidate stroke), best candidate first; an outage without
candidates gets one row with empty stroke fields. Prints a verdict line per outage (or, with
``--json``, a JSON array of one object per outage) and the cautions.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

from ..config import with_overrides
from ..errors import InputError
from ..io.atomic import write_csv_atomic, write_text_atomic
from ..timeutil import format_times, iso_utc
from .common import add_stroke_options, analysis_from_args, config_from_args


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "outages", help="match outages to strokes: direct strike, induced flashover or not lightning",
        description="For each outage in the log, find ground strokes within the clock tolerance and "
                    "the search distance of the line (or fault location), compute the probability of a "
                    "direct strike and of an induced flashover under the network's location error, and "
                    "give a verdict with reasons.",
        epilog="Methods: electrogeometric model and Rusck's induced voltage with the 1.5 CFO rule, as "
               "IEEE Std 1410 gives them. Shield wires are not modelled. The result supports, and does "
               "not replace, an engineering determination by qualified staff.")
    add_stroke_options(p)
    p.add_argument("--outages", metavar="OUTAGES_CSV", help="outage log (default: the event's outages.csv)")
    p.add_argument("--lines", metavar="LINES_GEOJSON", help="power lines (default: the event's lines.geojson)")
    p.add_argument("--out", required=True, metavar="MATCHES_CSV", help="table of outages and candidate strokes to write")
    p.add_argument("--json", action="store_true", help="print a JSON array, one object per outage, instead of text")
    p.add_argument("--geojson", metavar="FILE", help="also write corridors and candidate strokes as GeoJSON")
    p.add_argument("--clock-tolerance-s", type=float, metavar="S", help="clock tolerance (default [lines] clock_tolerance_s, 10)")
    p.add_argument("--search-km", type=float, metavar="KM", help="search distance about a line (default [lines] search_km, 2)")
    p.add_argument("--start", metavar="ISO", help="analysis window start (default: event.toml start, else the data)")
    p.add_argument("--end", metavar="ISO", help="analysis window end (default: event.toml end, else the data)")
    p.set_defaults(func=run)


def _input_path(given, cfg, key, option):
    if given:
        return Path(given)
    if cfg.event_dir is not None:
        return cfg.path(key)
    raise InputError(f"{option} is required (or give --event with an event folder that has one)")


def run(args) -> int:
    from ..io.lines import read_lines, read_outages
    from ..outages import matches_table, to_geojson, verdict_records

    cfg = config_from_args(args)
    for key, opt in (("clock_tolerance_s", "--clock-tolerance-s"), ("search_km", "--search-km")):
        try:
            cfg = with_overrides(cfg, {f"lines.{key}": getattr(args, key)})
        except InputError as e:
            raise InputError(str(e).replace(f"option for 'lines.{key}'", opt)) from None
    lines_path = _input_path(args.lines, cfg, "lines", "--lines")
    outages_path = _input_path(args.outages, cfg, "outages", "--outages")
    out = Path(args.out)
    for o in [out] + ([Path(args.geojson)] if args.geojson else []):
        if not (o.parent if str(o.parent) else Path(".")).is_dir():
            raise InputError(f"output folder does not exist: {o.parent}")
    lines, problems = read_lines(lines_path, config=cfg)
    outages, o_problems = read_outages(outages_path, tz=cfg.time_zone, line_ids=lines["line_id"], time_format=cfg.get("typed_time_format"))
    problems = problems + o_problems
    rejected = [p for p in problems if p.severity == "rejected"]
    if args.strict and rejected:
        raise InputError(f"--strict: {rejected[0].text()}" + (f" (and {len(rejected) - 1} more)" if len(rejected) > 1 else ""))
    an = analysis_from_args(args, cfg)
    result = an.outages(outages, lines)
    write_csv_atomic(out, matches_table(result))
    if args.geojson:
        write_text_atomic(args.geojson, json.dumps(to_geojson(result, lines, cfg)) + "\n")
    if rejected:
        print(f"debrief: {len(rejected)} line/outage problem(s); first: {rejected[0].text()}", file=sys.stderr)
    if args.json:
        print(json.dumps(verdict_records(result), indent=1, ensure_ascii=False))
        return 0
    tz = cfg.time_zone
    print(f"{len(result.verdicts)} outage(s), {len(lines)} line(s), {len(an.event.strokes)} stroke(s); written {out}")
    print(f"Window: {iso_utc(an.start)} to {iso_utc(an.end)} (outages by trip time); {an.coverage.describe()}")
    for _, v in result.verdicts.iterrows():
        when = format_times(v["time"], tz) if v["time"] == v["time"] else "time unknown"
        flag = "  [changes with ±30% peak current]" if v["current_sensitive"] else ""
        cov = f"  [coverage {v['coverage']}]" if v["coverage"] not in ("inside", "not_checked") else ""
        print(f"{v['outage_id']}  {v['line_id']}  {when}\n  {v['verdict']}{flag}{cov}\n  {v['reasons']}")
    if problems:
        print("Input problems:")
        for p in problems:
            print(f"  {p.severity}: {p.text()}")
    exposure = an.exposure(lines)
    print("Lines: ground strokes whose reported position fell in the flashover corridor (direct-strike zone or "
          "induced-flashover band at the stroke's current) during the event")
    for _, e in exposure.iterrows():
        ctx = ""
        if e["direct_strikes_per_100km_yr"] == e["direct_strikes_per_100km_yr"]:
            ctx = (f"; long-term expectation {e['expected_direct_strikes_per_yr']:.2f} direct strikes/yr "
                   f"(Eriksson 1987, Ng from {e['ground_flash_density_source'] or 'unstated source'})")
        print(f"  {e['line_id']} {e['name']} ({e['length_km']:.1f} km): {e['strokes_in_corridor']} in corridor, "
              f"max probability {e['max_p_within_corridor']:.2f}, {e['strokes_within_search']} within "
              f"{cfg['lines']['search_km']:g} km{ctx}")
    for n in result.notes:
        print(f"Note: {n}")
    print("Cautions:")
    for c in result.cautions:
        print(f"  - {c}")
    return 0

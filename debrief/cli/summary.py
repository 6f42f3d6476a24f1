"""``debrief summary EVENT_DIR``: the text debrief of an event's strokes and flashes.

Everything printed comes from the core functions (``debrief.polarity``,
``debrief.continuing_current``) on the event loaded by :func:`debrief.event.load_event`, so the
numbers are the report's and the widgets' numbers.
"""

from __future__ import annotations

import json
import sys


from ..summary import GENERAL_CAUTIONS, summarise  # noqa: F401 (GENERAL_CAUTIONS: part of this module's API)
from ..timeutil import parse_user_time
from .common import add_typed_time_option, typed_time_override


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "summary", help="the text debrief of an event: counts, polarity, multiplicity, currents, flags",
        description="Summarise an event folder: data ledger, stroke and flash counts, positive "
                    "share, multiplicity, interstroke intervals, peak-current medians and their "
                    "distance from the IEEE reference, and continuing-current suspects.",
        epilog="Times typed without an offset are read in --tz or the event's time_zone.")
    p.add_argument("event_dir", metavar="EVENT_DIR", help="event folder (event.toml, strokes.csv)")
    p.add_argument("--start", metavar="ISO", help="window start (default: event.toml start or first stroke)")
    p.add_argument("--end", metavar="ISO", help="window end (default: event.toml end or last stroke)")
    p.add_argument("--tz", metavar="ZONE", help="IANA zone for display and for typed times without offset")
    add_typed_time_option(p)
    p.add_argument("--top", type=int, default=10, metavar="N", help="list at most N continuing-current suspects (default 10)")
    p.add_argument("--json", action="store_true", help="print the numbers as JSON instead of text")
    p.add_argument("--strict", action="store_true", help="any rejected stroke row is fatal")
    p.set_defaults(func=run)


def _num(v, fmt="{:.1f}", none="n/a"):
    return none if v is None else fmt.format(v)


def _pct(v):
    return "n/a" if v is None else f"{100.0 * v:.1f}%"


def _coverage_line(cov) -> str:
    if not cov:
        return "Coverage: not stated"
    src = {"declared": "declared in event.toml", "data_extent": "taken from the data's own extent"}
    return (f"Coverage: {cov['coverage_start']} to {cov['coverage_end']} ({src[cov['coverage_time_source']]}); "
            f"area {cov['coverage_area']} ({src[cov['coverage_area_source']]})")


def render_text(s: dict) -> str:
    """The summary dict as plain text (what ``debrief summary`` prints)."""
    c = s["counts"]
    p = s["polarity"]
    lines = [
        s["event"],
        f"Window (first-stroke times): {s['window']['start_text']} to {s['window']['end_text']}",
        f"Data: {s['ledger_line']}",
        _coverage_line(s.get("coverage")),
        "",
        f"Strokes: {c['strokes']:,} ({c['ground_strokes']:,} ground strokes, {c['cloud_pulses']:,} cloud pulses)",
        f"Flashes: {c['flashes']:,} ({c['ground_flashes']:,} ground, {c['cloud_flashes']:,} cloud)"
        + ("; no flash starts in this window" if c["flashes"] == 0 else ""),
        f"Positive share of ground flashes: {_pct(p['share'])} ({p['positive']:,} positive, {p['negative']:,} negative; "
        f"{p['likely_ic_left_out']:,} likely cloud pulses left out)",
        "",
        "Multiplicity (ground flashes, strokes per flash):",
        f"  {'strokes':>7}  {'negative':>15}  {'positive':>15}  {'all':>15}",
    ]
    for r in s["multiplicity"]["table"]:
        cells = [f"{r[f'{k}_count']:>6,} ({r[f'{k}_percent']:5.1f}%)" for k in ("negative", "positive", "all")]
        lines.append(f"  {r['multiplicity']:>7}  " + "  ".join(f"{x:>15}" for x in cells))
    for r in s["multiplicity"]["mean"]:
        lines.append(f"  {r['polarity']}: mean multiplicity {_num(r['mean_multiplicity'], '{:.2f}')}, "
                     f"single-stroke {_pct(r['single_stroke_share'])} of {r['flashes']:,} flashes")
    lines += ["", "Interstroke intervals (ground flashes):"]
    for r in s["interstroke"]:
        lines.append(f"  {r['polarity']}: {r['intervals']:,} intervals in {r['flashes']:,} flashes, "
                     f"geometric mean {_num(r['geometric_mean_ms'])} ms, median {_num(r['median_ms'])} ms"
                     + (f" ({r['zero_intervals']:,} zero intervals left out of the geometric mean)"
                        if r["zero_intervals"] else ""))
    lines += ["", "Peak current |Ip| medians (ground strokes):"]
    for r in s["medians"]:
        lines.append(f"  {r['polarity']}: first {_num(r['first_median_ka'])} kA ({r['first_count']:,} strokes), "
                     f"subsequent {_num(r['subsequent_median_ka'])} kA ({r['subsequent_count']:,} strokes)")
    lines += ["", "Negative strokes beside the IEEE Std 1410 distributions (Kolmogorov-Smirnov distance, not a p-value):"]
    for r in s["reference"]:
        lines.append(f"  {r['kind']}: {r['strokes']:,} strokes at or above {r['floor_ka']:g} kA "
                     f"({r['below_floor']:,} below left out), median {_num(r['median_ka'])} kA vs reference "
                     f"{_num(r['reference_median_ka'])} kA, KS distance {_num(r['ks_distance'], '{:.3f}')} "
                     f"at {_num(r['at_ka'])} kA")
    k = s["continuing_current"]
    rules = k["rules"]
    lines += ["", f"Continuing-current suspects: {k['suspects']:,} flashes "
                  f"(rules: positive ground flash with a positive stroke >= {rules['positive_min_ka']:g} kA, "
                  f"one stroke or more; gap >= {rules['min_interval_ms']:g} ms "
                  f"after a negative stroke below {rules['negative_max_abs_ka']:g} kA, same contact)"]
    for code, n in k["by_reason"].items():
        lines.append(f"  {code}: {n:,} - {k['reasons'][code]['explanation']} ({k['reasons'][code]['source']})")
    if k["top"]:
        lines.append(f"  Largest {len(k['top'])} by peak current:")
        for r in k["top"]:
            gap = (f", gap {r['longest_gap_ms']:.1f} ms after a {r['gap_after_ka']:.1f} kA stroke"
                   if r["longest_gap_ms"] is not None else "")
            lines.append(f"    flash {r['flash_id']}  {r['time_text']}  {r['polarity']}  {r['multiplicity']} stroke(s)  "
                         f"max |Ip| {r['max_abs_peak_ka']:.1f} kA{gap}  [{r['cc_reasons']}]")
    n = s["network"]
    de = ("not given in event.toml" if n["flash_detection_efficiency"] is None else
          f"{_pct(n['flash_detection_efficiency'])} ({n['flash_detection_efficiency_source'] or 'source not given'})")
    lines += ["", f"Network: flash detection efficiency {de}; median error-ellipse semi-major axis "
                  f"{_num(n['median_semi_major_km'], '{:.2f}')} km at {_pct(n['ellipse_confidence'])} confidence",
              "", "Cautions:"]
    lines += [f"  - {t}" for t in s["cautions"]]
    return "\n".join(lines) + "\n"


def run(args) -> int:
    from ..analysis import analyse
    from ..config import load_event_config, with_overrides
    from ..event import load_event

    overrides = {"time_zone": args.tz, **typed_time_override(args)}
    cfg = with_overrides(load_event_config(args.event_dir), overrides)
    # Typed times first: a mistake there is one line, before the stroke file is read.
    tz, fmt = cfg.time_zone, cfg.get("typed_time_format")
    start = parse_user_time(args.start, tz, what="--start", time_format=fmt) if args.start else None
    end = parse_user_time(args.end, tz, what="--end", time_format=fmt) if args.end else None
    event = load_event(args.event_dir, config=cfg, strict=args.strict)
    if event.ledger.rows_rejected or event.ledger.duplicates_dropped or event.ledger.zero_ellipse:
        print(f"debrief: {event.ledger.one_line()}", file=sys.stderr)
    s = summarise(analyse(event, start, end), top=args.top)
    if args.json:
        print(json.dumps(s, indent=2))
    else:
        print(render_text(s), end="")
    return 0

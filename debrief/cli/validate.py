"""``debrief validate STROKES``: read a stroke file and print its data ledger.

Exit 0 when the file was read (rejected rows are counted in the ledger and one line goes to
stderr), 2 on fatal input or, with ``--strict``, on any rejected row.
"""

from __future__ import annotations

import json

from ..timeutil import format_times, iso_utc
from .common import add_stroke_options, config_from_args, load_strokes

CAUTION = (
    "This ledger covers only what the file holds: strokes the network did not detect are not in it, "
    "and every position carries the network's location error."
)


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "validate",
        help="read a stroke file and print its data ledger",
        description="Read a stroke file (CSV or Parquet) as the other commands do and print what "
        "was accepted, rejected (by reason, with line numbers) and assumed.",
    )
    add_stroke_options(p)
    p.add_argument("--json", action="store_true", help="print the ledger as JSON")
    p.set_defaults(func=run)


def summary(strokes, ledger) -> dict:
    """The ledger as a dict plus the accepted strokes' time range and CG/IC counts."""
    out = ledger.to_dict()
    counts = strokes["type"].value_counts()
    out["time_range"] = {"first": iso_utc(strokes["time"].iloc[0]), "last": iso_utc(strokes["time"].iloc[-1])}
    out["type_counts"] = {"CG": int(counts.get("CG", 0)), "IC": int(counts.get("IC", 0))}
    return out


def run(args) -> int:
    cfg = config_from_args(args)
    strokes, ledger = load_strokes(args.strokes, cfg, strict=args.strict)
    info = summary(strokes, ledger)
    if args.json:
        print(json.dumps(info, indent=2))
        return 0
    tz = cfg.time_zone
    print(ledger.to_text())
    print(f"First stroke: {format_times(strokes['time'].iloc[0], tz)}")
    print(f"Last stroke:  {format_times(strokes['time'].iloc[-1], tz)}")
    print(f"Ground strokes (CG): {info['type_counts']['CG']:,}; cloud pulses (IC): {info['type_counts']['IC']:,}")
    print(CAUTION)
    return 0

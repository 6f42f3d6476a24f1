"""``debrief report`` and ``debrief demo``: the incident report as one self-contained HTML file."""

from __future__ import annotations

import sys
from pathlib import Path

from ..errors import InputError


def _progress(stage: str, message: str) -> None:
    print(f"debrief: [{stage}] {message}", file=sys.stderr, flush=True)


def register(subparsers) -> None:
    p = subparsers.add_parser("report", help="render an event folder's incident report (one HTML file)",
                              description="Render the incident report of an event folder to one self-contained "
                                          "HTML file that opens offline and prints cleanly.")
    p.add_argument("event_dir", metavar="EVENT_DIR", help="event folder (event.toml, strokes, optional sites/lines/outages)")
    p.add_argument("--out", required=True, metavar="REPORT.html", help="HTML file to write")
    p.add_argument("--show-code", action="store_true", help="keep the notebook's code in the report")
    p.add_argument("--sites", metavar="SITES.csv", help="sites file instead of the event's")
    p.add_argument("--start", metavar="ISO", help="window start (ISO 8601; without offset read in the event's zone)")
    p.add_argument("--end", metavar="ISO", help="window end (ISO 8601)")
    p.add_argument("--tz", metavar="ZONE", help="IANA display zone, also for typed times without offset")
    p.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    p.set_defaults(func=run_report)

    d = subparsers.add_parser("demo", help="render the invented example event's report",
                              description="Render the report of the invented example event (example_event/) "
                                          "to DIR/report.html and print its path.")
    d.add_argument("--out", default="debrief-demo", metavar="DIR", help="output folder (default ./debrief-demo/)")
    d.add_argument("--show-code", action="store_true", help="keep the notebook's code in the report")
    d.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    d.set_defaults(func=run_demo)


def run_report(args) -> int:
    from ..report import render_report

    out = render_report(args.event_dir, args.out, sites=args.sites, start=args.start, end=args.end,
                        show_code=args.show_code, tz=args.tz, progress=None if args.quiet else _progress)
    print(out)
    return 0


def example_event_dir() -> Path:
    """The invented example event shipped beside the package (the repository's example_event/)."""
    import debrief

    return Path(debrief.__file__).resolve().parents[1] / "example_event"


def run_demo(args) -> int:
    from ..report import render_report

    event = example_event_dir()
    if not (event / "event.toml").is_file():
        raise InputError(f"the example event is missing: {event} has no event.toml "
                         "(write it with: python -m debrief.synth example_event)")
    out_dir = Path(args.out)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(f"cannot create output folder {out_dir}: {e.strerror}") from None
    out = render_report(event, out_dir / "report.html", show_code=args.show_code,
                        progress=None if args.quiet else _progress)
    print(out.resolve())
    return 0

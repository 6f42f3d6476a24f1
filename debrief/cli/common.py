"""Options and steps shared by every subcommand: event settings, stroke input, time windows."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..config import EventConfig, load_event_config, with_overrides
from ..errors import InputError
from ..timeutil import check_time_format, parse_user_time


def parse_columns(text: str | None) -> dict[str, str] | None:
    """``"time=UTC,latitude=Lat"`` -> ``{"time": "UTC", "latitude": "Lat"}``."""
    if not text:
        return None
    out = {}
    for part in text.split(","):
        canon, sep, header = part.partition("=")
        if not sep or not canon.strip() or not header.strip():
            raise InputError(f"--columns: expected NAME=HEADER pairs separated by commas, got {part!r}")
        out[canon.strip()] = header.strip()
    return out


def add_event_options(p: argparse.ArgumentParser) -> None:
    """``--event``, ``--tz`` and ``--typed-time-format``: every command takes them."""
    p.add_argument("--event", metavar="EVENT_DIR", help="event folder whose event.toml supplies settings")
    p.add_argument("--tz", metavar="ZONE", help="IANA time zone for typed times without offset and for display")
    add_typed_time_option(p)


def add_typed_time_option(p: argparse.ArgumentParser) -> None:
    """``--typed-time-format``: the strptime pattern of typed times that are not ISO 8601."""
    p.add_argument("--typed-time-format", metavar="FORMAT",
                   help="strptime pattern of typed times that are not ISO 8601 (sites, crew log, outage log, "
                        "--start/--end), e.g. '%%d/%%m/%%Y %%H:%%M' (default: ISO 8601 only)")


def typed_time_override(args) -> dict:
    """``{"typed_time_format": ...}`` from ``--typed-time-format`` (empty when not given), checked
    here so that a bad pattern names the option."""
    fmt = getattr(args, "typed_time_format", None)
    if fmt is None:
        return {}
    return {"typed_time_format": check_time_format(fmt, what="--typed-time-format")}


def add_stroke_options(p: argparse.ArgumentParser, *, positional: bool = True) -> None:
    """The stroke file and the reader options of DESIGN.md."""
    if positional:
        p.add_argument("strokes", metavar="STROKES", help="stroke file (.csv or .parquet)")
    add_event_options(p)
    p.add_argument("--columns", metavar="MAP", help="explicit column map, e.g. time=UTC,latitude=Lat")
    p.add_argument("--current-unit", choices=("kA", "A"),
                   help="unit of the peak current column; needed when its header states none (such as "
                        "'current' or 'ip') and a value exceeds 1000 in magnitude")
    p.add_argument("--ellipse-confidence", type=float, metavar="P", help="confidence level of the ellipses (default 0.5)")
    p.add_argument("--default-uncertainty-km", type=float, metavar="KM",
                   help="circular semi-axis (at the ellipse confidence) for strokes without an ellipse")
    p.add_argument("--strict", action="store_true", help="any rejected row is fatal")


def config_from_args(args) -> EventConfig:
    """event.toml of ``--event`` (or all defaults), with command-line options applied on top."""
    cfg = load_event_config(getattr(args, "event", None))
    overrides = {
        "time_zone": getattr(args, "tz", None),
        "current_unit": getattr(args, "current_unit", None),
        "ellipse_confidence": getattr(args, "ellipse_confidence", None),
        "default_uncertainty_km": getattr(args, "default_uncertainty_km", None),
        **typed_time_override(args),
    }
    cols = parse_columns(getattr(args, "columns", None))
    if cols:
        merged = dict(cfg.get("columns"))
        merged.update(cols)
        overrides["columns"] = merged
    return with_overrides(cfg, overrides)


def load_strokes(path, cfg: EventConfig, *, strict: bool = False):
    """Read a stroke file with the event's reader options; report rejected rows on stderr.

    Returns
    -------
    (strokes, ledger) as :func:`debrief.io.strokes.read_strokes` gives them.
    """
    from ..io.strokes import read_strokes

    strokes, ledger = read_strokes(Path(path), config=cfg, strict=strict)
    if ledger.rows_rejected or ledger.duplicates_dropped or ledger.zero_ellipse:
        print(f"debrief: {ledger.one_line()}", file=sys.stderr)
    return strokes, ledger


def window_from_args(args, cfg: EventConfig):
    """(start, end) as UTC Timestamps from ``--start/--end`` or event.toml; None where unset."""
    tz = cfg.time_zone
    start_text = getattr(args, "start", None) or cfg.get("start")
    end_text = getattr(args, "end", None) or cfg.get("end")
    fmt = cfg.get("typed_time_format")
    start = parse_user_time(start_text, tz, what="start", time_format=fmt) if start_text else None
    end = parse_user_time(end_text, tz, what="end", time_format=fmt) if end_text else None
    if start is not None and end is not None and end <= start:
        def said(text, given, opt):
            src = f"{opt}" if given else f"event.toml {opt.lstrip('-')}"
            return f"{src} {text!r} ({end.strftime('%Y-%m-%dT%H:%M:%SZ') if opt == '--end' else start.strftime('%Y-%m-%dT%H:%M:%SZ')})"
        fix = "" if getattr(args, "end", None) else "; give --end as well"
        raise InputError(f"the window's end, {said(end_text, getattr(args, 'end', None), '--end')}, is not after its "
                         f"start, {said(start_text, getattr(args, 'start', None), '--start')}{fix}")
    return start, end


def analysis_from_args(args, cfg: EventConfig, *, window=None, include_likely_ic=False, detection_efficiency=None,
                       de_source=None):
    """Read the STROKES file with the event's settings and return the one analysis of its window.

    The window is ``--start/--end`` (or event.toml's ``start``/``end``) unless `window` is given
    (``(None, None)`` for the event's own window). Rejected rows are counted on stderr.
    """
    from ..analysis import analyse
    from ..event import load_event

    src = Path(args.strokes)
    if not src.is_file():
        raise InputError(f"stroke file not found: {src}")
    event = load_event(None, config=cfg, strokes_path=src, strict=getattr(args, "strict", False), optional=False)
    if event.ledger.rows_rejected or event.ledger.duplicates_dropped or event.ledger.zero_ellipse:
        print(f"debrief: {event.ledger.one_line()}", file=sys.stderr)
    start, end = window if window is not None else window_from_args(args, cfg)
    return analyse(event, start, end, include_likely_ic=include_likely_ic,
                   detection_efficiency=detection_efficiency, de_source=de_source)

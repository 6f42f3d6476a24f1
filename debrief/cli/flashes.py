"""``debrief flashes``: group a stroke file into flashes and write the flash table.

The whole file is grouped first; ``--start/--end`` (or event.toml's window) then keep the
flashes whose first stroke falls in the window, with all their strokes.
"""

from __future__ import annotations

import argparse
import csv
import io
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pcsv

from ..config import with_overrides
from ..errors import InputError
from ..io.atomic import atomic_path
from ..timeutil import iso_utc, iso_utc_many
from .common import add_stroke_options, config_from_args, load_strokes, window_from_args


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "flashes", help="group strokes into flashes and write the flash table",
        description="Group ground strokes (and, apart, cloud pulses) into flashes with the "
                    "[grouping] criteria of event.toml, and write one row per flash.",
        epilog="The criteria are the usual ones for network data (Cummins et al. 1998: 500 ms, "
               "1 s, 10 km, 15 strokes). Missed strokes and location error split or merge some "
               "flashes, so multiplicities from a network run below those seen on video.")
    add_stroke_options(p)
    p.add_argument("--out", required=True, metavar="FLASHES", help="flash table to write (.csv or .parquet)")
    p.add_argument("--strokes-out", metavar="STROKES_OUT",
                   help="also write the strokes with flash_id, stroke_order, ground_contact, likely_ic")
    p.add_argument("--start", metavar="ISO", help="keep flashes whose first stroke is at or after this time")
    p.add_argument("--end", metavar="ISO", help="keep flashes whose first stroke is at or before this time")
    g = p.add_argument_group("grouping criteria (override event.toml [grouping])")
    g.add_argument("--max-interval-ms", type=float, metavar="MS", help="max time from the previous stroke (default 500)")
    g.add_argument("--max-duration-ms", type=float, metavar="MS", help="max time from the first stroke (default 1000)")
    g.add_argument("--max-distance-km", type=float, metavar="KM", help="max distance from the first stroke (default 10)")
    g.add_argument("--max-strokes", type=int, metavar="N", help="max strokes in one flash (default 15)")
    g.add_argument("--same-polarity", action=argparse.BooleanOptionalAction, default=None,
                   help="only strokes of the first stroke's polarity join a flash (default off)")
    p.set_defaults(func=run)


def run(args) -> int:
    cfg = config_from_args(args)
    for key in ("max_interval_ms", "max_duration_ms", "max_distance_km", "max_strokes", "same_polarity"):
        try:
            cfg = with_overrides(cfg, {f"grouping.{key}": getattr(args, key)})
        except InputError as e:  # name the option the user typed, not the setting
            raise InputError(str(e).replace(f"option for 'grouping.{key}'", "--" + key.replace("_", "-"))) from None
    start, end = window_from_args(args, cfg)
    src = Path(args.strokes)
    outputs = [Path(args.out)] + ([Path(args.strokes_out)] if args.strokes_out else [])
    for out in outputs:  # fail before the work, not after it
        _check_output(out, src)
    if len(outputs) == 2 and outputs[0].resolve() == outputs[1].resolve():
        raise InputError("--out and --strokes-out name the same file")
    if not src.is_file():
        raise InputError(f"stroke file not found: {src}")

    # imported here so that numba loads only when this command runs
    from ..continuing_current import flag_continuing_current
    from ..flashes import group_flashes, select_window

    strokes, _ledger = load_strokes(src, cfg, strict=args.strict)
    grouped, flashes = group_flashes(strokes, cfg)
    flashes = flag_continuing_current(grouped, flashes, cfg)
    if start is not None or end is not None:
        grouped, flashes = select_window(grouped, flashes, start, end)

    write_table(outputs[0], flashes)
    if args.strokes_out:
        write_table(outputs[1], grouped)
    extra = f" (strokes -> {outputs[1]})" if args.strokes_out else ""
    if start is not None or end is not None:
        span = f"{iso_utc(start) if start is not None else '...'} to {iso_utc(end) if end is not None else '...'}"
        extra += f", first stroke {span}"
    print(f"{len(flashes):,} flashes from {len(grouped):,} strokes -> {outputs[0]}{extra}")
    return 0


def _check_output(out: Path, src: Path) -> None:
    if out.suffix.lower() not in (".csv", ".parquet"):
        raise InputError(f"output {out}: use a .csv or .parquet file name")
    folder = out.parent if str(out.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(f"output folder does not exist: {folder}")
    if out.exists() and src.exists() and out.resolve() == src.resolve():
        raise InputError(f"output {out} is the input stroke file; choose another name")


def write_table(path: Path, frame: pd.DataFrame) -> None:
    """Write `frame` atomically: CSV with ISO 8601 UTC ``Z`` times, or Parquet as typed.

    CSV goes through Arrow's writer, several times faster than ``DataFrame.to_csv`` at a million
    rows (booleans as ``true``/``false``, numbers in their shortest form, blanks for missing
    values; text is quoted only if some value needs it). A table Arrow cannot take falls back to
    pandas.
    """
    with atomic_path(path) as tmp:
        if path.suffix.lower() == ".parquet":
            frame.to_parquet(tmp, index=False)
            return
        text = frame.copy(deep=False)
        for col in text.columns:
            if isinstance(text[col].dtype, pd.DatetimeTZDtype) or pd.api.types.is_datetime64_dtype(text[col].dtype):
                text[col] = iso_utc_many(text[col])
        try:
            table = pa.Table.from_pandas(text, preserve_index=False)
        except (pa.ArrowException, TypeError, ValueError):
            text.to_csv(tmp, index=False)
            return
        quote = "needed" if any(_needs_quotes(c) for c in table.columns) else "none"
        header = io.StringIO()
        csv.writer(header, lineterminator="\n").writerow([str(c) for c in text.columns])
        with open(tmp, "wb") as fh:
            fh.write(header.getvalue().encode("utf-8"))
            if len(text):
                pcsv.write_csv(table, fh, write_options=pcsv.WriteOptions(include_header=False, quoting_style=quote))


def _needs_quotes(column) -> bool:
    """Whether some text value of an Arrow column holds a comma, quote or line break."""
    t = column.type
    if pa.types.is_dictionary(t):
        column, t = pa.chunked_array([c.dictionary for c in column.chunks], type=t.value_type), t.value_type
    if not (pa.types.is_string(t) or pa.types.is_large_string(t)):
        return False
    return bool(pc.any(pc.match_substring_regex(column, r'[",\r\n]')).as_py())




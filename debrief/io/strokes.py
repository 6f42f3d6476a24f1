"""Stroke files (CSV or Parquet) -> the canonical stroke table and its ledger.

The file is read in chunks (Arrow's streaming CSV reader with every cell as text, or Parquet
row batches): every chunk is converted to typed canonical columns at once (vectorised, no loop
per row) and only those columns and the extra input columns are kept, so a 10-million-row file
never exists as several full copies in memory. Rows that cannot be used are
rejected with a reason code (:data:`REASONS`) and counted in the :class:`~debrief.io.ledger.Ledger`
with their line numbers; exact duplicates are dropped once, over the whole file.

Header names are matched through one table (:data:`SYNONYMS`); anything else is mapped
explicitly (``columns`` in event.toml, ``--columns`` on the command line). How a network writes
its export (type codes, unsigned current with a polarity column, full ellipse axes, bearings from
east, epoch seconds, current in A) is stated by reader options, never guessed. A current
column whose header states no unit (``current``, ``ip``) is read as kA only when no value could
be amperes (every |value| <= 1000, noted in the ledger); otherwise the unit must be stated.
"""

from __future__ import annotations

import csv
import difflib
import gzip
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import InputError
from .ledger import Ledger

#: The stroke table's columns, in output order (``source_row`` is added by the reader).
CANONICAL = (
    "time", "latitude", "longitude", "peak_current_ka", "type",
    "semi_major_km", "semi_minor_km", "major_bearing_deg",
)
REQUIRED = ("time", "latitude", "longitude", "peak_current_ka")
ELLIPSE = ("semi_major_km", "semi_minor_km", "major_bearing_deg")
TYPE_DTYPE = pd.CategoricalDtype(["CG", "IC"])

#: Plain-English header spellings, compared after lower-casing and turning every run of
#: non-alphanumeric characters into "_" (so "Peak Current (kA)" reads as ``peak_current_ka``).
SYNONYMS: dict[str, tuple[str, ...]] = {
    "time": ("time", "datetime", "date_time", "timestamp", "time_utc", "datetime_utc", "timestamp_utc"),
    "latitude": ("latitude", "lat", "lat_deg", "latitude_deg"),
    "longitude": ("longitude", "lon", "lng", "long", "lon_deg", "longitude_deg"),
    "peak_current_ka": ("peak_current_ka", "peak_current", "current", "current_ka", "ip", "ip_ka",
                        "peak_current_a", "current_a", "ip_a"),
    "type": ("type", "stroke_type", "cg_ic"),
    "semi_major_km": ("semi_major_km", "semi_major", "semimajor", "semimajor_km", "semi_major_axis", "semi_major_axis_km"),
    "semi_minor_km": ("semi_minor_km", "semi_minor", "semiminor", "semiminor_km", "semi_minor_axis", "semi_minor_axis_km"),
    "major_bearing_deg": ("major_bearing_deg", "major_bearing", "bearing", "bearing_deg", "ellipse_bearing", "major_axis_bearing"),
}

#: Reason codes for rejected rows, in order of precedence (a row gets the first that applies).
REASONS: dict[str, str] = {
    "bad_field_count": "the line has more or fewer cells than the header",
    "bad_time": "time missing or not readable as ISO 8601 or epoch seconds (or outside 1678-2261)",
    "missing_number": "latitude, longitude or peak current is blank",
    "bad_number": "a number cell holds text that is not a finite number",
    "bad_latitude": "latitude outside -90..90 degrees",
    "bad_longitude": "longitude outside -180..180 degrees",
    "zero_current": "peak current is zero (its sign is the polarity)",
    "bad_polarity": "polarity cell is not one of +/-, pos/neg, positive/negative, P/N, 1/-1",
    "polarity_conflict": "peak current is negative but the polarity column says positive",
    "unknown_type": "type is blank or not a known code (CG, IC or a code in type_codes)",
    "negative_axis": "an ellipse axis is negative",
    "minor_exceeds_major": "ellipse minor axis is larger than the major axis",
}
_CODE = {name: i + 1 for i, name in enumerate(REASONS)}  # 0 = accepted
_NAME = {i + 1: name for i, name in enumerate(REASONS)}

#: Cell texts read as blank (besides the empty cell).
MISSING_MARKERS = ("nan", "na", "n/a", "null", "none")

_POLARITY = {
    "+": 1, "-": -1, "pos": 1, "neg": -1, "positive": 1, "negative": -1, "p": 1, "n": -1,
    "1": 1, "-1": -1, "+1": 1, "1.0": 1, "-1.0": -1, "+1.0": 1,
}
_EPOCH_RE = r"^[+-]?\d+(?:\.\d*)?$"
# An offset after a time of day: Z, +02, +0200, +02:00 (a date-only "2026-07-14" has none).
_OFFSET_RE = r"[T ]\d\d(?::?\d\d){0,2}(?:[.,]\d+)?\s*(?:[Zz]|[+-]\d\d(?::?\d\d)?)$"
_NS_MIN = pd.Timestamp.min.tz_localize("UTC")
_NS_MAX = pd.Timestamp.max.tz_localize("UTC")
_EXTENSIONS = {".csv": "csv", ".txt": "csv", ".tsv": "csv", ".parquet": "parquet", ".pq": "parquet"}


def normalise_header(name) -> str:
    """``"Peak Current (kA)"`` -> ``"peak_current_ka"``: the form synonyms are compared in."""
    return re.sub(r"[^0-9a-z]+", "_", str(name).strip().lower()).strip("_")


_UNIT_WORDS = {"ka": "kA", "kiloamperes": "kA", "kiloampere": "kA", "a": "A", "amp": "A", "amps": "A",
               "ampere": "A", "amperes": "A"}

#: Largest |peak current| read as kA from a column whose header states no unit (our own setting:
#: recorded stroke peak currents stay within a few hundred kA, common practice, while a stroke
#: current written in amperes exceeds 1000 A; beyond this limit the unit must be stated).
UNITLESS_KA_LIMIT = 1000.0


def header_current_unit(header) -> str | None:
    """The unit a current column's header states: ``"kA"`` (``peak_current_ka``, "Peak Current
    (kA)", ``kA``), ``"A"`` (``current_a``, "Peak current (A)") or None (``current``, ``ip``)."""
    words = normalise_header(header).split("_")
    return _UNIT_WORDS.get(words[-1]) if words else None


_SYNONYM_OF = {s: canon for canon, names in SYNONYMS.items() for s in names}


# ------------------------------------------------------------------------------------------
# options and column plan


def _options(config, columns) -> dict:
    if config is None:
        from ..config import load_event_config

        config = load_event_config(None)
    colmap = dict(config.get("columns") or {})
    colmap.update(columns or {})
    codes = {}
    for code, kind in (config.get("type_codes") or {}).items():
        k = str(kind).strip().upper()
        if k not in ("CG", "IC"):
            raise InputError(f"type_codes: {code!r} maps to {kind!r}; every code must map to 'CG' or 'IC'")
        codes[str(code).strip().upper()] = k
    return {
        "columns": colmap,
        "type_codes": codes,
        "polarity_column": config.get("polarity_column"),
        "current_unit": config.get("current_unit"),
        "current_unit_given": config.is_given("", "current_unit"),
        "ellipse_axes": config.get("ellipse_axes"),
        "bearing_convention": config.get("bearing_convention"),
        "time_format": config.get("time_format"),
        "ellipse_confidence": config.get("ellipse_confidence"),
    }


def _find_header(headers: list[str], wanted: str) -> str | None:
    """The header equal to `wanted`, else the only one equal ignoring case and spaces."""
    if wanted in headers:
        return wanted
    close = [h for h in headers if str(h).strip().lower() == wanted.strip().lower()]
    return close[0] if len(close) == 1 else None


def _found(headers) -> str:
    shown = ", ".join(repr(str(h)) for h in headers[:30])
    return shown + (", ..." if len(headers) > 30 else "") if headers else "none"


def plan_columns(headers: list[str], columns: dict | None = None, polarity_column: str | None = None):
    """Decide which file header supplies each canonical column.

    Parameters
    ----------
    headers : list of str
        The file's headers, in file order.
    columns : dict, optional
        Explicit map, canonical name -> header; wins over synonyms.
    polarity_column : str, optional
        Header of a separate polarity column (must exist when given).

    Returns
    -------
    mapping : dict
        canonical name -> header, for the columns found.
    how : dict
        canonical name -> ``"given"`` or ``"synonym"``.
    polarity : str or None
        The polarity header.

    Raises
    ------
    InputError
        An unknown canonical name in `columns`, a header named there or as polarity column
        that is not in the file, two candidate headers for one column, or a missing required
        column (the message lists the headers found).
    """
    headers = [str(h) for h in headers]
    mapping: dict[str, str] = {}
    how: dict[str, str] = {}
    for canon, header in (columns or {}).items():
        if canon not in CANONICAL:
            close = difflib.get_close_matches(canon, CANONICAL, n=1) or [_SYNONYM_OF.get(normalise_header(canon))]
            hint = f" (did you mean '{close[0]}'?)" if close and close[0] else ""
            raise InputError(
                f"column map: unknown column name '{canon}'{hint}; the names are {', '.join(CANONICAL)}"
            )
        h = _find_header(headers, str(header))
        if h is None:
            raise InputError(
                f"column map: {canon} = '{header}' but the file has no such header (headers found: {_found(headers)})"
            )
        mapping[canon] = h
        how[canon] = "given"
    taken = dict.fromkeys(mapping.values())
    if len(taken) < len(mapping):
        dup = [h for h in taken if list(mapping.values()).count(h) > 1][0]
        raise InputError(f"column map: header '{dup}' is given for more than one column")
    polarity = None
    if polarity_column:
        polarity = _find_header(headers, polarity_column)
        if polarity is None:
            raise InputError(
                f"polarity_column '{polarity_column}' is not in the file (headers found: {_found(headers)})"
            )
        taken[polarity] = None
    candidates: dict[str, list[str]] = {}
    for h in headers:
        if h in taken:
            continue
        canon = _SYNONYM_OF.get(normalise_header(h))
        if canon is not None and canon not in mapping:
            candidates.setdefault(canon, []).append(h)
    for canon, hs in candidates.items():
        exact = [h for h in hs if normalise_header(h) == canon]
        if len(exact) == 1:
            mapping[canon] = exact[0]
        elif len(hs) == 1:
            mapping[canon] = hs[0]
        else:
            raise InputError(
                f"headers {', '.join(repr(h) for h in hs)} could each be the {canon} column; "
                f"choose one with --columns {canon}=HEADER (or columns in event.toml)"
            )
        how[canon] = "synonym"
    for canon in REQUIRED:
        if canon not in mapping:
            accepted = ", ".join(SYNONYMS[canon])
            raise InputError(
                f"no {canon} column (recognised headers: {accepted}; headers found: {_found(headers)}); "
                f"map it with --columns {canon}=HEADER or columns in event.toml"
            )
    return mapping, how, polarity


# ------------------------------------------------------------------------------------------
# vectorised cell conversion (on Arrow arrays: CSV cells arrive as text, Parquet as stored)

# Number syntax accepted by Arrow's cast (used only to find the bad cells of a chunk).
_NUMBER_RE = r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$|^[+-]?(?:inf|infinity|nan)$"
_MISSING = pa.array(MISSING_MARKERS)


def _plain(arr) -> pa.Array:
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    if pa.types.is_dictionary(arr.type):
        arr = arr.dictionary_decode()
    return arr


def _is_text(arr) -> bool:
    return pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)


def _np_bool(arr) -> np.ndarray:
    return np.asarray(arr.to_numpy(zero_copy_only=False), dtype=bool)


def _text(arr) -> tuple[pa.Array, np.ndarray]:
    """Trimmed text of a column (numbers written without a trailing .0) and its blank mask
    (null, empty or a missing marker such as ``NA``)."""
    arr = _plain(arr)
    if pa.types.is_floating(arr.type) or pa.types.is_decimal(arr.type):
        v = arr.to_numpy(zero_copy_only=False).astype("float64")
        whole = np.isfinite(v) & (v == np.round(v)) & (np.abs(v) < 2.0**62)
        as_int = np.where(whole, v, 0.0).astype("int64").astype(str)
        arr = pa.array(np.where(whole, as_int, v.astype(str)), mask=np.isnan(v))
    elif not _is_text(arr):
        arr = pc.cast(arr, pa.string())
    t = pc.utf8_trim_whitespace(arr)
    blank = pc.or_kleene(pc.equal(t, ""), pc.is_in(pc.utf8_lower(t), value_set=_MISSING))
    return t, _np_bool(pc.fill_null(blank, True))


def _number(arr) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(float64 values, blank mask, bad mask); bad = text that is not a finite number, or inf."""
    arr = _plain(arr)
    if pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type) or pa.types.is_decimal(arr.type):
        v = pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False)
        blank = np.isnan(v)
        return v, blank, np.isinf(v)
    if arr.null_count == 0:
        try:  # fastest path: every cell is a number as written ("nan" is blank either way)
            v = pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False)
            return v, np.isnan(v), np.isinf(v)
        except pa.ArrowInvalid:
            pass
    t, blank = _text(arr)
    t = pc.if_else(pa.array(blank), pa.scalar(None, pa.string()), t)
    try:  # fast path: every non-blank cell is a number
        v = pc.cast(t, pa.float64()).to_numpy(zero_copy_only=False)
        bad = ~blank & ~np.isfinite(v)
    except pa.ArrowInvalid:  # null the cells that are not numbers, then the same cast
        ok = pc.fill_null(pc.match_substring_regex(t, _NUMBER_RE, ignore_case=True), False)
        v = pc.cast(pc.if_else(ok, t, pa.scalar(None, pa.string())), pa.float64()).to_numpy(zero_copy_only=False)
        bad = ~blank & ~np.isfinite(v)
    return v, blank, bad


def _epoch_text_ns(t: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Epoch-seconds text -> (int64 ns, bad mask), exact to the nanosecond (no float rounding)."""
    parts = t.str.split(".", n=1, expand=True, regex=False)
    whole = parts[0].str.lstrip("+")
    frac = parts[1] if parts.shape[1] > 1 else pd.Series("", index=t.index, dtype="str")
    frac = frac.fillna("")
    digits = whole.str.lstrip("-").str.len().to_numpy(dtype="float64", na_value=99)
    bad = digits > 10  # |s| < 1e10: beyond that is not a stroke time in seconds
    w = whole.mask(bad, "0").astype("int64").to_numpy()
    f = (frac + "000000000").str.slice(0, 9).mask(bad, "0").astype("int64").to_numpy()
    neg = whole.str.startswith("-").to_numpy(dtype=bool, na_value=False)
    ns = w * 1_000_000_000 + np.where(neg, -f, f)
    bad |= (w >= 9_223_372_036) | (w <= -9_223_372_036)
    return np.where(bad, 0, ns), bad


def _epoch_float_ns(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    bad = ~np.isfinite(v) | (np.abs(v) >= 9.2e9)
    v = np.where(bad, 0.0, v)
    sec = np.floor(v)
    ns = sec.astype("int64") * 1_000_000_000 + np.round((v - sec) * 1e9).astype("int64")
    return ns, bad


def _datetimes_ns(dt: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """tz-aware datetimes of any unit -> (int64 ns UTC, bad mask); out-of-range values are bad."""
    bad = (dt.isna() | (dt < _NS_MIN) | (dt > _NS_MAX)).to_numpy(dtype=bool)
    ok = dt.where(~bad, pd.Timestamp("1970-01-01", tz="UTC"))
    ns = ok.astype("datetime64[ns, UTC]").array.asi8.copy()
    return ns, bad


# Per-row flags carried to the end so the notes count only the rows that are kept.
NAIVE, EPOCH, OFFSET, PARTIAL, ZERO_AXIS = 1, 2, 4, 8, 16


def _times(arr, fmt: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A time column -> (int64 ns since 1970 UTC, bad mask, int8 flags NAIVE/EPOCH/OFFSET).

    Times without an offset are UTC (networks export UTC); with an offset they are converted.
    `fmt` is ``auto`` (numbers are epoch seconds, text is ISO 8601), ``iso`` or ``epoch_s``.
    """
    arr = _plain(arr)
    n = len(arr)
    flags = np.zeros(n, "int8")
    if pa.types.is_timestamp(arr.type) or pa.types.is_date(arr.type):
        if pa.types.is_date(arr.type) or arr.type.tz is None:
            flags[:] = NAIVE
            s = pd.Series(pc.cast(arr, pa.timestamp("us")).to_pandas()).dt.tz_localize("UTC")
        else:
            s = pd.Series(arr.to_pandas()).dt.tz_convert("UTC")
        ns, bad = _datetimes_ns(s)
        return ns, bad, flags
    if pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type) or pa.types.is_decimal(arr.type):
        if fmt == "iso":
            return np.zeros(n, "int64"), np.ones(n, bool), flags
        v = pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False)
        ns, bad = _epoch_float_ns(v)
        flags[:] = EPOCH
        return ns, bad, flags
    if fmt != "epoch_s" and arr.null_count == 0:
        try:  # fast path: every cell an ISO 8601 time with an offset (Arrow's parser)
            ts = pc.cast(arr, pa.timestamp("ns", "UTC"))
        except pa.ArrowInvalid:
            ts = None
        if ts is not None:
            zulu = np.zeros(n, bool)
            for suffix in ("Z", "z", "+00:00", "+0000", "+00"):
                zulu |= _np_bool(pc.ends_with(arr, suffix))
            flags[~zulu] = OFFSET
            return ts.cast(pa.int64()).to_numpy(zero_copy_only=False), np.zeros(n, bool), flags
        try:  # ... or every cell one without an offset: UTC
            ts = pc.cast(arr, pa.timestamp("ns"))
        except pa.ArrowInvalid:
            ts = None
        if ts is not None:
            flags[:] = NAIVE
            return ts.cast(pa.int64()).to_numpy(zero_copy_only=False), np.zeros(n, bool), flags
    ta, blank = _text(arr)
    ns = np.zeros(n, "int64")
    bad = blank.copy()
    if fmt == "iso":
        is_num = np.zeros(n, bool)
    else:
        is_num = ~blank & _np_bool(pc.fill_null(pc.match_substring_regex(ta, _EPOCH_RE), False))
    if fmt == "epoch_s":
        bad |= ~is_num
    t = pd.Series(ta.to_pandas())
    if is_num.any():
        e_ns, e_bad = _epoch_text_ns(t[is_num])
        ns[is_num] = e_ns
        bad[is_num] = e_bad
        flags[is_num] = EPOCH
    iso = ~bad & ~is_num
    if iso.any():
        ti = t[iso]
        dt = pd.to_datetime(ti, format="ISO8601", utc=True, errors="coerce")
        i_ns, i_bad = _datetimes_ns(dt)
        ns[iso] = i_ns
        bad[iso] = i_bad
        zulu = ti.str.endswith(("Z", "z", "+00:00", "+0000", "+00")).to_numpy(dtype=bool, na_value=False)
        has_offset = zulu.copy()
        if not zulu.all():  # the regex only for the rows that need it
            rest = ~zulu
            has_offset[rest] = ti[rest].str.contains(_OFFSET_RE, regex=True).to_numpy(dtype=bool, na_value=False)
        flags[iso] = np.where(has_offset, np.where(zulu, 0, OFFSET), NAIVE)
    return np.where(bad, 0, ns), bad, flags


def _lookup(arr, table: dict, *, upper: bool) -> np.ndarray:
    """Map cells through `table` (text -> small int): int8 values, -128 where blank or unknown."""
    t, blank = _text(arr)
    key = pc.utf8_upper(t) if upper else pc.utf8_lower(t)
    keys = list(table)
    idx = pc.index_in(key, value_set=pa.array(keys, pa.string())).to_numpy(zero_copy_only=False)
    lut = np.array([table[k] for k in keys] + [-128], dtype="int8")
    idx = np.where(np.isnan(idx.astype("float64")), len(keys), idx).astype("int64")
    out = lut[idx]
    out[blank] = -128
    return out


def convert_chunk(raw, mapping: dict, polarity: str | None, opts: dict, source_row: np.ndarray):
    """Convert one chunk of raw cells to typed canonical columns and reason codes.

    Parameters
    ----------
    raw : pyarrow.Table or RecordBatch
        Cells as read (text for CSV; as stored for Parquet).
    mapping : dict
        canonical name -> header (from :func:`plan_columns`).
    polarity : str or None
        Header of the polarity column.
    opts : dict
        Reader options (``type_codes``, ``current_unit``, ``ellipse_axes``, ...).
    source_row : ndarray of int64
        Line numbers of the chunk's rows.

    Returns
    -------
    cols : dict of ndarray
        Canonical columns of every row (``time`` as int64 ns, ``type`` as int8 0 = CG, 1 = IC)
        and ``flags`` (int8 bits NAIVE, EPOCH, OFFSET, PARTIAL, ZERO_AXIS for the ledger's notes).
    code : ndarray of int8
        0 for an accepted row, else the reason's number in :data:`REASONS` order.
    """
    n = raw.num_rows
    masks: dict[str, np.ndarray] = {k: np.zeros(n, bool) for k in REASONS}
    cols: dict[str, np.ndarray] = {}

    ns, bad_t, flags = _times(raw.column(mapping["time"]), opts["time_format"])
    cols["time"] = ns
    masks["bad_time"] |= bad_t

    for canon in ("latitude", "longitude", "peak_current_ka"):
        v, blank, bad = _number(raw.column(mapping[canon]))
        cols[canon] = v
        masks["missing_number"] |= blank
        masks["bad_number"] |= bad
    lat, lon, ip = cols["latitude"], cols["longitude"], cols["peak_current_ka"]
    with np.errstate(invalid="ignore"):
        masks["bad_latitude"] |= np.abs(lat) > 90.0
        masks["bad_longitude"] |= np.abs(lon) > 180.0
        masks["zero_current"] |= ip == 0.0
    if opts["current_unit"] == "A":
        ip = ip / 1000.0
    if polarity is not None:
        sign = _lookup(raw.column(polarity), _POLARITY, upper=False)
        masks["bad_polarity"] |= sign == -128
        with np.errstate(invalid="ignore"):
            masks["polarity_conflict"] |= (ip < 0) & (sign == 1)
        ip = np.where(sign == -1, -np.abs(ip), np.abs(ip))
    cols["peak_current_ka"] = ip

    if "type" in mapping:
        table = {"CG": 0, "IC": 1}
        table.update({k: (0 if v == "CG" else 1) for k, v in opts["type_codes"].items()})
        kind = _lookup(raw.column(mapping["type"]), table, upper=True)
        masks["unknown_type"] |= kind == -128
        cols["type"] = np.where(kind == -128, 0, kind).astype("int8")
    else:
        cols["type"] = np.zeros(n, "int8")

    ell = {}
    for canon in ELLIPSE:
        if canon in mapping:
            v, blank, bad = _number(raw.column(mapping[canon]))
            masks["bad_number"] |= bad
            ell[canon] = np.where(bad, np.nan, v)
        else:
            ell[canon] = np.full(n, np.nan)
    a, b, brg = ell["semi_major_km"], ell["semi_minor_km"], ell["major_bearing_deg"]
    if opts["ellipse_axes"] == "full":
        a, b = a / 2.0, b / 2.0
    with np.errstate(invalid="ignore"):
        masks["negative_axis"] |= (a < 0) | (b < 0)
        # a zero major axis is a rounded-away ellipse (handled below), not a minor larger than it
        masks["minor_exceeds_major"] |= (b > a) & (a != 0.0)
    if opts["bearing_convention"] == "east_ccw":
        brg = 90.0 - brg
    brg = np.mod(brg, 180.0)  # an axis is undirected: 190 deg is the same axis as 10 deg
    brg = np.where(brg >= 180.0, 0.0, brg)  # mod of a tiny negative rounds up to 180
    # A circle has no orientation: its bearing is 0 by definition, not by guess.
    brg = np.where(np.isnan(brg) & (a == b), 0.0, brg)
    have = np.isfinite(a) & np.isfinite(b) & np.isfinite(brg)
    some = ~np.isnan(a) | ~np.isnan(b) | ~np.isnan(ell["major_bearing_deg"])
    flags |= np.where(some & ~have, PARTIAL, 0).astype("int8")
    # A zero semi-axis (such as an export rounded to 0.1 km) is no location error: the stroke
    # keeps its place and is treated as having no ellipse, so default_uncertainty_km applies.
    zero = have & ((a == 0.0) | (b == 0.0))
    flags |= np.where(zero, ZERO_AXIS, 0).astype("int8")
    have &= ~zero
    cols["flags"] = flags
    cols["semi_major_km"] = np.where(have, a, np.nan)
    cols["semi_minor_km"] = np.where(have, b, np.nan)
    cols["major_bearing_deg"] = np.where(have, brg, np.nan)

    code = np.zeros(n, "int8")
    for name in reversed(REASONS):  # the first reason in REASONS order wins
        code[masks[name]] = _CODE[name]
    return cols, code


# ------------------------------------------------------------------------------------------
# file access: both readers yield (Arrow table slice of at most `chunksize` rows, line numbers)


def _kind(path: Path) -> tuple[str, str | None]:
    suffixes = [s.lower() for s in path.suffixes]
    compression = None
    if suffixes and suffixes[-1] == ".gz":
        compression = "gzip"
        suffixes = suffixes[:-1]
    ext = suffixes[-1] if suffixes else ""
    kind = _EXTENSIONS.get(ext)
    if kind is None or (kind == "parquet" and compression):
        shown = path.name if not ext else ext + (".gz" if compression else "")
        raise InputError(f"{path}: unknown stroke file type '{shown}'; use .csv (or .csv.gz, .tsv) or .parquet")
    return kind, compression


def _first_line(path: Path, compression: str | None) -> str:
    opener = gzip.open if compression == "gzip" else open
    try:
        with opener(path, "rt", encoding="utf-8-sig", newline="") as f:
            return f.readline()
    except UnicodeDecodeError:
        raise InputError(f"{path}: not UTF-8 text; save the export as UTF-8 CSV") from None
    except (OSError, EOFError) as e:
        raise InputError(f"cannot read {path}: {e}") from None


def _unique(names: list[str]) -> list[str]:
    """Repeated headers get ``.1``, ``.2`` ... (as pandas does) so every column has a name."""
    seen: dict[str, int] = {}
    out = []
    for h in names:
        k = seen.get(h, 0)
        out.append(h if k == 0 else f"{h}.{k}")
        seen[h] = k + 1
    return out


def _slices(table, chunksize: int):
    for start in range(0, table.num_rows, chunksize):
        yield table.slice(start, chunksize)


def _csv_chunks(path: Path, compression, chunksize: int, ledger: Ledger, skipped: list):
    """Headers and a generator of (Arrow slice, line numbers); lines with the wrong number of
    cells are collected in `skipped` as (line, kind) with kind ``blank`` or ``fields``."""
    import pyarrow.csv as pcsv

    head = _first_line(path, compression)
    if not head.strip():
        raise InputError(f"{path}: the file is empty (no header line)")
    if path.suffix.lower() == ".tsv" or ("," not in head and "\t" in head):
        sep = "\t"
    elif "," not in head and ";" in head:
        sep = ";"
    else:
        sep = ","
    if sep != ",":
        ledger.note(f"columns separated by {'tabs' if sep == chr(9) else 'semicolons'}")
    headers = _unique([h.strip() for h in next(csv.reader([head], delimiter=sep))])
    bad_lines: list[int] = []  # line numbers of skipped lines, in file order

    def on_bad_row(r):
        line = int(r.number) if r.number is not None else -1
        skipped.append((line, "blank" if not r.text.strip() else "fields"))
        bad_lines.append(line)
        return "skip"

    # Block size from the header's length: about `chunksize` rows per block, 1-64 MiB.
    block = int(min(max(chunksize * max(len(head), 32) * 1.5, 1 << 20), 64 << 20))
    if compression is None:  # no bigger than the file itself
        block = int(min(block, max(path.stat().st_size + 1024, 1 << 16)))
    try:
        reader = pcsv.open_csv(
            path,
            read_options=pcsv.ReadOptions(column_names=headers, skip_rows=1, block_size=block, use_threads=False),
            parse_options=pcsv.ParseOptions(delimiter=sep, ignore_empty_lines=False, invalid_row_handler=on_bad_row),
            convert_options=pcsv.ConvertOptions(
                column_types={h: pa.string() for h in headers},
                strings_can_be_null=False, quoted_strings_can_be_null=False),
        )
    except pa.ArrowInvalid as e:
        raise _csv_error(path, e) from None
    except OSError as e:
        raise InputError(f"cannot read {path}: {e}") from None

    def chunks():
        done = 0  # valid rows seen so far
        try:
            for batch in reader:
                for part in _slices(pa.Table.from_batches([batch]), chunksize):
                    k = np.arange(done, done + part.num_rows, dtype="int64")
                    # Line of the k-th valid row: 2 + k + skipped lines before it.
                    s = np.sort(np.asarray(bad_lines, dtype="int64"))
                    before = s - np.arange(s.size) - 2  # valid rows before each skipped line
                    lines = 2 + k + np.searchsorted(before, k, side="right")
                    done += part.num_rows
                    yield part, lines
        except pa.ArrowInvalid as e:
            raise _csv_error(path, e) from None
        except OSError as e:
            raise InputError(f"cannot read {path}: {e}") from None

    return headers, chunks()


def _csv_error(path, e) -> InputError:
    msg = str(e).splitlines()[0]
    if "UTF8" in msg or "utf8" in msg.lower():
        return InputError(f"{path}: not UTF-8 text; save the export as UTF-8 CSV")
    return InputError(f"{path}: cannot parse as CSV: {msg}")


def _parquet_chunks(path: Path, chunksize: int, ledger: Ledger):
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(path)
    except (pa.ArrowException, OSError) as e:
        raise InputError(f"{path}: cannot read as Parquet: {str(e).splitlines()[0]}") from None
    headers = list(pf.schema_arrow.names)
    if len(set(headers)) < len(headers):
        raise InputError(f"{path}: repeated column names in the Parquet schema ({_found(headers)})")
    ledger.note("source_row is the Parquet row index + 1 (a Parquet file has no header line)")

    def chunks():
        line = 1
        try:
            for batch in pf.iter_batches(batch_size=chunksize):
                yield pa.Table.from_batches([batch]), np.arange(line, line + batch.num_rows, dtype="int64")
                line += batch.num_rows
        except (pa.ArrowException, OSError) as e:
            raise InputError(f"{path}: cannot read as Parquet: {str(e).splitlines()[0]}") from None

    return headers, chunks()


def _blank_rows(raw, time_header: str) -> np.ndarray:
    """Rows whose every cell is empty (a blank line in the CSV); checked only where time is."""
    maybe = _np_bool(pc.fill_null(pc.equal(pc.utf8_trim_whitespace(raw.column(time_header)), ""), True))
    if not maybe.any():
        return maybe
    for name in raw.column_names:
        maybe &= _np_bool(pc.fill_null(pc.equal(pc.utf8_trim_whitespace(raw.column(name)), ""), True))
    return maybe


def _extra_columns(parts: list, names: list[str], is_text: bool, order: np.ndarray) -> pd.DataFrame:
    """The kept extra columns in output order; CSV text columns that are all numbers become
    numbers (whole numbers without blanks as int64), once over the whole file."""
    out = {}
    for i, name in enumerate(names):
        arr = pa.chunked_array([p[i] for p in parts]).combine_chunks() if parts else pa.array([], pa.string())
        arr = arr.take(pa.array(order))
        if is_text:
            v, blank, bad = _number(arr)
            if not bad.any() and not blank.all():
                if not blank.any() and (v == np.round(v)).all() and (np.abs(v) < 2.0**53).all():
                    out[name] = v.astype("int64")
                else:
                    out[name] = v
                continue
        out[name] = arr.to_pandas()
    return pd.DataFrame(out)


# ------------------------------------------------------------------------------------------
# the reader


def _current_unit(path, header: str, opts: dict) -> str | None:
    """The current column's unit: stated (``current_unit`` given), else the header's own, else
    None (decided after the read from the largest value). A stated unit against the header's
    is an InputError."""
    from_header = header_current_unit(header)
    stated = opts["current_unit"] if opts["current_unit_given"] else None
    if stated is not None and from_header is not None and stated != from_header:
        raise InputError(
            f"{path}: current_unit is {stated!r} but the peak current column '{header}' says {from_header}; "
            f"drop current_unit (event.toml) / --current-unit, or set it to {from_header!r}"
        )
    return stated or from_header


def read_strokes(path, *, config=None, columns: dict | None = None, strict: bool = False,
                 chunksize: int = 500_000) -> tuple[pd.DataFrame, Ledger]:
    """Read a stroke file (CSV or Parquet) into the canonical stroke table.

    Parameters
    ----------
    path : path
        ``.csv`` (also ``.csv.gz``, ``.tsv``, ``.txt``) or ``.parquet``.
    config : debrief.config.EventConfig, optional
        Reader options (``columns``, ``type_codes``, ``polarity_column``, ``ellipse_axes``,
        ``bearing_convention``, ``time_format``, ``current_unit``); defaults when None.
    columns : dict, optional
        Explicit column map, canonical name -> file header; updates the config's map.
    strict : bool
        Any rejected row is fatal.
    chunksize : int
        Rows converted at a time (memory versus overhead; the result does not depend on it).

    Returns
    -------
    strokes : DataFrame
        The stroke table of DEVELOPERS.md: ``time`` (datetime64[ns, UTC]), ``latitude``,
        ``longitude`` [deg], ``peak_current_ka`` [kA, signed], ``type`` (category CG/IC),
        ``semi_major_km``, ``semi_minor_km`` [km], ``major_bearing_deg`` [deg clockwise from
        north, 0..180), ``source_row`` (line number; header = line 1), then the file's other
        columns; sorted by time (ties by ``source_row``), index 0..n-1.
    ledger : Ledger
        rows read = accepted + rejected (by reason) + duplicates dropped, and notes.

    Raises
    ------
    InputError
        Missing, unreadable or empty file, unknown extension, a required column that is not
        there, an explicit map naming an absent header, no usable row, a current unit that is
        not stated where it must be or contradicts the header, or with `strict` any rejected row.

    Notes
    -----
    - Each rejected row has one reason, the first of :data:`REASONS` that applies.
    - Blank lines are not rows: they are skipped and noted with their line numbers. A line with
      more or fewer cells than the header is a rejected row (``bad_field_count``). A quoted cell
      that spans lines shifts the line numbers of the rows after it.
    - Duplicates are rows equal in every canonical column (extra columns not compared); the
      first is kept.
    - An ellipse is kept only whole (both axes and a bearing; a circle needs no bearing and gets
      0); otherwise its three columns are NaN and the row counts in ``missing_ellipse``. An
      ellipse with a semi-axis of 0 km is treated the same and also counted in ``zero_ellipse``
      with its line numbers.
    - The current unit: a stated ``current_unit`` or the header's own unit (``..._ka``,
      ``..._a``; the two must agree). A header with no unit (``current``, ``ip``) is read as
      kA when every accepted |value| is at most :data:`UNITLESS_KA_LIMIT` (a ledger note says
      so); otherwise the read stops and asks for ``current_unit``.
    - Parquet: ``source_row`` is the row index + 1; typed columns are used as stored.

    References
    ----------
    .. [ISO8601] Date and time representations (full citations: :mod:`debrief.references`).
    .. [POSIX2017] Seconds Since the Epoch.
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"stroke file not found: {path}")
    if path.is_dir():
        raise InputError(f"{path} is a folder, not a stroke file")
    kind, compression = _kind(path)
    if path.stat().st_size == 0:
        raise InputError(f"{path}: the file is empty")
    if int(chunksize) < 1:
        raise InputError(f"chunksize must be at least 1, got {chunksize}")
    opts = _options(config, columns)
    ledger = Ledger(source=str(path))
    skipped: list[tuple[int, str]] = []
    if kind == "csv":
        headers, chunks = _csv_chunks(path, compression, int(chunksize), ledger, skipped)
    else:
        headers, chunks = _parquet_chunks(path, int(chunksize), ledger)
    mapping, how, polarity = plan_columns(headers, opts["columns"], opts["polarity_column"])
    opts["current_unit"] = _current_unit(path, mapping["peak_current_ka"], opts)
    max_abs_current = 0.0  # over accepted rows, for a header without a unit
    used = set(mapping.values())
    extras = [h for h in headers if h not in used]
    renamed = {h: f"{h}_input" for h in extras if h in CANONICAL or h == "source_row"}

    keep_cols = CANONICAL + ("flags",)
    empty_of = {"time": "int64", "type": "int8", "flags": "int8"}  # the others are float64
    parts: dict[str, list] = {c: [np.empty(0, empty_of.get(c, "float64"))] for c in keep_cols}
    rows_parts, extra_parts, blank_lines = [np.empty(0, "int64")], [], []
    rejected_lines: dict[int, list] = {}
    rows_read = 0
    for raw, source_row in chunks:
        cols, code = convert_chunk(raw, mapping, polarity, opts, source_row)
        empty = _blank_rows(raw, mapping["time"]) if kind == "csv" else np.zeros(raw.num_rows, bool)
        if empty.any():  # blank lines are not rows: skipped, and noted with their numbers
            blank_lines.append(source_row[empty])
            code[empty] = 0
        ok = (code == 0) & ~empty
        rows_read += int((~empty).sum())
        for c in set(np.unique(code[~empty]).tolist()) - {0}:
            rejected_lines.setdefault(int(c), []).append(source_row[code == c])
        if opts["current_unit"] is None and ok.any():
            max_abs_current = max(max_abs_current, float(np.max(np.abs(cols["peak_current_ka"][ok]))))
        for c in keep_cols:
            parts[c].append(cols[c][ok])
        rows_parts.append(source_row[ok])
        if extras:
            kept = raw.filter(pa.array(ok))
            extra_parts.append([_plain(kept.column(h)) for h in extras])
        del raw, cols

    # Lines the CSV parser set aside: whitespace-only lines are blank, others have the wrong
    # number of cells and are rejected rows.
    blank_lines.append(np.array([ln for ln, k in skipped if k == "blank"], dtype="int64"))
    wrong = np.array([ln for ln, k in skipped if k == "fields"], dtype="int64")
    rows_read += int(wrong.size)
    if wrong.size:
        rejected_lines.setdefault(_CODE["bad_field_count"], []).append(wrong)
    for c in sorted(rejected_lines):
        ledger.reject(_NAME[c], np.concatenate(rejected_lines[c]), REASONS[_NAME[c]])
    ledger.rows_read = rows_read
    blank = np.sort(np.concatenate(blank_lines))
    if blank.size:
        first_blank = ", ".join(str(x) for x in blank[:5])
        ledger.note(f"{_n(blank.size, 'blank line')} skipped ({'line' if blank.size == 1 else 'lines'} "
                    f"{first_blank}{', ...' if blank.size > 5 else ''})")
    if rows_read == 0:
        raise InputError(f"{path}: no data rows (only a header)")

    # Concatenate one column at a time, freeing its chunks, so peak memory stays near one copy.
    cols = {c: np.concatenate(parts.pop(c)) for c in keep_cols}
    cols["source_row"] = np.concatenate(rows_parts)
    del parts, rows_parts
    flags = cols.pop("flags")
    if cols["time"].size == 0:
        summary = ", ".join(f"{k} {v['count']:,}" for k, v in ledger._reasons_by_count())
        first_reason, entry = ledger._reasons_by_count()[0]
        raise InputError(
            f"{path}: nothing usable: all {rows_read:,} rows were rejected ({summary}); "
            f"first {first_reason} on {_where(entry)}"
        )

    if opts["current_unit"] is None and max_abs_current > UNITLESS_KA_LIMIT:
        raise InputError(
            f"{path}: the peak current column '{mapping['peak_current_ka']}' states no unit and holds "
            f"|values| up to {max_abs_current:g}, more than {UNITLESS_KA_LIMIT:g} kA; state the unit: "
            f'current_unit = "A" in event.toml or --current-unit A (or "kA")'
        )

    # Exact duplicates over the whole file (chunks cannot see each other); the first is kept.
    dup = _duplicates(cols)
    if dup.any():
        ledger.add_duplicates(cols["source_row"][dup])
    keep = ~dup
    zero_axis_lines = cols["source_row"][keep & ((flags & ZERO_AXIS) != 0)]
    ledger.rows_accepted = int(keep.sum())

    if strict and ledger.rows_rejected:
        first_reason, entry = min(ledger.rejected.items(), key=lambda kv: kv[1]["first_lines"][0])
        raise InputError(
            f"{path}: {ledger.rows_rejected:,} rows rejected (strict mode); first reason "
            f"{first_reason} ({entry['description']}) on {_where(entry)}"
        )

    time_ns = cols["time"]
    order = np.flatnonzero(keep)
    if np.any(np.diff(time_ns[order]) < 0):  # stable: ties stay in source_row order
        order = order[np.argsort(time_ns[order], kind="stable")]
    data = {}
    for c in CANONICAL + ("source_row",):
        v = cols.pop(c)[order]
        if c == "time":
            v = pd.DatetimeIndex(v.view("datetime64[ns]"), tz="UTC")
        elif c == "type":
            v = pd.Categorical.from_codes(v, dtype=TYPE_DTYPE)
        data[c] = v
    if extras:
        extra = _extra_columns(extra_parts, extras, kind == "csv", order).rename(columns=renamed)
        del extra_parts
        data.update({c: extra[c].to_numpy() if extra[c].dtype.kind in "iuf" else extra[c].array for c in extra.columns})
    out = pd.DataFrame(data, copy=False)

    ledger.missing_ellipse = int(out["semi_major_km"].isna().sum())
    ledger.add_zero_ellipse(zero_axis_lines)
    kept = flags[keep]
    tally = {name: int(((kept & bit) != 0).sum()) for name, bit in
             (("naive", NAIVE), ("epoch", EPOCH), ("offset", OFFSET), ("partial_ellipse", PARTIAL))}
    _notes(ledger, mapping, how, polarity, opts, tally, extras, renamed, len(out))
    ledger.check()
    return out, ledger


def _duplicates(cols: dict) -> np.ndarray:
    """Rows equal in every canonical column to an earlier row (file order). Only rows sharing
    their time with another row can be duplicates, so the full comparison runs on those alone."""
    t = cols["time"]
    _, inverse, counts = np.unique(t, return_inverse=True, return_counts=True)
    shared = counts[inverse] > 1
    dup = np.zeros(t.size, bool)
    if shared.any():
        sub = pd.DataFrame({c: cols[c][shared] for c in CANONICAL})
        dup[shared] = sub.duplicated(keep="first").to_numpy()
    return dup


def _where(entry: dict) -> str:
    lines = entry["first_lines"]
    word = "line" if len(lines) == 1 else "lines"
    return f"{word} {', '.join(map(str, lines))}" + (", ..." if entry["count"] > len(lines) else "")


def _n(count: int, word: str) -> str:
    return f"{count:,} {word}" + ("" if count == 1 else "s")


def _notes(ledger, mapping, how, polarity, opts, tally, extras, renamed, n_out) -> None:
    shown = [f"{c} <- '{h}'{' (given)' if how[c] == 'given' else ''}" for c, h in mapping.items() if h != c]
    if shown:
        ledger.note("column mapping used: " + ", ".join(shown))
    if "type" not in mapping:
        ledger.note("the file has no type column: every row is taken as a ground stroke (CG)")
    elif opts["type_codes"]:
        ledger.note("type codes mapped: " + ", ".join(f"{k} -> {v}" for k, v in opts["type_codes"].items()))
    if tally["naive"]:
        ledger.note(f"times without a UTC offset were read as UTC ({_n(tally['naive'], 'row')})")
    if tally["offset"]:
        ledger.note(f"times with a non-zero UTC offset were converted to UTC ({_n(tally['offset'], 'row')})")
    if tally["epoch"]:
        ledger.note(f"times read as epoch seconds since 1970-01-01T00:00:00Z ({_n(tally['epoch'], 'row')})")
    if opts["current_unit"] == "A":
        ledger.note("peak current converted from A to kA")
    elif opts["current_unit"] is None:
        ledger.note(
            f"the peak current column '{mapping['peak_current_ka']}' states no unit: read as kA because every "
            f"|value| is at most {UNITLESS_KA_LIMIT:g}; state it with current_unit in event.toml or --current-unit"
        )
    if polarity is not None:
        ledger.note(f"peak current is unsigned in the file; polarity taken from column '{polarity}'")
    present = [c for c in ELLIPSE if c in mapping]
    if not present:
        ledger.note("the file has no error ellipse columns: location uncertainty needs default_uncertainty_km")
    else:
        ledger.note(f"ellipse axes are taken at ellipse_confidence {opts['ellipse_confidence']:g}")
        if "major_bearing_deg" not in mapping:
            ledger.note("the file has no ellipse bearing column: ellipses with unequal axes cannot be oriented and are treated as missing")
        if opts["ellipse_axes"] == "full":
            ledger.note("ellipse axes halved: the file gives full axes")
        if opts["bearing_convention"] == "east_ccw":
            ledger.note("ellipse bearings converted from counter-clockwise-from-east to clockwise-from-north")
    if tally["partial_ellipse"]:
        ledger.note(f"ellipses with a blank axis or bearing were treated as missing ({_n(tally['partial_ellipse'], 'row')})")
    if ledger.zero_ellipse:
        first = ", ".join(str(x) for x in ledger.zero_ellipse_lines)
        more = ", ..." if ledger.zero_ellipse > len(ledger.zero_ellipse_lines) else ""
        ledger.note(
            f"ellipses with a semi-axis of 0 km were treated as missing, as a location error cannot be zero "
            f"({_n(ledger.zero_ellipse, 'row')}; {'line' if ledger.zero_ellipse == 1 else 'lines'} {first}{more})"
        )
    if ledger.missing_ellipse:
        ledger.note(
            f"{ledger.missing_ellipse:,} of {n_out:,} accepted strokes have no error ellipse; location "
            "uncertainty for them uses default_uncertainty_km when it is set"
        )
    if renamed:
        ledger.note("extra columns renamed to keep canonical names free: " + ", ".join(f"{a} -> {b}" for a, b in renamed.items()))
    kept = [renamed.get(h, h) for h in extras]
    if kept:
        ledger.note("other columns kept as read: " + ", ".join(kept))

"""Times a person types or a control system logs: ISO 8601, read in a named zone when no offset.

Stroke times from a network without an offset are UTC (handled by the stroke reader); times a
person types (CLI windows, outage logs, site windows) without an offset are read in the event's
``time_zone`` or ``--tz``; with neither, we stop and ask rather than guess.

Typed times are ISO 8601 or follow the pattern the user states (``typed_time_format``); any
other text (``01/11/2026``, ``01.11.2026``, ``July 14 2026``) is refused with the fix, because
day-first and month-first writings cannot be told apart. :func:`read_typed_time` is the one
parser; :func:`parse_user_time` adds the zone and is what the readers and the CLI call.
"""

from __future__ import annotations

import re
import warnings
from datetime import datetime
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pandas as pd

from .errors import InputError

#: What to do about a typed time that is not ISO 8601 (appended to every such message).
TYPED_TIME_FIX = ("write ISO 8601 such as 2026-11-01T14:02, or set typed_time_format in event.toml / "
                  "--typed-time-format, e.g. '%d/%m/%Y %H:%M' (day first) or '%m/%d/%Y %H:%M' (month first)")

# ISO 8601 calendar date, optionally a time of day (T or a space; minutes, seconds and a
# fraction optional after HH:MM) and a UTC offset after the time: Z, +HH:MM, +HHMM or +HH.
# Nothing else: 01/11/2026 is 1 November in one country and 11 January in another.
_ISO_RE = re.compile(
    r"^\d{4}-\d{2}-\d{2}"
    r"(?:[Tt ]\d{2}:\d{2}(?::\d{2}(?:[.,]\d{1,9})?)?(?:[Zz]|[+-]\d{2}(?::?\d{2})?)?)?$"
)
# A date-time that shows every field of a pattern, to check a pattern reads back what it wrote.
_PROBE = datetime(2026, 11, 3, 14, 5, 6)


def check_time_format(fmt: str, *, what: str = "typed_time_format") -> str:
    """Check a strptime pattern for typed times; return it unchanged.

    The pattern must give the year, month and day and, when it gives the hour, read back the
    hour it writes (``%I`` needs ``%p``).

    Raises
    ------
    InputError
        A pattern that cannot be used, naming `what`.
    """
    fmt = str(fmt)
    try:
        with warnings.catch_warnings():  # newer Pythons warn on a day without a year: refused below
            warnings.simplefilter("ignore", DeprecationWarning)
            back = datetime.strptime(_PROBE.strftime(fmt), fmt)
    except (ValueError, TypeError):
        back = None
    if back is None or back.date() != _PROBE.date() or back.hour not in (0, _PROBE.hour):
        raise InputError(
            f"{what} {fmt!r} is not a usable strptime pattern: it must give year, month and day "
            "(e.g. '%d/%m/%Y' or '%d/%m/%Y %H:%M'; a 12-hour %I needs %p)"
        )
    return fmt


def read_typed_time(text, *, time_format: str | None = None) -> pd.Timestamp:
    """Read one typed time as written: ISO 8601, or the pattern the user stated.

    Parameters
    ----------
    text : str
        ``YYYY-MM-DD`` or ``YYYY-MM-DD[T ]HH:MM[:SS[.fff...]]`` with an optional ``Z``,
        ``+HH:MM``, ``+HHMM`` or ``+HH`` offset; or text matching `time_format`.
    time_format : str, optional
        ``typed_time_format``: a strptime pattern tried before ISO 8601 (so that the stated
        pattern decides any text that both could read).

    Returns
    -------
    Timestamp
        Without a zone when the text has no offset (the caller applies the zone).

    Raises
    ------
    ValueError
        The text is neither; the message quotes it and says how to fix it.

    References
    ----------
    .. [1] ISO 8601-1:2019, Date and time -- Representations for information interchange.
    """
    s = str(text).strip()
    if time_format:
        try:
            return pd.Timestamp(datetime.strptime(s, time_format))
        except ValueError:
            pass
    if _ISO_RE.match(s):
        try:
            ts = pd.Timestamp(s.replace(",", "."))
        except (ValueError, TypeError, OverflowError):
            ts = None
        if ts is not None and ts is not pd.NaT:
            return ts
        raise ValueError(f"{s!r} is not a valid date or time")
    if time_format:
        example = datetime(2026, 11, 1, 14, 2).strftime(time_format)
        raise ValueError(
            f"{s!r} matches neither typed_time_format {time_format!r} (e.g. {example!r}) nor ISO 8601 "
            "(e.g. 2026-11-01T14:02)"
        )
    raise ValueError(f"{s!r} is not an ISO 8601 time; {TYPED_TIME_FIX}")


def zone(name: str | None) -> ZoneInfo | None:
    """The IANA zone called `name`, or None; an unknown name is an InputError."""
    if name is None or name == "":
        return None
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise InputError(f"unknown time zone {name!r}: use an IANA name such as 'Europe/Vienna' or 'UTC'") from None


def parse_user_time(text: str, tz: str | None, *, what: str = "time", time_format: str | None = None) -> pd.Timestamp:
    """Parse a typed time to a UTC Timestamp (ns).

    Parameters
    ----------
    text : str
        ISO 8601 date or date-time, with or without offset, or text in `time_format`
        (:func:`read_typed_time`); anything else (``01/11/2026``) is refused, never guessed.
    tz : str or None
        IANA zone for a time without offset. None: such a time is an error that asks for one.
    what : str
        What the time is, for the message (e.g. ``"--start"``).
    time_format : str, optional
        The event's ``typed_time_format`` (a strptime pattern).

    Raises
    ------
    InputError
        Text that is not a time of the accepted forms, a time without offset and no zone, or a
        local time that does not exist or is ambiguous in `tz`.
    """
    s = str(text).strip()
    try:
        ts = read_typed_time(s, time_format=time_format)
    except ValueError as e:
        raise InputError(f"{what}: {e}") from None
    if ts.tzinfo is None:
        z = zone(tz)
        if z is None:
            raise InputError(
                f"{what}: {s!r} has no UTC offset and no time zone is set; add an offset "
                "(e.g. 'Z' or '+02:00'), pass --tz ZONE, or set time_zone in event.toml"
            )
        try:
            ts = ts.tz_localize(z, ambiguous="raise", nonexistent="raise")
        except Exception:
            raise InputError(f"{what}: {s!r} does not exist or is ambiguous in {tz} (a DST change); add an offset") from None
    try:
        return ts.tz_convert("UTC").as_unit("ns")
    except (ValueError, OverflowError):
        raise InputError(f"{what}: {s!r} is outside the years 1678-2261") from None


def iso_utc(ts) -> str:
    """ISO 8601 UTC with ``Z`` (millisecond precision kept when present)."""
    t = pd.Timestamp(ts).tz_convert("UTC")
    if t.microsecond or t.nanosecond:
        return t.strftime("%Y-%m-%dT%H:%M:%S.%f").rstrip("0").rstrip(".") + "Z"
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def iso_utc_many(times) -> np.ndarray:
    """ISO 8601 UTC text with ``Z`` for many times at once.

    Same text as :func:`iso_utc` (whole seconds without a fraction, trailing
    zeros of the fraction dropped) except that nanoseconds are kept rather than cut; NaT gives
    an empty string. About a second per ten million times, against minutes for ``strftime``.
    """
    s = pd.Series(times)
    if isinstance(s.dtype, pd.DatetimeTZDtype):
        s = s.dt.tz_convert("UTC").dt.tz_localize(None)
    ns = s.dt.as_unit("ns").to_numpy(dtype="datetime64[ns]")
    n = len(ns)
    if n == 0:
        return np.zeros(0, dtype=object)
    nat = np.isnat(ns)
    # 'YYYY-MM-DDTHH:MM:SS.fffffffff': 29 characters, as datetime64[ns] spans only 1677-2262
    text = np.datetime_as_string(np.where(nat, np.datetime64(0, "ns"), ns), unit="ns")
    frac = np.where(nat, 0, ns.view(np.int64) % 1_000_000_000)
    digits = np.full(n, 9, dtype=np.int64)
    for k in range(1, 9):  # drop trailing zeros of the fraction
        digits -= frac % 10**k == 0
    cut = np.where(frac == 0, 19, 20 + digits)
    b = text.astype("S30").view(np.uint8).reshape(n, 30)
    b[np.arange(n), cut] = ord("Z")
    b[np.arange(30)[None, :] > cut[:, None]] = 0  # NUL padding is dropped by numpy's bytes type
    out = b.reshape(-1).view("S30").astype(str).astype(object)
    out[nat] = ""
    return out


def format_times(ts, tz: str | None) -> str:
    """Human-readable: UTC, and the display zone beside it when one is set."""
    t = pd.Timestamp(ts).tz_convert("UTC")
    out = t.strftime("%Y-%m-%d %H:%M:%S UTC")
    z = zone(tz)
    if z is not None and tz != "UTC":
        out += " (" + t.tz_convert(z).strftime("%Y-%m-%d %H:%M:%S %Z") + ")"
    return out

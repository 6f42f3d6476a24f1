"""Times a person types or a control system logs: ISO 8601, read in a named zone when no offset.

Stroke times from a network without an offset are UTC (handled by the stroke reader); times a
person types (CLI windows, outage logs, site windows) without an offset are read in the event's
``time_zone`` or ``--tz``; with neither, we stop and ask rather than guess.
"""

from __future__ import annotations

from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pandas as pd

from .errors import InputError

def zone(name: str | None) -> ZoneInfo | None:
    """The IANA zone called `name`, or None; an unknown name is an InputError."""
    if name is None or name == "":
        return None
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise InputError(f"unknown time zone {name!r}: use an IANA name such as 'Europe/Vienna' or 'UTC'") from None


def parse_user_time(text: str, tz: str | None, *, what: str = "time") -> pd.Timestamp:
    """Parse a typed time to a UTC Timestamp (ns).

    Parameters
    ----------
    text : str
        ISO 8601 date or date-time, with or without offset.
    tz : str or None
        IANA zone for a time without offset. None: such a time is an error that asks for one.
    what : str
        What the time is, for the message (e.g. ``"--start"``).
    """
    s = str(text).strip()
    try:
        ts = pd.Timestamp(s)
    except (ValueError, TypeError):
        raise InputError(f"{what}: cannot read {s!r} as an ISO 8601 time (e.g. 2026-07-14T15:30:00Z)") from None
    if ts is pd.NaT:
        raise InputError(f"{what}: cannot read {s!r} as an ISO 8601 time")
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
    return ts.tz_convert("UTC").as_unit("ns")


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

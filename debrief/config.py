"""event.toml: every setting of an event folder, its default and its meaning, in one place.

Each key is declared once below (``_SCHEMA``) with its default, type, allowed range and a
sentence that the docs (``docs/event-toml.md``) and error messages reuse. Command-line options
override the file through :func:`with_overrides`.

An unknown key is an error naming the key and its line: a typo such as ``stop_kn`` must not
silently fall back to a default in a safety record.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import InputError
from .timeutil import check_time_format, zone


@dataclass(frozen=True)
class Key:
    """One event.toml key: its default, accepted Python types and meaning."""

    default: Any
    types: tuple
    doc: str
    min: float | None = None
    max: float | None = None
    min_exclusive: bool = False
    choices: tuple | None = None


_NUM = (int, float)
_STR = (str,)
_OPT_NUM = (int, float, type(None))
_OPT_STR = (str, type(None))

# Section "" is the top level. Defaults follow ../DESIGN.md; safety figures are common practice.
_SCHEMA: dict[str, dict[str, Key]] = {
    "": {
        "name": Key(None, _OPT_STR, "event title (default: the folder name)"),
        "time_zone": Key(None, _OPT_STR, "IANA zone for display and for typed times without an offset"),
        "start": Key(None, _OPT_STR, "analysis window start, ISO 8601 or typed_time_format (default: first stroke)"),
        "end": Key(None, _OPT_STR, "analysis window end, ISO 8601 or typed_time_format (default: last stroke)"),
        "strokes": Key("strokes.csv", _STR, "stroke file (.csv or .parquet)"),
        "sites": Key("sites.csv", _STR, "sites file, optional"),
        "lines": Key("lines.geojson", _STR, "power lines, GeoJSON, optional"),
        "outages": Key("outages.csv", _STR, "outage log, optional"),
        "crew_log": Key("crew_log.csv", _STR, "crew log (site, stopped, resumed), optional"),
        "columns": Key({}, (dict,), "explicit column map, canonical name = header in the file"),
        "current_unit": Key(
            "kA", _STR,
            "unit of the peak current column; must agree with a unit in its header (peak_current_ka, "
            "current_a); when neither states one, a header such as current or ip is read as kA only if "
            "every value is within -1000..1000, else the read stops and asks", choices=("kA", "A"),
        ),
        "type_codes": Key({}, (dict,), "map of the file's type codes to CG/IC, e.g. {G = 'CG', C = 'IC'}"),
        "polarity_column": Key(None, _OPT_STR, "column holding polarity when the current is unsigned"),
        "ellipse_axes": Key("semi", _STR, "whether ellipse axes are semi-axes or full axes", choices=("semi", "full")),
        "bearing_convention": Key(
            "north_cw", _STR,
            "how the file gives the major-axis orientation: degrees clockwise from north, or "
            "counter-clockwise from east", choices=("north_cw", "east_ccw"),
        ),
        "time_format": Key("auto", _STR, "stroke time format", choices=("auto", "iso", "epoch_s")),
        "typed_time_format": Key(
            None, _OPT_STR,
            "strptime pattern of typed times that are not ISO 8601 (sites start/end, crew log, outage "
            "log, --start/--end), e.g. '%d/%m/%Y %H:%M'; ISO 8601 is always read; none: only ISO 8601 "
            "(01/11/2026 is refused, never guessed)",
        ),
        "ellipse_confidence": Key(0.5, _NUM, "confidence level of the reported ellipses", 0.0, 1.0, True),
        "default_uncertainty_km": Key(None, _OPT_NUM, "circular semi-axis at ellipse_confidence for strokes without an ellipse", 0.0, None, True),
        "flash_detection_efficiency": Key(None, _OPT_NUM, "the network's flash detection efficiency (0-1]", 0.0, 1.0, True),
        "flash_detection_efficiency_source": Key(None, _OPT_STR, "where the detection efficiency comes from"),
        "coverage_start": Key(None, _OPT_STR, "start of the time the stroke file covers, ISO 8601 (default: the first stroke, said so)"),
        "coverage_end": Key(None, _OPT_STR, "end of the time the stroke file covers, ISO 8601 (default: the last stroke, said so)"),
        "coverage_bbox": Key(None, (list, type(None)), "area the stroke file covers, [west, south, east, north] in degrees; west > east crosses 180 (default: the strokes' extent, said so)"),
        "coverage_file": Key(None, _OPT_STR, "GeoJSON Polygon or MultiPolygon of the area the stroke file covers (instead of coverage_bbox)"),
    },
    "grouping": {
        "max_interval_ms": Key(500.0, _NUM, "max time from the previous stroke of the flash", 0.0, None, True),
        "max_duration_ms": Key(1000.0, _NUM, "max time from the first stroke of the flash", 0.0, None, True),
        "max_distance_km": Key(10.0, _NUM, "max distance from the first stroke of the flash", 0.0, None, True),
        "max_strokes": Key(15, (int,), "max strokes in one flash", 1, None),
        "same_polarity": Key(False, (bool,), "only strokes of the first stroke's polarity join a flash"),
        "ground_contact_km": Key(1.0, _NUM, "a stroke farther than this from every earlier contact of its flash starts a new ground contact", 0.0, None, True),
        "likely_ic_below_ka": Key(15.0, _NUM, "positive ground reports below this peak current are flagged likely_ic", 0.0, None),
    },
    "continuing_current": {
        "positive_min_ka": Key(20.0, _NUM, "positive ground flashes (one stroke or more) with a positive ground stroke at or above this are suspects", 0.0, None),
        "negative_max_abs_ka": Key(20.0, _NUM, "a negative stroke weaker than this |Ip| may start continuing current", 0.0, None, True),
        "min_interval_ms": Key(100.0, _NUM, "interval after such a stroke, same ground contact, that raises suspicion", 0.0, None, True),
    },
    "statistics": {
        "detection_floor_ka": Key(10.0, _NUM, "|Ip| below which the network's sampling is incomplete; distributions compared above it", 0.0, None),
    },
    "alerts": {
        "stop_km": Key(10.0, _NUM, "stop radius about a site (common practice)", 0.0, None, True),
        "warn_km": Key(None, _OPT_NUM, "optional wider warning radius", 0.0, None, True),
        "all_clear_min": Key(30.0, _NUM, "all-clear after the last stroke within the radius (common practice)", 0.0, None, True),
        "include_ic": Key(False, (bool,), "cloud pulses also start and extend alert periods"),
    },
    "lines": {
        "clock_tolerance_s": Key(10.0, _NUM, "outage-log clock tolerance", 0.0, None),
        "search_km": Key(2.0, _NUM, "search distance about a line or fault location", 0.0, None, True),
        "return_stroke_speed_m_s": Key(1.2e8, _NUM, "return-stroke speed for Rusck's formula (IEEE Std 1410)", 0.0, 3e8, True),
        "ground_flash_density": Key(None, _OPT_NUM, "ground flash density, flashes/km^2/yr", 0.0, None),
        "ground_flash_density_source": Key(None, _OPT_STR, "where the ground flash density comes from"),
        "default_height_m": Key(None, _OPT_NUM, "conductor height for lines that give none", 0.0, None, True),
        "default_cfo_kv": Key(None, _OPT_NUM, "critical flashover voltage for lines that give none", 0.0, None, True),
        "striking_distance_model": Key("ieee1410", _STR, "direct-strike model", choices=("ieee1410", "ieee1243", "eriksson")),
        "likely_p": Key(0.5, _NUM, "probability at or above which a mechanism (direct strike, induced flashover) is called likely", 0.0, 1.0, True),
        "possible_p": Key(0.1, _NUM, "probability of a flashover-capable stroke at or above which lightning is called a possible cause", 0.0, 1.0, True),
        "include_ic": Key(False, (bool,), "cloud pulses are outage candidates too (by default only ground strokes)"),
    },
}

SECTIONS = tuple(s for s in _SCHEMA if s)


@dataclass(frozen=True)
class EventConfig:
    """The settings of one event folder: ``values[section][key]`` with defaults filled in.

    Attributes
    ----------
    event_dir : Path or None
        The folder, or None for settings built without one.
    values : dict
        ``values[""]`` holds the top-level keys, ``values["grouping"]`` that section, ...
    given : frozenset
        ``(section, key)`` pairs that the file or an override set explicitly.
    """

    event_dir: Path | None = None
    values: dict = field(default_factory=dict)
    given: frozenset = frozenset()

    def __getitem__(self, section: str) -> dict:
        return self.values[section]

    def get(self, key: str):
        """Top-level value of `key`."""
        return self.values[""][key]

    @property
    def name(self) -> str:
        if self.values[""]["name"]:
            return self.values[""]["name"]
        return self.event_dir.name if self.event_dir is not None else "event"

    @property
    def time_zone(self) -> str | None:
        return self.values[""]["time_zone"]

    def path(self, key: str) -> Path:
        """Path of the file named by top-level `key` (``strokes``, ``sites``, ...)."""
        p = Path(self.values[""][key])
        if not p.is_absolute() and self.event_dir is not None:
            p = self.event_dir / p
        return p

    def is_given(self, section: str, key: str) -> bool:
        return (section, key) in self.given

    def as_toml_dict(self) -> dict:
        """Every value, defaults included, as nested dicts (None values left out), for reports."""
        out = {k: v for k, v in self.values[""].items() if v is not None}
        for s in SECTIONS:
            out[s] = {k: v for k, v in self.values[s].items() if v is not None}
        return out


def defaults() -> dict:
    """A fresh nested dict of every default."""
    return {s: {k: _copy(key.default) for k, key in keys.items()} for s, keys in _SCHEMA.items()}


def _copy(v):
    return dict(v) if isinstance(v, dict) else v


def schema() -> dict[str, dict[str, Key]]:
    """The declared keys (read-only use: docs, widgets' controls)."""
    return _SCHEMA


def _line_of(text: str, section: str, key: str) -> int | None:
    """Line number (1-based) where `key` is set in `section` of the TOML text, if found."""
    current = ""
    for i, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if line.startswith("[") and not line.startswith("[["):
            current = line.strip("[] ").strip()
            continue
        if current == section and (line.startswith(key + " ") or line.startswith(key + "=")):
            return i
    return None


def _where(path: Path | None, text: str, section: str, key: str) -> str:
    name = f"{path}" if path else "event settings"
    line = _line_of(text, section, key) if text else None
    dotted = f"{section}.{key}" if section else key
    return f"{name}, line {line}, key '{dotted}'" if line else f"{name}, key '{dotted}'"


def _check(section: str, key: str, value, where: str):
    spec = _SCHEMA[section][key]
    if isinstance(value, bool) and bool not in spec.types:
        raise InputError(f"{where}: expected a {_type_word(spec)}, got {value!r}")
    if not isinstance(value, spec.types):
        raise InputError(f"{where}: expected a {_type_word(spec)}, got {value!r}")
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        if not math.isfinite(value):
            raise InputError(f"{where}: must be a finite number, got {value!r}")
        lo, hi = spec.min, spec.max
        if lo is not None and (value < lo or (spec.min_exclusive and value == lo)):
            rel = ">" if spec.min_exclusive else ">="
            raise InputError(f"{where}: must be {rel} {lo}, got {value!r}")
        if hi is not None and value > hi:
            raise InputError(f"{where}: must be <= {hi}, got {value!r}")
        if int in spec.types and float not in spec.types and not isinstance(value, int):
            raise InputError(f"{where}: must be a whole number, got {value!r}")
    if spec.choices is not None and value is not None and value not in spec.choices:
        raise InputError(f"{where}: must be one of {', '.join(map(repr, spec.choices))}, got {value!r}")
    if key == "time_zone" and value is not None:
        try:
            zone(value)
        except InputError as e:
            raise InputError(f"{where}: {e}") from None
    if key == "typed_time_format" and value is not None:
        check_time_format(value, what=f"{where}:")
    if key == "coverage_bbox" and value is not None:
        value = list(check_bbox(value, where))
    if key in ("columns", "type_codes"):
        for k, v in value.items():
            if not isinstance(v, str):
                raise InputError(f"{where}: every value must be a string, got {k} = {v!r}")
    if isinstance(value, (int, float)) and not isinstance(value, bool) and float in spec.types:
        return float(value)
    return value


def check_bbox(bbox, where: str = "event.toml coverage_bbox") -> tuple[float, float, float, float]:
    """``[west, south, east, north]`` in degrees, checked (west > east crosses 180 degrees)."""
    fix = "write coverage_bbox = [west, south, east, north] in degrees, e.g. [-94.5, 44.8, -92.0, 46.2]"
    if not isinstance(bbox, (list, tuple)) or len(bbox) != 4:
        raise InputError(f"{where}: expected 4 numbers; {fix}")
    if any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in bbox):
        raise InputError(f"{where}: expected 4 numbers, got {bbox!r}; {fix}")
    w, s, e, n = (float(v) for v in bbox)
    if not all(math.isfinite(v) for v in (w, s, e, n)):
        raise InputError(f"{where}: every value must be finite; {fix}")
    if not (-180.0 <= w <= 180.0 and -180.0 <= e <= 180.0):
        raise InputError(f"{where}: west and east must be within [-180, 180], got {w:g}, {e:g}; {fix}")
    if not (-90.0 <= s < n <= 90.0):
        raise InputError(f"{where}: need -90 <= south < north <= 90, got south {s:g}, north {n:g}; {fix}")
    if w == e:
        raise InputError(f"{where}: west equals east ({w:g}); {fix}")
    return w, s, e, n


def _type_word(spec: Key) -> str:
    if int in spec.types and float not in spec.types:
        return "whole number"
    names = {int: "number", float: "number", str: "string", bool: "true/false", dict: "table", list: "list",
             type(None): None}
    words = sorted({names[t] for t in spec.types if names[t]})
    return " or ".join(words)


def _unknown(where_file: str, section: str, key: str, known) -> InputError:
    dotted = f"{section}.{key}" if section else key
    close = difflib.get_close_matches(key, list(known), n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    return InputError(f"{where_file}: unknown key '{dotted}'{hint}")


def from_dict(data: dict, *, event_dir: Path | None = None, text: str = "", path: Path | None = None) -> EventConfig:
    """Validate a nested dict (as parsed from event.toml) and fill in defaults."""
    values = defaults()
    given = set()
    for k, v in data.items():
        if k in SECTIONS:
            if not isinstance(v, dict):
                raise InputError(f"{_where(path, text, '', k)}: '{k}' must be a [section] table")
            for kk, vv in v.items():
                if kk not in _SCHEMA[k]:
                    line = _line_of(text, k, kk)
                    raise _unknown(f"{path or 'event settings'}" + (f", line {line}" if line else ""), k, kk, _SCHEMA[k])
                values[k][kk] = _check(k, kk, vv, _where(path, text, k, kk))
                given.add((k, kk))
        elif k in _SCHEMA[""]:
            values[""][k] = _check("", k, _normalise_time(v), _where(path, text, "", k))
            given.add(("", k))
        else:
            line = _line_of(text, "", k)
            raise _unknown(f"{path or 'event settings'}" + (f", line {line}" if line else ""), "", k, list(_SCHEMA[""]) + list(SECTIONS))
    return EventConfig(event_dir=event_dir, values=values, given=frozenset(given))


def _normalise_time(v):
    # TOML has native date-times; keep them as ISO text so one parser handles both forms.
    if hasattr(v, "isoformat") and not isinstance(v, str):
        return v.isoformat()
    return v


def load_event_config(event_dir: str | Path | None) -> EventConfig:
    """Read ``EVENT_DIR/event.toml`` (all defaults when `event_dir` is None).

    A missing folder or an unparsable file is an :class:`InputError` naming the file and line.
    A folder without event.toml is allowed: every default applies.
    """
    if event_dir is None:
        return from_dict({})
    d = Path(event_dir)
    if not d.is_dir():
        raise InputError(f"event folder not found: {d}")
    p = d / "event.toml"
    if not p.exists():
        return from_dict({}, event_dir=d)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as e:
        raise InputError(f"cannot read {p}: {e}") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"{p}: not valid TOML: {e}") from None
    return from_dict(data, event_dir=d, text=text, path=p)


def with_overrides(cfg: EventConfig, overrides: dict[str, Any]) -> EventConfig:
    """A copy of `cfg` with ``{"section.key": value}`` (or top-level ``"key"``) overrides.

    None values are ignored, so argparse defaults of None leave the file's value in place.
    """
    values = {s: dict(v) for s, v in cfg.values.items()}
    given = set(cfg.given)
    for dotted, v in overrides.items():
        if v is None:
            continue
        section, _, key = dotted.rpartition(".")
        if section not in _SCHEMA or key not in _SCHEMA[section]:
            raise InputError(f"unknown setting '{dotted}'")
        values[section][key] = _check(section, key, v, f"option for '{dotted}'")
        given.add((section, key))
    return dataclasses.replace(cfg, values=values, given=frozenset(given))


def markdown_table() -> str:
    """The keys as a Markdown table, for docs/event-toml.md (kept in sync by a test)."""
    rows = ["| section | key | default | meaning |", "|---|---|---|---|"]
    for s, keys in _SCHEMA.items():
        for k, spec in keys.items():
            d = "none" if spec.default is None else ("{}" if spec.default == {} else repr(spec.default))
            doc = spec.doc.replace("|", "\\|")  # |Ip| must not end a Markdown cell
            rows.append(f"| {('[' + s + ']') if s else 'top level'} | `{k}` | {d} | {doc} |")
    return "\n".join(rows) + "\n"


if __name__ == "__main__":  # python -m debrief.config > docs/event-toml.md
    print("# event.toml\n")
    print("Every key of an event folder's `event.toml`, its default and its meaning. Generated from")
    print("`debrief/config.py` (`python -m debrief.config > docs/event-toml.md`); a test keeps it current.")
    print("Command-line options override the file. An unknown key is an error naming the key and line.\n")
    print(markdown_table(), end="")

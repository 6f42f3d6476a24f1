"""An event folder loaded once: settings, strokes grouped into flashes, flags, and the ledger.

The CLI's ``summary`` and ``report`` commands, the report templates and the widgets all start
from :func:`load_event`, so every view of an event sees the same numbers.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from .config import EventConfig, load_event_config, with_overrides
from .errors import InputError
from .timeutil import parse_user_time


@dataclass
class Event:
    """Everything known about one event.

    Attributes
    ----------
    config : EventConfig
    strokes : DataFrame
        The whole stroke file, grouped (stroke table plus flash columns).
    flashes : DataFrame
        The whole file's flashes with continuing-current flags.
    ledger : Ledger
        The stroke reader's ledger.
    start, end : Timestamp
        The analysis window (UTC): event.toml's ``start``/``end`` or the data's extent.
    inputs : list of dict
        ``{"role", "path", "sha256", "rows"}`` for every input file read.
    sites, crew_log, lines, outages : DataFrame or None
        The optional inputs of the folder, read by their readers when the files exist.
    problems : list of (role, problem)
        Rows those readers could not use (each problem names its line or feature).
    """

    config: EventConfig
    strokes: pd.DataFrame
    flashes: pd.DataFrame
    ledger: object
    start: pd.Timestamp
    end: pd.Timestamp
    inputs: list = field(default_factory=list)
    sites: pd.DataFrame | None = None
    crew_log: pd.DataFrame | None = None
    lines: pd.DataFrame | None = None
    outages: pd.DataFrame | None = None
    problems: list = field(default_factory=list)
    extras: dict = field(default_factory=dict)

    @property
    def name(self) -> str:
        return self.config.name

    def window(self, start=None, end=None):
        """(strokes, flashes) of flashes whose first stroke is in [start, end] (default: the event window)."""
        from .flashes import select_window

        return select_window(self.strokes, self.flashes, start or self.start, end or self.end)


def sha256_of(path: Path) -> str:
    """SHA-256 hex digest of a file, read in 1 MiB blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _input(role: str, path: Path, rows: int) -> dict:
    return {"role": role, "path": str(path), "sha256": sha256_of(path), "rows": int(rows)}


def load_optional_inputs(event: Event, *, sites_path=None) -> Event:
    """Read the folder's optional files (sites, crew log, lines, outages) into `event`.

    A file that is absent leaves its attribute None. A file that cannot be read at all is an
    InputError naming it; rows a reader rejects go to ``event.problems``.

    Parameters
    ----------
    sites_path : path, optional
        A sites file to use instead of the event's own (``debrief report --sites``).
    """
    from .io.lines import read_lines, read_outages
    from .io.sites import read_crew_log, read_sites

    cfg = event.config
    tz = cfg.time_zone
    path = Path(sites_path) if sites_path else cfg.path("sites")
    if sites_path and not path.is_file():
        raise InputError(f"sites file not found: {path}")
    if path.is_file():
        event.sites, probs = read_sites(path, time_zone=tz, time_format=cfg.get("typed_time_format"))
        event.problems.extend(("sites", p) for p in probs)
        event.inputs.append(_input("sites", path, len(event.sites) + len(probs)))
    path = cfg.path("crew_log")
    if path.is_file():
        event.crew_log, probs = read_crew_log(path, time_zone=tz, time_format=cfg.get("typed_time_format"))
        event.problems.extend(("crew log", p) for p in probs)
        event.inputs.append(_input("crew log", path, len(event.crew_log) + len(probs)))
    path = cfg.path("lines")
    if path.is_file():
        event.lines, probs = read_lines(path, config=cfg)
        event.problems.extend(("lines", p) for p in probs)
        event.inputs.append(_input("lines", path, len(event.lines) + len(probs)))
    path = cfg.path("outages")
    if path.is_file() and event.lines is not None:
        event.outages, probs = read_outages(path, tz=tz, line_ids=event.lines["line_id"], time_format=cfg.get("typed_time_format"))
        event.problems.extend(("outages", p) for p in probs)
        event.inputs.append(_input("outages", path, len(event.outages)))
    return event


def load_event(event_dir, *, overrides: dict | None = None, strict: bool = False, config: EventConfig | None = None,
               optional: bool = True, sites_path=None, strokes_path=None) -> Event:
    """Load an event folder: read strokes, group flashes, flag continuing-current suspects.

    Parameters
    ----------
    event_dir : path
        Folder with event.toml and the stroke file.
    overrides : dict, optional
        ``{"section.key": value}`` settings that replace event.toml's.
    strict : bool
        Any rejected stroke row is fatal.
    config : EventConfig, optional
        Already-loaded settings (then `event_dir` and `overrides` are not read again).
    optional : bool
        Also read the folder's sites, crew log, lines and outages when present.
    sites_path : path, optional
        A sites file to use instead of the folder's own.
    strokes_path : path, optional
        A stroke file to use instead of the folder's own (the CLI's STROKES argument).
    """
    from .continuing_current import flag_continuing_current
    from .flashes import group_flashes
    from .io.strokes import read_strokes

    cfg = config if config is not None else with_overrides(load_event_config(event_dir), overrides or {})
    path = Path(strokes_path) if strokes_path is not None else cfg.path("strokes")
    if not path.is_file():
        raise InputError(f"event {cfg.name!r}: stroke file not found: {path}")
    strokes, ledger = read_strokes(path, config=cfg, strict=strict)
    if len(strokes) == 0:
        raise InputError(f"event {cfg.name!r}: no usable strokes in {path}")
    grouped, flashes = group_flashes(strokes, cfg)
    flashes = flag_continuing_current(grouped, flashes, cfg)
    tz = cfg.time_zone
    start = parse_user_time(cfg.get("start"), tz, what="event.toml start", time_format=cfg.get("typed_time_format")) if cfg.get("start") else grouped["time"].min()
    end = parse_user_time(cfg.get("end"), tz, what="event.toml end", time_format=cfg.get("typed_time_format")) if cfg.get("end") else grouped["time"].max()
    if end < start:
        raise InputError(f"event {cfg.name!r}: end ({end}) is before start ({start})")
    event = Event(config=cfg, strokes=grouped, flashes=flashes, ledger=ledger, start=start, end=end,
                  inputs=[_input("strokes", path, ledger.rows_read)])
    return load_optional_inputs(event, sites_path=sites_path) if optional else event

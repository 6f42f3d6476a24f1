"""Building blocks of the report's cells: parameters, the event's data, and escaped HTML pieces.

The template notebooks call these so that every section reads its parameters the same way and
every piece of text a user typed (event name, site names, notes, file names) is HTML-escaped
before it is displayed. Nothing here computes a statistic: the numbers come from the core
modules (one number, one implementation); this module only lays them out.
"""

from __future__ import annotations

import base64
import html
import importlib
import json
import os
import platform
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .. import __version__
from ..references import REFERENCES, cite

#: Environment variable that may name the parameters file (else ``params.json`` in the cwd).
PARAMS_ENV = "DEBRIEF_REPORT_PARAMS"

#: File name of the crew log in an event folder (``site, stopped, resumed``), optional.

#: Parameters a template understands, with their defaults (all plain JSON data).
DEFAULT_PARAMS = {
    "event_dir": None,
    "sites": None,
    "start": None,
    "end": None,
    "tz": None,
    "show_code": False,
    "command": None,
    "generated_utc": None,
    "sections": None,
}

#: The cautions of the trade that every report carries (plain words; the modules add their own).
CAUTIONS = (
    "This report is a record of what a lightning location network reported, not a warning and not "
    "a forecast. It cannot say that lightning will or will not strike anywhere.",
    "Lightning location networks miss some flashes and more strokes (detection efficiency below "
    "100 %), and every reported position has a location error described by its error ellipse. "
    "The absence of a recorded stroke near a place does not prove that lightning did not strike there.",
    "Probabilities in this report are models of the network's stated location error "
    "(a bivariate normal fitted to the reported ellipse); they are only as good as the network's "
    "ellipses and its stated confidence level.",
    "Peak currents are the network's estimates from the radiated field, not measurements at the "
    "point of strike; classification of ground strokes and cloud pulses is also an estimate, and "
    "weak positive 'ground' reports are often cloud pulses.",
    "Continuing-current flags are a suspicion from stroke patterns only: a network of this kind "
    "does not measure continuing current. A flag is a reason to look closer, not a finding.",
    "Conclusions about damage, its cause, or the safety of people and equipment need qualified "
    "people who weigh all evidence, and defer to local codes, standards and licensed practice.",
)

#: Methods applied in the report, with the published source of each (module docstrings add more);
#: citations by key from :mod:`debrief.references`.
METHODS = (
    ("Stroke-to-flash grouping",
     "Strokes join a flash within a time from the previous stroke, a duration from the first stroke, "
     "a distance from the first stroke and a maximum number of strokes (settings under [grouping]).",
     cite("Cummins1998")),
    ("Low-amplitude positive reports",
     "Positive ground reports below [grouping] likely_ic_below_ka are flagged as likely cloud pulses "
     "and left out of the positive share.",
     cite("CumminsMurphy2009", "Biagi2007")),
    ("Location uncertainty",
     "A reported p-ellipse is taken as a contour of a bivariate normal: semi-axis = k_p sigma with "
     "k_p = sqrt(-2 ln(1 - p)) (chi-square with 2 degrees of freedom), e.g. 1.1774 for p = 0.5.",
     cite("Johnson1994", "CumminsMurphy2009")),
    ("Continuing-current suspicion",
     "Positive ground flashes (single- and multi-stroke) with a positive stroke at or above a "
     "current threshold, and weak negative strokes followed by a long interval in the same channel, are "
     "flagged as suspects.",
     cite("Saba2010", "Saba2006", "Rakov1990", "Kitagawa1962")),
    ("Peak-current distributions",
     "Observed |peak current| compared above the detection floor with the log-logistic forms "
     "P(I >= i) = 1/(1 + (i/31)^2.6) (first strokes) and 1/(1 + (i/12)^2.7) (subsequent strokes).",
     cite("IEEE1410", "IEEE1243")),
    ("Direct strikes and induced overvoltage",
     "Electrogeometric model r = 10 I^0.65 m; induced voltage by Rusck's formula "
     "U = Z0 I h / y (1 + (beta/sqrt 2)/sqrt(1 - beta^2/2)), Z0 = 30 ohm; flashover when "
     "U > 1.5 CFO.",
     cite("Rusck1958", "IEEE1410", "Eriksson1987")),
    ("Crew alert periods",
     "An alert starts with a stroke within the stop radius and ends a fixed time after the last "
     "such stroke (30 min, the 30-minute rule).",
     cite("Holle1999") + " (common practice)"),
    ("Distances and bearings",
     "Geodesics on the WGS84 ellipsoid; maps and ellipse math in a local azimuthal equidistant plane.",
     cite("Karney2013")),
)


def esc(value) -> str:
    """HTML-escaped text of `value` (None and NaN as an empty string)."""
    if value is None:
        return ""
    if isinstance(value, float) and not np.isfinite(value):
        return ""
    return html.escape(str(value), quote=True)


def read_params(path: str | os.PathLike | None = None) -> dict:
    """The report parameters: a JSON file (data only, never code), with defaults filled in.

    Looks at `path`, then the file named by ``$DEBRIEF_REPORT_PARAMS``, then ``params.json`` in
    the working folder. Without any of them (a user opening the template in JupyterLab) the
    example event next to the templates is used.
    """
    candidates = [path, os.environ.get(PARAMS_ENV), "params.json"]
    params = dict(DEFAULT_PARAMS)
    for c in candidates:
        if c and Path(c).is_file():
            with open(c, encoding="utf-8") as f:
                data = json.load(f)
            if not isinstance(data, dict):
                raise ValueError(f"{c}: report parameters must be a JSON object")
            params.update(data)
            break
    if not params["event_dir"]:
        params["event_dir"] = str(Path(__file__).resolve().parents[2] / "example_event")
    return params


def _has_module(name: str) -> bool:
    try:
        importlib.import_module(name)
        return True
    except ModuleNotFoundError as e:
        if e.name == name:
            return False
        raise


@dataclass
class ReportData:
    """What the report's sections share: the loaded event, its window, and the optional inputs."""

    params: dict
    event: object
    start: pd.Timestamp
    end: pd.Timestamp
    strokes: pd.DataFrame
    flashes: pd.DataFrame
    tz: str | None
    sites: pd.DataFrame | None = None
    sites_path: Path | None = None
    lines: pd.DataFrame | None = None
    outages: pd.DataFrame | None = None
    crew_log: pd.DataFrame | None = None
    problems: list = field(default_factory=list)
    inputs: list = field(default_factory=list)
    analysis: object = None

    @property
    def name(self) -> str:
        return self.event.name

    @property
    def config(self):
        return self.event.config


def load_report_data(params: dict) -> ReportData:
    """Load the event named by the parameters, its window, and any sites, lines and outages.

    Uses :func:`debrief.event.load_event` (the same loader as the CLI and the widgets) and the
    readers of :mod:`debrief.io`; a file that is absent leaves its section out.
    """
    from ..analysis import analyse
    from ..event import load_event
    from ..timeutil import parse_user_time

    overrides = {"time_zone": params.get("tz")} if params.get("tz") else None
    event = load_event(params["event_dir"], overrides=overrides, sites_path=params.get("sites"))
    cfg = event.config
    tz = cfg.time_zone
    start = parse_user_time(params["start"], tz, what="start") if params.get("start") else event.start
    end = parse_user_time(params["end"], tz, what="end") if params.get("end") else event.end
    analysis = analyse(event, start, end)
    strokes, flashes = analysis.flash_strokes, analysis.flashes
    sites_path = Path(params["sites"]) if params.get("sites") else cfg.path("sites")
    data = ReportData(params=params, event=event, start=start, end=end, strokes=strokes, flashes=flashes, tz=tz,
                      sites=event.sites, sites_path=sites_path if event.sites is not None else None,
                      lines=event.lines, outages=event.outages, crew_log=event.crew_log,
                      problems=list(event.problems), inputs=list(event.inputs), analysis=analysis)
    return data


# ---------------------------------------------------------------------------------------------
# HTML pieces. Every value passes through esc(); only our own markup is left unescaped.


def _fmt(v, fmt: str | None = None) -> str:
    if v is None or v is pd.NA or v is pd.NaT or (isinstance(v, (float, np.floating)) and not np.isfinite(v)):
        return "–"
    if isinstance(v, pd.Timestamp):
        from ..timeutil import iso_utc

        return esc(iso_utc(v)) if v.tzinfo is not None else esc(v.isoformat())
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (list, tuple, np.ndarray)):
        return esc(", ".join(str(x) for x in v))
    if fmt and isinstance(v, (int, float, np.integer, np.floating)):
        return esc(format(v, fmt))
    if isinstance(v, (float, np.floating)):
        return esc(f"{v:.6g}")
    if isinstance(v, (np.integer, int)):
        return esc(f"{int(v):,}")
    return esc(v)


def html_table(frame: pd.DataFrame, *, columns=None, headers=None, formats=None, caption=None,
               max_rows: int | None = None, css_class: str = "debrief-table") -> str:
    """An escaped HTML table of `frame` (index left out).

    Parameters
    ----------
    columns : list, optional
        Columns to show, in order (default all).
    headers : dict, optional
        Display names of columns.
    formats : dict, optional
        ``{column: format_spec}`` for numbers, e.g. ``".1f"``.
    max_rows : int, optional
        Show at most this many rows and say how many were left out.
    """
    cols = list(columns) if columns is not None else list(frame.columns)
    headers = headers or {}
    formats = formats or {}
    shown = frame if max_rows is None or len(frame) <= max_rows else frame.iloc[:max_rows]
    out = [f'<table class="{esc(css_class)}">']
    if caption:
        out.append(f"<caption>{esc(caption)}</caption>")
    out.append("<thead><tr>" + "".join(f"<th>{esc(headers.get(c, c))}</th>" for c in cols) + "</tr></thead>")
    out.append("<tbody>")
    values = {c: shown[c].tolist() for c in cols}
    for i in range(len(shown)):
        cells = []
        for c in cols:
            v = values[c][i]
            num = isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, (bool, np.bool_))
            cells.append(f'<td class="num">{_fmt(v, formats.get(c))}</td>' if num else f"<td>{_fmt(v, formats.get(c))}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    if len(shown) < len(frame):
        out.append(f'<p class="debrief-note">The first {len(shown):,} of {len(frame):,} rows are shown.</p>')
    return "".join(out)


def kv_table(rows, *, caption=None) -> str:
    """A two-column table of (label, value) pairs; values escaped, labels escaped."""
    out = ['<table class="debrief-table debrief-kv">']
    if caption:
        out.append(f"<caption>{esc(caption)}</caption>")
    out.append("<tbody>")
    for label, value in rows:
        out.append(f"<tr><th>{esc(label)}</th><td>{_fmt(value)}</td></tr>")
    out.append("</tbody></table>")
    return "".join(out)


def figure_html(svg: str, *, alt: str, caption: str | None = None, width_px: int | None = None) -> str:
    """An SVG figure as an ``<img>`` with a data URI (self-contained, isolated ids) and a caption."""
    b64 = base64.b64encode(svg.encode("utf-8")).decode("ascii")
    w = f' width="{int(width_px)}"' if width_px else ""
    cap = f"<figcaption>{esc(caption)}</figcaption>" if caption else ""
    return (f'<figure class="debrief-figure"><img alt="{esc(alt)}"{w} '
            f'src="data:image/svg+xml;base64,{b64}">{cap}</figure>')


def section_heading(title: str, intro: str | None = None, *, level: int = 2) -> str:
    p = f"<p>{esc(intro)}</p>" if intro else ""
    return f'<h{level} class="debrief-section">{esc(title)}</h{level}>{p}'


def note(text: str, *, kind: str = "note") -> str:
    """A paragraph; kind ``caution`` draws it as a caution box."""
    return f'<p class="debrief-{esc(kind)}">{esc(text)}</p>'


def bullet_list(items) -> str:
    return "<ul>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>"


def window_text(start, end, tz: str | None) -> str:
    """The window in UTC, and in the display zone when one is set."""
    from ..timeutil import format_times

    return f"{format_times(start, tz)} to {format_times(end, tz)}"


def title_block(data: ReportData) -> str:
    """Report title, window in UTC and display zone, version and generation time."""
    p = data.params
    tz = data.tz or "UTC"
    gen = p.get("generated_utc") or "not recorded"
    rows = [
        ("Window (UTC)", f"{_iso(data.start)} to {_iso(data.end)}"),
        (f"Window ({tz})", _local(data.start, data.tz) + " to " + _local(data.end, data.tz)),
        ("Event folder", str(p.get("event_dir"))),
        ("Tool", f"debrief {__version__}"),
    ]
    body = "".join(f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>" for k, v in rows)
    body += f'<tr><th>Generated</th><td><span class="debrief-generated">{esc(gen)}</span></td></tr>'
    return (f'<header class="debrief-title"><p class="debrief-kicker">Lightning incident report</p>'
            f"<h1>{esc(data.name)}</h1>"
            f'<table class="debrief-table debrief-kv"><tbody>{body}</tbody></table></header>')


def _iso(ts) -> str:
    from ..timeutil import iso_utc

    return iso_utc(ts)


def _local(ts, tz: str | None) -> str:
    t = pd.Timestamp(ts).tz_convert("UTC")
    if not tz:
        return t.strftime("%Y-%m-%d %H:%M:%S UTC")
    from ..timeutil import zone

    return t.tz_convert(zone(tz)).strftime("%Y-%m-%d %H:%M:%S %Z (UTC%z)")


def cautions_html(extra=(), *, general: bool = True, title: str = "Read with care.") -> str:
    """The cautions of the trade (`general`), with any module-specific ones after them."""
    items = (list(CAUTIONS) if general else []) + [c for c in dict.fromkeys(extra) if c not in CAUTIONS]
    return f'<div class="debrief-caution"><p><strong>{esc(title)}</strong></p>' + bullet_list(items) + "</div>"


def module_cautions(*module_names) -> list[str]:
    """``CAUTIONS`` declared by the named core modules that exist (a tuple/list of sentences)."""
    out = []
    for name in module_names:
        if not _has_module(name):
            continue
        mod = importlib.import_module(name)
        c = getattr(mod, "CAUTIONS", ())
        if isinstance(c, dict):
            c = list(c.values())
        out.extend(str(x) for x in c)
    return out


_REF_HEAD = re.compile(r"^\s*References\s*\n\s*-{5,}\s*\n", re.M)


def module_references(module_name: str) -> list[str]:
    """The ``References`` entries of a module's docstring (numpydoc ``.. [Key] note`` items).

    Each comes back as ``[Key] full citation (from debrief.references) Here: note``; an entry
    whose key is not in the list comes back as written.
    """
    if not _has_module(module_name):
        return []
    doc = importlib.import_module(module_name).__doc__ or ""
    m = _REF_HEAD.search(doc)
    if not m:
        return []
    refs, current = [], None
    for line in doc[m.end():].splitlines():
        s = line.strip()
        if re.match(r"^\.\. \[\w+\]", s):
            if current:
                refs.append(current)
            current = s[3:]  # "[Key] note": the key is resolved below
        elif s and current is not None and line.startswith((" ", "\t")):
            current += " " + s
        elif not s and current is not None:
            refs.append(current)
            current = None
        elif s and current is None and refs:
            break
    if current:
        refs.append(current)
    return [_resolve_reference(r) for r in refs]


def _resolve_reference(entry: str) -> str:
    """``[Key] note`` -> ``[Key] citation Here: note`` when the key is in debrief.references."""
    m = re.match(r"^\[(\w+)\]\s*(.*)$", entry)
    if not m or m.group(1) not in REFERENCES:
        return entry
    key, note = m.groups()
    return f"[{key}] {REFERENCES[key]}" + (f" Here: {note}" if note else "")


CORE_MODULES = ("debrief.flashes", "debrief.polarity", "debrief.continuing_current", "debrief.uncertainty",
                "debrief.contacts", "debrief.geodesy", "debrief.sites", "debrief.alerts", "debrief.lines",
                "debrief.outages")


def methods_html() -> str:
    """Methods applied, with their published sources, then the references of each core module."""
    rows = pd.DataFrame(METHODS, columns=["topic", "method", "source"])
    out = [html_table(rows, headers={"topic": "Topic", "method": "Method", "source": "Published source"})]
    refs = []
    for name in CORE_MODULES:
        for r in module_references(name):
            refs.append((name.split(".")[-1], r))
    if refs:
        out.append("<h3>References cited by the modules used</h3>")
        out.append(html_table(pd.DataFrame(refs, columns=["module", "reference"]),
                              headers={"module": "Module", "reference": "Reference"}))
    return "".join(out)


def inputs_html(inputs) -> str:
    """Input files with their role, rows and SHA-256."""
    if not inputs:
        return note("No input files were recorded.")
    frame = pd.DataFrame(inputs)
    for c in ("role", "path", "rows", "sha256"):
        if c not in frame:
            frame[c] = None
    return html_table(frame, columns=["role", "path", "rows", "sha256"],
                      headers={"role": "Role", "path": "File", "rows": "Rows read", "sha256": "SHA-256"},
                      css_class="debrief-table debrief-hashes")


def ledger_html(ledger, problems=()) -> str:
    """The stroke reader's data ledger, and the problems of the other readers."""
    parts = []
    d = ledger.to_dict() if hasattr(ledger, "to_dict") else dict(ledger)
    counts = [(k.replace("_", " "), d[k]) for k in ("rows_read", "rows_accepted", "rows_rejected", "duplicates_dropped") if k in d]
    parts.append(kv_table(counts, caption="Stroke file"))
    rejected = d.get("rejected")
    if rejected:
        if isinstance(rejected, dict):
            rej = pd.DataFrame([{"reason": k, **(v if isinstance(v, dict) else {"rows": v})} for k, v in rejected.items()])
        else:
            rej = pd.DataFrame(rejected)
        parts.append(html_table(rej, caption="Rejected rows by reason"))
    notes = d.get("notes") or []
    if notes:
        parts.append("<p>Notes:</p>" + bullet_list(notes))
    if problems:
        rows = [{"file": role, "problem": p.text()} for role, p in problems]
        parts.append(html_table(pd.DataFrame(rows), caption="Problems in the other input files", max_rows=200))
    return "".join(parts)


def _flatten(d: dict, prefix: str = "") -> list[tuple[str, object]]:
    out = []
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict) and k in ("grouping", "continuing_current", "statistics", "alerts", "lines"):
            out.extend(_flatten(v, prefix=f"[{k}] "))
        elif isinstance(v, dict):
            out.append((key, json.dumps(v, sort_keys=True)))
        else:
            out.append((key, v))
    return out


def parameters_html(config) -> str:
    """Every setting used (defaults included), and which ones the event folder or options set."""
    rows = []
    for key, value in _flatten(config.as_toml_dict()):
        section, _, k = key.rpartition("] ")
        section = section.lstrip("[")
        given = config.is_given(section, k if section else key)
        rows.append({"setting": key, "value": value if not isinstance(value, float) else f"{value:g}",
                     "set by": "event.toml or option" if given else "default"})
    return html_table(pd.DataFrame(rows), css_class="debrief-table debrief-params")


def environment_rows() -> list[tuple[str, str]]:
    """Versions of the tool and of the libraries whose numbers appear in the report."""
    import matplotlib
    import scipy

    return [("debrief", __version__), ("Python", platform.python_version()), ("numpy", np.__version__),
            ("pandas", pd.__version__), ("scipy", scipy.__version__), ("matplotlib", matplotlib.__version__)]


def command_html(command: str | None) -> str:
    """The command that reproduces the report, as preformatted text."""
    if not command:
        return note("This notebook was run by hand; re-run it with the same parameters to reproduce it.")
    return f'<pre class="debrief-command">{esc(command)}</pre>'


# ---------------------------------------------------------------------------------------------
# Section pieces: each lays out what a core function returned.


def event_centre(data: ReportData):
    """Centre of the overview map's plane: the middle of the strokes' extent (None: let the figure decide)."""
    s = data.strokes
    if not len(s):
        return None
    return (float((s["latitude"].min() + s["latitude"].max()) / 2), float((s["longitude"].min() + s["longitude"].max()) / 2))


def event_map_caption(strokes: pd.DataFrame) -> str:
    """Caption of the overview map: says whether markers or a density grid are drawn."""
    from ..figures import EVENT_MAP_MAX_POINTS

    n_cg = int((strokes["type"].astype(str) == "CG").sum())
    if n_cg > EVENT_MAP_MAX_POINTS:
        what = (f"Density of the {n_cg:,} ground strokes per 2 km cell (too many to draw one by one; "
                "cloud pulses left out)")
    else:
        what = "Ground strokes by polarity (dash negative, plus positive), cloud pulses as open circles"
    return what + "; sites with their search radius, power lines as dark lines. Local plane in km."


def overview_facts(data: ReportData) -> str:
    """At-a-glance counts of the window, from the core polarity functions."""
    from .. import polarity

    s, f, cfg = data.strokes, data.flashes, data.config
    st = s["type"].astype(str)
    ft = f["type"].astype(str)
    share = polarity.positive_share(f)
    mm = polarity.mean_multiplicity(f)
    de = cfg.get("flash_detection_efficiency")
    de_src = cfg.get("flash_detection_efficiency_source")
    share_txt = (f"{share['share']:.1%} ({share['positive']:,} of {share['ground_flashes']:,} ground flashes; "
                 f"{share['likely_ic_left_out']:,} likely cloud pulses left out)") if share["ground_flashes"] else "no ground flashes"
    rows = [
        ("Strokes in window", f"{len(s):,} ({int((st == 'CG').sum()):,} ground strokes, {int((st == 'IC').sum()):,} cloud pulses)"),
        ("Flashes in window", f"{len(f):,} ({int((ft == 'CG').sum()):,} ground flashes, {int((ft == 'IC').sum()):,} cloud flashes)"),
        ("Positive share of ground flashes", share_txt),
        ("Mean strokes per ground flash", _mm_text(mm)),
        ("Flashes suspected of continuing current", f"{int(f['cc_suspect'].sum()):,}" if "cc_suspect" in f else "not computed"),
        ("Flash detection efficiency", (f"{de:.0%}" + (f" ({de_src})" if de_src else "")) if de else "not stated for this network"),
        ("Error ellipses", f"{cfg.get('ellipse_confidence'):.0%} confidence" +
         (f"; strokes without one: {cfg.get('default_uncertainty_km'):g} km circle" if cfg.get("default_uncertainty_km") else "")),
    ]
    return kv_table(rows, caption="At a glance")


def _mm_text(mm: pd.DataFrame) -> str:
    parts = []
    for pol in ("negative", "positive"):
        if pol in mm.index and mm.loc[pol, "flashes"]:
            parts.append(f"{pol} {mm.loc[pol, 'mean_multiplicity']:.2f} "
                         f"({mm.loc[pol, 'single_stroke_share']:.0%} single-stroke)")
    return "; ".join(parts) if parts else "no ground flashes"


def multiplicity_html(flashes: pd.DataFrame) -> str:
    """The multiplicity table of :func:`debrief.polarity.multiplicity_table`, the means and intervals."""
    from .. import polarity

    mt = polarity.multiplicity_table(flashes).reset_index()
    table = html_table(mt, columns=["multiplicity", "negative_count", "negative_percent", "positive_count",
                                    "positive_percent", "all_count", "all_percent"],
                       headers={"multiplicity": "Strokes per flash", "negative_count": "Negative flashes",
                                "negative_percent": "% of negative", "positive_count": "Positive flashes",
                                "positive_percent": "% of positive", "all_count": "All ground flashes",
                                "all_percent": "% of all"},
                       formats={"negative_percent": ".1f", "positive_percent": ".1f", "all_percent": ".1f"},
                       caption="Ground flashes by multiplicity", css_class="debrief-table debrief-multiplicity")
    mm = polarity.mean_multiplicity(flashes).reset_index(names="polarity")
    means = html_table(mm, headers={"polarity": "Polarity", "flashes": "Flashes",
                                    "mean_multiplicity": "Mean strokes per flash",
                                    "single_stroke_share": "Single-stroke share"},
                       formats={"mean_multiplicity": ".2f", "single_stroke_share": ".1%"})
    iv = polarity.interstroke_summary(flashes).reset_index(names="polarity")
    ivs = html_table(iv, headers={"polarity": "Polarity", "flashes": "Multi-stroke flashes", "intervals": "Intervals",
                                  "zero_intervals": "Zero intervals",
                                  "geometric_mean_ms": "Geometric mean, ms", "median_ms": "Median, ms"},
                     formats={"geometric_mean_ms": ".1f", "median_ms": ".1f"}, caption="Interstroke intervals")
    return table + means + ivs + note(
        "A network misses some subsequent strokes, so observed multiplicities are lower than those "
        "of optical studies (3 to 5 strokes per negative flash).")


def peak_current_html(strokes: pd.DataFrame, floor_ka: float) -> str:
    """Medians of first and subsequent strokes, and the comparison with the IEEE distributions."""
    from .. import polarity

    med = polarity.first_subsequent_medians(strokes).reset_index(names="polarity")
    a = html_table(med, headers={"polarity": "Polarity", "first_count": "First strokes",
                                 "first_median_ka": "Median |Ip| first, kA", "subsequent_count": "Subsequent strokes",
                                 "subsequent_median_ka": "Median |Ip| subsequent, kA"},
                   formats={"first_median_ka": ".1f", "subsequent_median_ka": ".1f"}, caption="Median peak current")
    ref = polarity.compare_reference(strokes, floor_ka=floor_ka).reset_index(names="strokes compared")
    b = html_table(ref, headers={"floor_ka": "Floor, kA", "strokes": "Strokes", "below_floor": "Below floor",
                                 "median_ka": "Median, kA", "reference_median_ka": "IEEE median above floor, kA",
                                 "ks_distance": "KS distance", "at_ka": "at kA"},
                   formats={"floor_ka": "g", "median_ka": ".1f", "reference_median_ka": ".1f", "ks_distance": ".3f",
                            "at_ka": ".1f"},
                   caption="Negative ground strokes beside the IEEE Std 1410 distributions (above the floor)")
    return a + b


def time_ms(ts) -> str:
    """UTC time to the millisecond, ISO 8601 with Z (table cells)."""
    if ts is None or pd.isna(ts):
        return ""
    t = pd.Timestamp(ts).tz_convert("UTC")
    return t.strftime("%Y-%m-%dT%H:%M:%S.") + f"{t.microsecond // 1000:03d}Z"


def continuing_current_html(flashes: pd.DataFrame, max_rows: int = 50) -> str:
    """The flashes suspected of continuing current, with their reasons in words."""
    reasons = {}
    try:
        from .. import continuing_current as cc

        for code, v in dict(getattr(cc, "REASONS", {})).items():
            if isinstance(v, str):
                reasons[str(code)] = (v, "")
            elif hasattr(v, "get"):
                reasons[str(code)] = (str(v.get("explanation", "")), str(v.get("source", "")))
            else:
                reasons[str(code)] = ("; ".join(map(str, v)), "")
    except ModuleNotFoundError:
        pass
    if "cc_suspect" not in flashes:
        return note("Continuing-current flags were not computed.")
    sel = flashes[flashes["cc_suspect"].to_numpy(dtype=bool)].copy()
    if not len(sel):
        return note("No flash in the window meets the suspicion criteria.")
    sel["time"] = [time_ms(t) for t in sel["time"]]
    sel["cc_reasons"] = [str(r).replace(";", ", ") for r in sel["cc_reasons"]]
    codes = pd.Series([c for r in flashes.loc[flashes["cc_suspect"].to_numpy(dtype=bool), "cc_reasons"]
                       for c in str(r).split(";") if c]).value_counts()
    table = html_table(sel, columns=["flash_id", "time", "type", "polarity", "multiplicity", "max_abs_peak_ka",
                                     "duration_ms", "cc_reasons"],
                       headers={"flash_id": "Flash", "time": "First stroke (UTC)", "type": "Type", "polarity": "Polarity",
                                "multiplicity": "Strokes", "max_abs_peak_ka": "Max |Ip|, kA",
                                "duration_ms": "Duration, ms", "cc_reasons": "Reason codes"},
                       formats={"max_abs_peak_ka": ".1f", "duration_ms": ".0f"}, max_rows=max_rows,
                       caption="Suspected flashes, in time order", css_class="debrief-table debrief-cc")
    legend = ""
    if reasons:
        legend = html_table(pd.DataFrame([(k, int(codes.get(k, 0)), e, src) for k, (e, src) in reasons.items()],
                                         columns=["code", "flashes", "meaning", "source"]),
                            headers={"code": "Code", "flashes": "Flashes", "meaning": "Meaning", "source": "Published basis"},
                            caption="Reason codes")
    return (note(f"{len(sel):,} of {len(flashes):,} flashes are suspected. A suspicion, not a detection: "
                 "the network does not measure continuing current.") + legend + table)


def outages_html(result) -> str:
    """The verdict of each outage with its best candidate stroke, and the verdict legend."""
    from .. import outages as om

    v = result.verdicts.copy()
    if not len(v):
        return note("The outage log has no rows.")
    v["time"] = [_iso(t) if pd.notna(t) else "" for t in v["time"]]
    v["best_stroke_time"] = [time_ms(t) for t in v.get("best_stroke_time", [pd.NaT] * len(v))]
    # The best stroke's time is in the reasons below (to the microsecond); the table keeps to what fits on paper.
    cols = [c for c in ["outage_id", "line_id", "time", "verdict", "coverage", "n_candidates", "n_contacts",
                        "best_peak_current_ka", "best_dt_s", "best_distance_m", "best_p_within_corridor",
                        "best_p_direct", "best_p_induced_fo", "current_sensitive"] if c in v]
    table = html_table(v, columns=cols, headers={
        "outage_id": "Outage", "line_id": "Line", "time": "Time (UTC)", "verdict": "Verdict",
        "coverage": "Cover\u00adage", "n_contacts": "Con\u00adtacts",
        "n_candidates": "Candi\u00addates", "best_stroke_time": "Best stroke (UTC)", "best_peak_current_ka": "Ip, kA",
        "best_dt_s": "dt, s", "best_distance_m": "To line, m", "best_p_within_corridor": "P(corridor)",
        "best_p_direct": "P(direct)", "best_p_induced_fo": "P(induced)", "current_sensitive": "Changes at ±30 % Ip"},
        formats={"best_peak_current_ka": ".1f", "best_dt_s": ".2f", "best_distance_m": ".0f",
                 "best_p_within_corridor": ".3f", "best_p_direct": ".3f", "best_p_induced_fo": ".3f"},
        caption="Verdict per outage (probabilities of the best ground contact: its strokes combined into one fix)",
        css_class="debrief-table debrief-outages")
    if "reasons" in v:
        table += "".join(f'<p class="debrief-sentence"><strong>{esc(o)} ({esc(ln)}):</strong> {esc(r)}</p>'
                         for o, ln, r in zip(v["outage_id"], v["line_id"], v["reasons"]) if isinstance(r, str) and r)
    counts = v["verdict"].value_counts()
    legend = pd.DataFrame([{"verdict": k, "outages": int(counts.get(k, 0)), "rule": r, "meaning": m}
                           for k, (r, m) in om.VERDICTS.items()])
    leg = html_table(legend, headers={"verdict": "Verdict", "outages": "Outages", "rule": "Rule", "meaning": "Meaning"},
                     caption="Verdicts")
    notes = bullet_list(result.notes) if getattr(result, "notes", None) else ""
    return table + leg + notes


def site_results(data: ReportData):
    """The claim sites' checks from the report's analysis (:meth:`debrief.analysis.Analysis.check_sites`).

    The same call and window as ``debrief sites``: a site's own ``start``/``end`` is its claim
    period, searched where it meets the analysis window, and its coverage is stated.

    Returns
    -------
    summary : DataFrame
        One row per claim site (``SITES_COLUMNS`` of :mod:`debrief.sites`).
    per_site : list of (site row, candidates DataFrame, parcel outline or None)
    """
    summary, cand = data.analysis.site_results
    bad = [p for role, p in data.problems if role == "sites"]
    if bad:  # a claim that could not be read is listed too: not checked, and why
        summary = pd.concat([summary, pd.DataFrame({
            "name": [p.item_id or f"line {p.line}" for p in bad], "coverage": "not_checked",
            "sentence": [f"Not checked: {p.message} ({p.file}, line {p.line})." for p in bad]})], ignore_index=True)
    per_site = []
    claims = data.analysis.claim_sites()
    parcels = claims["parcel_file"].fillna("").astype(str).tolist() if "parcel_file" in claims else [""] * len(claims)
    for i, row in summary.iterrows():
        if row["coverage"] == "not_checked":
            continue
        c = cand[cand["site"].astype(str).to_numpy() == str(row["name"])] if len(cand) else cand
        parcel = None
        if i < len(parcels) and parcels[i]:
            from ..io.sites import read_parcel

            parcel = read_parcel(parcels[i])
        per_site.append((row, c.reset_index(drop=True), parcel))
    return summary, per_site


def _pct(p) -> str:
    try:
        from ..sites import percent

        return percent(float(p))
    except ImportError:
        return f"{float(p):.1%}"


def sites_summary_html(summary: pd.DataFrame) -> str:
    """One row per site: window, candidates, nearest, probabilities, and the site's sentence."""
    if not len(summary):
        return note("No site in the sites file has a search radius (radius_km).")
    s = summary.copy()
    read = (s["coverage"] != "not_checked").to_numpy() if "coverage" in s else np.ones(len(s), bool)
    for c in ("start", "end"):
        s[c] = [time_ms(t)[:-5] + "Z" if pd.notna(t) else ("open" if ok else "–") for t, ok in zip(s[c], read)]
    for c in ("max_p_within", "p_any_within", "p_unrecorded"):
        if c in s:
            s[c] = [_pct(v) if pd.notna(v) else "–" for v in s[c]]
    table = html_table(s, columns=[c for c in ["name", "radius_km", "start", "end", "coverage", "n_ground_candidates",
                                               "n_ground_within", "nearest_km", "max_p_within", "p_any_within",
                                               "p_unrecorded"] if c in s],
                       headers={"name": "Site", "radius_km": "Radius, km", "start": "From (UTC)", "end": "To (UTC)",
                                "coverage": "Data coverage",
                                "n_ground_candidates": "Ground candidates", "n_ground_within": "Reported within",
                                "nearest_km": "Nearest, km", "max_p_within": "Highest P(within), one contact",
                                "p_any_within": "P(any ground contact within)",
                                "p_unrecorded": "P(unrecorded flash within)"},
                       formats={"radius_km": "g", "nearest_km": ".2f"}, caption="Sites checked",
                       css_class="debrief-table debrief-sites")
    sentences = "".join(f'<p class="debrief-sentence"><strong>{esc(n)}:</strong> {esc(t)}</p>'
                        for n, t in zip(s["name"], s.get("sentence", [""] * len(s))) if t)
    return table + sentences


def site_candidates_html(candidates: pd.DataFrame, max_rows: int = 25) -> str:
    """The candidate strokes of one site, most probable first."""
    if not len(candidates):
        return note("No stroke could have reached this site's circle in its window.")
    c = candidates.sort_values(["p_within", "distance_km"], ascending=[False, True], kind="stable").copy()
    c["time"] = [time_ms(t) for t in c["time"]]
    c["p_within"] = [_pct(v) for v in c["p_within"]]
    return html_table(c, columns=[k for k in ["time", "type", "peak_current_ka", "distance_km", "bearing_deg",
                                              "semi_major_km", "semi_minor_km", "p_within", "flash_id"] if k in c],
                      headers={"time": "Time (UTC)", "type": "Type", "peak_current_ka": "Ip, kA",
                               "distance_km": "Distance, km", "bearing_deg": "Bearing, °",
                               "semi_major_km": "Ellipse a, km", "semi_minor_km": "Ellipse b, km",
                               "p_within": "P(within radius)", "flash_id": "Flash"},
                      formats={"peak_current_ka": ".1f", "distance_km": ".2f", "bearing_deg": ".0f",
                               "semi_major_km": ".2f", "semi_minor_km": ".2f"},
                      max_rows=max_rows, caption="Candidate strokes, most probable first")


def alert_results(data: ReportData):
    """Crew alert periods from the report's analysis (:meth:`debrief.analysis.Analysis.alerts`), or None.

    The same call and window as ``debrief alerts``: (periods, totals, crew-log comparison or None).
    """
    if data.sites is None or not len(data.sites):
        return None
    return data.analysis.alerts()


def alerts_html(results, data: ReportData) -> str:
    """Alert periods as a timeline and a table, with the totals per site."""
    if results is None:
        return note("Alert periods are not part of this report (no sites, or the alert module is not installed).")
    from .. import alerts, figures

    periods, totals, comparison = results
    a = data.config["alerts"]
    intro = note(f"A period starts with a ground stroke within a site's stop radius (default {a['stop_km']:g} km) "
                 f"and ends {a['all_clear_min']:g} min after the last such stroke (the all-clear).")
    caution = f'<p class="debrief-caution">{esc(alerts.RECORD_NOTE)}</p>'
    tot = html_table(totals, headers={"site": "Site", "level": "Level", "n_periods": "Periods",
                                      "total_min": "Time in periods, min", "open_at_end": "Still open at end of window or data"},
                     formats={"total_min": ".0f"}, caption="Totals per site")
    if not len(periods):
        return intro + caution + tot + note("No stroke came within any crew site's radius in the window.")
    shown = periods.copy()
    lab = shown["site"].astype(str) + np.where(shown["level"].astype(str) == "stop", "", " (" + shown["level"].astype(str) + ")")
    fig_frame = pd.DataFrame({"label": lab, "start": shown["start"], "end": shown["all_clear"], "level": shown["level"]})
    t0 = min(data.start, fig_frame["start"].min())
    t1 = max(data.end, fig_frame["end"].max())
    svg = figures.to_svg(figures.periods_timeline(fig_frame, t0, t1, label_col="label", level_col="level"))
    for c in ("start", "last_stroke", "all_clear"):
        shown[c] = [time_ms(t)[:-5] + "Z" if pd.notna(t) else "" for t in shown[c]]
    table = html_table(shown, columns=list(alerts.PERIOD_COLUMNS),
                       headers={"site": "Site", "level": "Level", "start": "Start (UTC)", "last_stroke": "Last stroke (UTC)",
                                "all_clear": "All-clear (UTC)", "duration_min": "Duration, min", "n_strokes": "Strokes",
                                "nearest_km": "Nearest, km", "open_at_end": "Open at end of window or data",
                                "open_at_start": "May have begun before window or data", "coverage": "Data coverage",
                                "coverage_note": "Coverage note"},
                     formats={"duration_min": ".0f", "nearest_km": ".2f"}, caption="Alert periods", max_rows=300)
    crew = crew_log_html(comparison, data)
    return (intro + caution + figure_html(svg, alt="Alert periods per crew site",
                                          caption="Alert periods per crew site, start to all-clear (UTC): stop radius dark, warning radius light.")
            + tot + table + crew)


def crew_log_html(comparison: pd.DataFrame | None, data: ReportData) -> str:
    """The crew log beside the stop periods (the analysis's :func:`debrief.alerts.compare_crew_log`)."""
    if data.crew_log is None or comparison is None:
        return ""
    log = data.crew_log.copy()
    found = comparison.copy()
    for frame, cols in ((log, ("stopped", "resumed")), (found, ("start", "end"))):
        for c in cols:
            if c in frame:
                frame[c] = [time_ms(t)[:-5] + "Z" if pd.notna(t) else "not logged" for t in frame[c]]
    out = ["<h3>Crew log beside the stop periods</h3>",
           html_table(log, columns=[c for c in ("site", "stopped", "resumed", "source_row") if c in log],
                      headers={"site": "Site", "stopped": "Work stopped (UTC)", "resumed": "Resumed (UTC)",
                               "source_row": "Log line"}, caption="Logged stops")]
    if len(found):
        out.append(html_table(found, headers={"site": "Site", "finding": "Finding", "start": "From (UTC)",
                                              "end": "To (UTC)", "minutes": "Minutes", "crew_log_line": "Log line"},
                              formats={"minutes": ".0f"}, caption="Differences between the log and the stop periods"))
    else:
        out.append(note("The logged stops cover every stop period, and no stop was logged outside one."))
    return "".join(out)


def outage_figures_html(result, data: ReportData, max_outages: int = 12) -> str:
    """Per outage with candidates, side by side: a zoomed map (line, candidates, ellipses) and a
    timeline of the candidates against the trip and reclose times."""
    from .. import figures

    c = result.candidates
    if not len(c):
        return ""
    lines = data.lines.set_index("line_id") if data.lines is not None else None
    ellipse_cols = ["semi_major_km", "semi_minor_km", "major_bearing_deg"]
    out = []
    verdicts = result.verdicts.set_index("outage_id")
    for k, (oid, group) in enumerate(c.groupby("outage_id", sort=False)):
        if k >= max_outages:
            out.append(note(f"Maps and timelines are shown for the first {max_outages} outages with candidates."))
            break
        g = group.sort_values("rank", kind="stable").reset_index(drop=True)
        idx = g["stroke_index"].to_numpy()
        for col in ellipse_cols:
            if col in data.strokes:
                g[col] = data.strokes[col].to_numpy()[idx]
        line_id = g["line_id"].iloc[0]
        geom = lines.loc[line_id, "geometry"] if lines is not None and line_id in lines.index else None
        fault, orow = None, None
        if data.outages is not None:
            o = data.outages[data.outages["outage_id"] == oid]
            if len(o):
                orow = o.iloc[0]
                if {"fault_latitude", "fault_longitude"} <= set(o.columns):
                    fault = (float(orow["fault_latitude"]), float(orow["fault_longitude"]))
        verdict = str(verdicts.loc[oid, "verdict"]) if oid in verdicts.index else ""
        title = f"{oid} on {line_id}: {verdict}"
        svg = figures.to_svg(figures.outage_map(geom, g, fault_deg=fault, title=title))
        cells = [figure_html(svg, alt=f"Map of outage {oid}",
                             caption=f"Outage {oid}, line {line_id}: the candidate strokes and their error ellipses; "
                                     "the best candidate circled, its shortest way to the line dotted "
                                     "(distance from its reported position).")]
        if orow is not None and oid in verdicts.index:
            tol = float(verdicts.loc[oid, "clock_tolerance_s"])
            ops = orow.get("reclose_times") or ()
            svg = figures.to_svg(figures.outage_timeline(orow, g, tolerance_s=tol, tz=data.tz, title=title))
            cap = (f"Outage {oid}: the candidate strokes (stem height |peak current|) against the logged trip at "
                   f"{_iso(orow['time'])}"
                   + (f" and its {len(ops)} later operation(s) (dashed)" if len(ops) else "")
                   + f"; shaded: the candidate window, from {tol:g} s before the trip to {tol:g} s after "
                   + ("the last operation" if len(ops) else "it") + " (the clock tolerance); the best candidate circled. "
                   + f"The time axis is linear within {figures.TIMELINE_LINEAR_S:g} s of the trip and logarithmic beyond.")
            cells.append(figure_html(svg, alt=f"Timeline of outage {oid}", caption=cap))
        out.append('<div class="debrief-outage-figures" style="display:flex;flex-wrap:wrap;gap:0 1rem;'
                   'align-items:flex-start">'
                   + "".join(f'<div style="flex:1 1 24rem;min-width:0">{cell}</div>' for cell in cells) + "</div>")
    return "".join(out)


def window_coverage_html(data: ReportData) -> str:
    """The analysis window, the rule applied to it, and the data's coverage, for the record."""
    from ..analysis import WINDOW_RULE
    from ..contacts import INDEPENDENCE_NOTE

    a = data.analysis
    rows = [("Analysis window (UTC)", f"{_iso(a.start)} to {_iso(a.end)}"),
            ("Window rule", WINDOW_RULE),
            ("Coverage", a.coverage.describe()),
            ("Coverage source", f"{a.coverage.source} (time {a.coverage.time_source}, area {a.coverage.area_source})"),
            ("Ground contacts", INDEPENDENCE_NOTE)]
    return kv_table(rows)

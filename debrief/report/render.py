"""Event folder -> executed report notebook -> ONE self-contained HTML file.

The report is put together from the template notebooks in ``templates/`` (one per section:
``overview``, ``sites`` when the event has sites, ``outages`` when it has lines and an outage
log, and ``record``, the appendix every report carries). The parameters go to the notebook as
data: a ``params.json`` written next to the executed notebook, read by the first cell with
:func:`json.load`; no parameter value is ever pasted into code.

The notebook runs in a kernel started from this interpreter (``sys.executable``), whatever
``python3`` kernelspec the machine has, and is exported by nbconvert with the template in
``debrief/report/template`` (the lab template with every script from elsewhere left out). The
HTML is written to a temporary file and renamed, so a failed run leaves no half-written report.
"""

from __future__ import annotations

import copy
import json
import os
import shlex
import sys
import tempfile
from pathlib import Path
from typing import Callable

from .. import __version__
from ..errors import InputError
from ..io.atomic import atomic_path

PACKAGE_DIR = Path(__file__).resolve().parents[1]
TEMPLATE_BASEDIR = Path(__file__).resolve().parent
TEMPLATE_NAME = "template"

#: Order of the sections; a section appears when its `needs` are met.
SECTIONS = ("overview", "sites", "outages", "record")

#: Tags the templates use: dropped cells, the one shared set-up cell, the start of a section.
TAG_TEMPLATE_ONLY = "debrief-template-only"
TAG_SETUP = "debrief-setup"
TAG_SECTION = "debrief-section-start"

KERNEL_NAME = "debrief-python"
CELL_TIMEOUT_S = 600


class ReportError(InputError):
    """The report could not be made; the message names the event, the template and the cell."""


def templates_dir() -> Path:
    """Folder of the template notebooks: ``debrief/templates`` when installed there, else the repo's."""
    for d in (PACKAGE_DIR / "templates", PACKAGE_DIR.parent / "templates"):
        if (d / "overview.ipynb").is_file():
            return d
    raise ReportError(f"the report templates were not found (looked in {PACKAGE_DIR / 'templates'} and "
                      f"{PACKAGE_DIR.parent / 'templates'})")


def _module_exists(name: str) -> bool:
    import importlib.util

    try:
        return importlib.util.find_spec(name) is not None
    except ModuleNotFoundError:
        return False


def choose_sections(cfg, *, sites=None) -> list[str]:
    """Sections the event's data support: sites when a sites file exists, outages when lines and
    an outage log exist (and the modules that analyse them are installed)."""
    out = ["overview"]
    sites_path = Path(sites) if sites else cfg.path("sites")
    if sites_path.is_file() and _module_exists("debrief.sites") and _module_exists("debrief.io.sites"):
        out.append("sites")
    if (cfg.path("lines").is_file() and cfg.path("outages").is_file()
            and _module_exists("debrief.outages") and _module_exists("debrief.io.lines")):
        out.append("outages")
    out.append("record")
    return out


def build_notebook(sections, tdir: Path | None = None):
    """One report notebook from the section templates, keeping only the first set-up cell.

    Each cell remembers where it came from (``metadata.debrief``: template file and 1-based cell
    number) so that an error can name them; cell ids are made from the same, so two builds are
    identical.
    """
    import nbformat

    tdir = tdir or templates_dir()
    nb = nbformat.v4.new_notebook()
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nb.metadata["language_info"] = {"name": "python"}
    have_setup = False
    for name in sections:
        path = tdir / f"{name}.ipynb"
        if not path.is_file():
            raise ReportError(f"report template not found: {path}")
        try:
            tnb = nbformat.read(path, as_version=4)
        except Exception as e:  # a damaged template is the tool's fault, but say which file
            raise ReportError(f"report template {path.name} cannot be read: {e}") from None
        for i, cell in enumerate(tnb.cells, start=1):
            tags = set(cell.get("metadata", {}).get("tags", []))
            if TAG_TEMPLATE_ONLY in tags:
                continue
            if TAG_SETUP in tags:
                if have_setup:
                    continue
                have_setup = True
            c = copy.deepcopy(cell)
            c["id"] = f"{name}-{i}"
            c.metadata["debrief"] = {"template": path.name, "cell": i}
            if c.cell_type == "code":
                c.outputs = []
                c.execution_count = None
            nb.cells.append(c)
    return nb


def _kernel_manager(workdir: Path):
    """A kernel manager whose kernel is this interpreter, not whatever ``python3`` resolves to."""
    from jupyter_client.kernelspec import KernelSpecManager
    from jupyter_client.manager import KernelManager

    kdir = workdir / "kernels" / KERNEL_NAME
    kdir.mkdir(parents=True, exist_ok=True)
    spec = {"argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
            "display_name": "debrief (Python)", "language": "python"}
    (kdir / "kernel.json").write_text(json.dumps(spec), encoding="utf-8")
    ksm = KernelSpecManager(kernel_dirs=[str(workdir / "kernels")], ensure_native_kernel=False)
    # IPC sockets in the private work folder: no TCP port, and no warning about plain-text TCP.
    return KernelManager(kernel_name=KERNEL_NAME, kernel_spec_manager=ksm, transport="ipc",
                         ip=str(workdir / "kernel-ipc"), connection_file=str(workdir / "kernel.json"))


def _kernel_env(params_path: Path) -> dict:
    env = dict(os.environ)
    # The package's parent folder first, so the kernel imports this debrief even when not installed.
    root = str(PACKAGE_DIR.parent)
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    env["MPLBACKEND"] = "Agg"
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    env["PYDEVD_DISABLE_FILE_VALIDATION"] = "1"
    env["PYTHONHASHSEED"] = "0"
    env["DEBRIEF_REPORT_PARAMS"] = str(params_path)
    return env


def _strip_ansi(text: str) -> str:
    import re

    return re.sub(r"\x1b\[[0-9;]*m", "", text or "")


def execute_notebook(nb, workdir: Path, params: dict, *, event_name: str,
                     progress: Callable[[str, str], None] | None = None, timeout_s: int = CELL_TIMEOUT_S):
    """Run `nb` in place, cell by cell, in `workdir` (where ``params.json`` is written).

    A cell that raises becomes a :class:`ReportError` naming the event, the template and the cell.
    """
    from nbclient import NotebookClient
    from nbclient.exceptions import CellExecutionError, CellTimeoutError, DeadKernelError

    params_path = workdir / "params.json"
    params_path.write_text(json.dumps(params, indent=1, sort_keys=True), encoding="utf-8")
    km = _kernel_manager(workdir)
    client = NotebookClient(nb, km=km, timeout=timeout_s, kernel_name=KERNEL_NAME, allow_errors=False,
                            record_timing=False, resources={"metadata": {"path": str(workdir)}})
    code_cells = [i for i, c in enumerate(nb.cells) if c.cell_type == "code"]
    try:
        with client.setup_kernel(env=_kernel_env(params_path), cwd=str(workdir), cleanup_kc=True):
            for k, index in enumerate(code_cells, start=1):
                cell = nb.cells[index]
                where = cell.metadata.get("debrief", {})
                if progress:
                    progress("execute", f"cell {k}/{len(code_cells)} ({where.get('template', '?')})")
                try:
                    client.execute_cell(cell, index)
                except CellExecutionError as e:
                    ename = getattr(e, "ename", "Error")
                    evalue = _strip_ansi(getattr(e, "evalue", str(e))).strip().splitlines()
                    first = evalue[0] if evalue else ""
                    place = f"cell {where.get('cell', index + 1)} of {where.get('template', 'the report')}"
                    if ename in ("InputError", "ReportError"):  # a user's mistake found while loading
                        lead = first if event_name in first else f"event {event_name!r}: {first}"
                        raise ReportError(f"{lead} (while running {place})") from None
                    raise ReportError(f"event {event_name!r}: {place}: {ename}: {first}") from None
                except CellTimeoutError:
                    raise ReportError(f"event {event_name!r}: cell {where.get('cell', index + 1)} of "
                                      f"{where.get('template', 'the report')} took longer than {timeout_s} s") from None
                except DeadKernelError:
                    raise ReportError(f"event {event_name!r}: the kernel died in cell {where.get('cell', index + 1)} "
                                      f"of {where.get('template', 'the report')} (out of memory?)") from None
    finally:
        if km.has_kernel:
            km.shutdown_kernel(now=True)
    return nb


def export_html(nb, *, show_code: bool = False, title: str | None = None) -> str:
    """HTML text of the executed notebook with debrief's offline template."""
    from nbconvert import HTMLExporter

    nb = copy.deepcopy(nb)
    nb.metadata.pop("widgets", None)
    nb.metadata["title"] = title or "Lightning incident report"
    exporter = HTMLExporter(template_name=TEMPLATE_NAME, extra_template_basedirs=[str(TEMPLATE_BASEDIR)],
                            exclude_input=not show_code, exclude_output_prompt=True,
                            exclude_input_prompt=not show_code, embed_images=True)
    body, _ = exporter.from_notebook_node(nb, resources={"metadata": {"name": nb.metadata["title"]}})
    return body


def reproduce_command(event_dir, out_path, *, sites=None, start=None, end=None, tz=None, show_code=False) -> str:
    """The ``debrief report`` command line that makes the same report."""
    parts = ["debrief", "report", str(event_dir), "--out", str(out_path)]
    if sites:
        parts += ["--sites", str(sites)]
    if start:
        parts += ["--start", str(start)]
    if end:
        parts += ["--end", str(end)]
    if tz:
        parts += ["--tz", str(tz)]
    if show_code:
        parts.append("--show-code")
    return shlex.join(parts)


def _readable(path) -> None:
    """Give the file the usual permissions (mkstemp makes it private, 0600): a report is shared."""
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(path, 0o666 & ~umask)


def _iso_or_none(v):
    if v is None:
        return None
    import pandas as pd

    if isinstance(v, pd.Timestamp):
        from ..timeutil import iso_utc

        return iso_utc(v)
    return str(v)


def render_report(event_dir, out_path, *, sites=None, start=None, end=None, show_code: bool = False,
                  tz: str | None = None, progress: Callable[[str, str], None] | None = None,
                  generated_utc: str | None = None, keep_notebook: str | os.PathLike | None = None,
                  templates: str | os.PathLike | None = None) -> Path:
    """Render the incident report of an event folder to one self-contained HTML file.

    Parameters
    ----------
    event_dir : path
        Event folder (event.toml, strokes file, optional sites, lines, outages).
    out_path : path
        HTML file to write (replaced whole, or left as it was on failure).
    sites : path, optional
        Sites file instead of the event's ``sites`` setting.
    start, end : str or Timestamp, optional
        Analysis window (ISO 8601; read in the event's zone or `tz` when without offset).
    show_code : bool
        Keep the cells' code in the report.
    tz : str, optional
        Display zone instead of event.toml's ``time_zone``.
    progress : callable, optional
        ``progress(stage, message)`` with stage ``load``, ``analyse``, ``execute``, ``export``.
    generated_utc : str, optional
        Generation time to print (default now); the only value that differs between two runs.
    keep_notebook : path, optional
        Also save the executed notebook there (for a user to open and re-run).
    templates : path, optional
        Folder of template notebooks to use instead of the shipped ones (same file names).

    Returns
    -------
    Path
        `out_path`.
    """
    import pandas as pd

    from ..config import load_event_config, with_overrides
    from ..timeutil import iso_utc, parse_user_time

    say = progress or (lambda stage, msg: None)
    out_path = Path(out_path)
    event_dir = Path(event_dir)
    say("load", f"reading settings of {event_dir}")
    cfg = with_overrides(load_event_config(event_dir), {"time_zone": tz})
    # Typed times are checked here, before a kernel starts, so a mistake is one plain line.
    t_start = parse_user_time(start, cfg.time_zone, what="--start", time_format=cfg.get("typed_time_format")) if start is not None and not isinstance(start, pd.Timestamp) else start
    t_end = parse_user_time(end, cfg.time_zone, what="--end", time_format=cfg.get("typed_time_format")) if end is not None and not isinstance(end, pd.Timestamp) else end
    if t_start is not None and t_end is not None and t_end <= t_start:
        raise InputError(f"event {cfg.name!r}: end ({end}) is not after start ({start})")
    if not cfg.path("strokes").exists():
        raise InputError(f"event {cfg.name!r}: stroke file not found: {cfg.path('strokes')}")
    if sites is not None and not Path(sites).is_file():
        raise InputError(f"event {cfg.name!r}: sites file not found: {sites}")
    if not out_path.parent.is_dir() and str(out_path.parent):
        raise InputError(f"output folder does not exist: {out_path.parent}")
    say("analyse", "choosing sections")
    sections = choose_sections(cfg, sites=sites)
    say("analyse", "sections: " + ", ".join(sections))
    params = {
        "event_dir": str(event_dir.resolve()),
        "sites": str(Path(sites).resolve()) if sites else None,
        "start": _iso_or_none(t_start),
        "end": _iso_or_none(t_end),
        "tz": tz,
        "show_code": bool(show_code),
        "sections": sections,
        "command": reproduce_command(event_dir, out_path, sites=sites, start=_iso_or_none(t_start),
                                     end=_iso_or_none(t_end), tz=tz, show_code=show_code),
        "generated_utc": generated_utc or iso_utc(pd.Timestamp.now(tz="UTC").floor("s")),
        "tool_version": __version__,
    }
    nb = build_notebook(sections, Path(templates) if templates else None)
    with tempfile.TemporaryDirectory(prefix="debrief-report-") as tmp:
        workdir = Path(tmp)
        say("execute", f"running {len(nb.cells)} cells")
        execute_notebook(nb, workdir, params, event_name=cfg.name, progress=progress)
        say("export", f"writing {out_path}")
        body = export_html(nb, show_code=show_code, title=f"{cfg.name}: lightning incident report")
    with atomic_path(out_path) as tmp_path:
        Path(tmp_path).write_text(body, encoding="utf-8")
        _readable(tmp_path)
    if keep_notebook:
        import nbformat

        with atomic_path(keep_notebook) as tmp_nb:
            nbformat.write(nb, str(tmp_nb))
    say("export", f"done: {out_path} ({out_path.stat().st_size / 1e6:.2f} MB)")
    return out_path

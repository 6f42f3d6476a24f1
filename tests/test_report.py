"""The incident report: one self-contained HTML file whose numbers are the core functions' numbers.

The example event is rendered once per module (`debrief demo`, as a user runs it); the expected
numbers are computed here by calling the core functions directly, so a report that drifted from
them (or that recomputed them differently) fails.
"""

from __future__ import annotations

import html as htmlmod
import json
import os
import re
import shutil
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import nbformat
import pytest

from debrief import polarity
from debrief.errors import InputError
from debrief.event import load_event
from debrief.report import build_notebook, render_report, templates_dir
from debrief.report import content as rc
from debrief.report.render import ReportError

ROOT = Path(__file__).resolve().parents[1]
GENERATED = re.compile(r'<span class="debrief-generated">[^<]*</span>')


def _run_cli(*args, cwd=ROOT):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "debrief", *args], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=300)


class _Tables(HTMLParser):
    """Every <table>'s class and rows of cell texts (stdlib parser: no extra dependency)."""

    def __init__(self):
        super().__init__()
        self.tables, self._cell, self._row = [], None, None

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self.tables.append({"class": dict(attrs).get("class", ""), "rows": []})
        elif tag == "tr" and self.tables:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.tables[-1]["rows"].append(self._row)
            self._row = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def tables(html_text: str, css: str):
    p = _Tables()
    p.feed(html_text)
    return [t["rows"] for t in p.tables if css in t["class"].split()]


def kv(html_text: str) -> dict:
    out = {}
    for rows in tables(html_text, "debrief-kv"):
        for r in rows:
            if len(r) == 2:
                out[r[0]] = r[1]
    return out


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """`debrief demo --out DIR`, run as a user runs it; returns (report path, HTML, stderr)."""
    out = tmp_path_factory.mktemp("demo")
    r = _run_cli("demo", "--out", str(out))
    assert r.returncode == 0, r.stderr
    path = out / "report.html"
    assert r.stdout.strip() == str(path.resolve())
    return path, path.read_text(encoding="utf-8"), r.stderr


@pytest.fixture(scope="module")
def core(example_event):
    """The example event's numbers from the core functions (what the report must show)."""
    ev = load_event(example_event)
    strokes, flashes = ev.window()
    return ev, strokes, flashes


def test_demo_reports_progress_stages(demo):
    _, _, err = demo
    for stage in ("[load]", "[analyse]", "[execute]", "[export]"):
        assert stage in err


def test_report_counts_equal_core_functions(demo, core):
    _, text, _ = demo
    ev, strokes, flashes = core
    facts = kv(text)
    n_cg = int((flashes["type"].astype(str) == "CG").sum())
    n_ic = int((flashes["type"].astype(str) == "IC").sum())
    assert facts["Flashes in window"] == f"{len(flashes):,} ({n_cg:,} ground flashes, {n_ic:,} cloud flashes)"
    share = polarity.positive_share(flashes)
    assert facts["Positive share of ground flashes"].startswith(
        f"{share['share']:.1%} ({share['positive']:,} of {share['ground_flashes']:,} ground flashes")
    assert facts["Flashes suspected of continuing current"] == f"{int(flashes['cc_suspect'].sum()):,}"


def test_report_multiplicity_table_equals_core(demo, core):
    _, text, _ = demo
    _, _, flashes = core
    rows = tables(text, "debrief-multiplicity")[0]
    assert rows[0][0] == "Strokes per flash"
    expected = polarity.multiplicity_table(flashes)
    got = {r[0]: (int(r[1].replace(",", "")), int(r[3].replace(",", ""))) for r in rows[1:]}
    assert got == {k: (int(v.negative_count), int(v.positive_count)) for k, v in expected.iterrows()}


def test_report_window_in_utc_and_event_zone(demo, core):
    _, text, _ = demo
    ev = core[0]
    facts = kv(text)
    # Chicago in July is CDT, UTC-5 (IANA tz database, America/Chicago).
    assert facts["Window (UTC)"] == "2026-07-14T19:00:00Z to 2026-07-14T23:00:00Z"
    assert facts["Window (America/Chicago)"] == ("2026-07-14 14:00:00 CDT (UTC-0500) to "
                                                 "2026-07-14 18:00:00 CDT (UTC-0500)")
    assert f"<h1>{htmlmod.escape(ev.name)}</h1>" in text


def test_report_carries_the_record(demo, core, example_event):
    _, text, _ = demo
    ev = core[0]
    hashes = tables(text, "debrief-hashes")[0]
    strokes_row = next(r for r in hashes if r[0] == "strokes")
    assert strokes_row[3] == ev.inputs[0]["sha256"]
    assert strokes_row[2] == f"{ev.ledger.rows_read:,}"
    import hashlib

    # The checksum is of the file itself (hashlib, FIPS 180-4 SHA-256).
    assert strokes_row[3] == hashlib.sha256((example_event / "strokes.csv").read_bytes()).hexdigest()
    import debrief

    assert f"debrief {debrief.__version__}" in text
    params = {r[0]: r[1] for r in tables(text, "debrief-params")[0][1:]}
    assert params["[grouping] max_interval_ms"] == "500"  # Cummins et al. 1998 criterion, the default
    assert params["[alerts] all_clear_min"] == "30"  # 30-minute rule, Holle et al. 1999
    for source in ("Cummins", "IEEE Std 1410", "Rusck", "Eriksson", "chi-square", "Karney"):
        assert source in text
    assert "qualified people" in text and "not a warning" in text and "detection efficiency" in text
    assert htmlmod.escape(f"debrief report {example_event}") in text


def test_report_is_self_contained(demo):
    path, text, _ = demo
    # No reference to anything fetched from elsewhere: src/href attributes, CSS url() or @import.
    assert not re.search(r"""\bsrc\s*=\s*["']?\s*(https?:)?//""", text, re.I)
    assert not re.search(r"""<link[^>]+href\s*=\s*["']?\s*(https?:)?//""", text, re.I)
    assert not re.search(r"""url\(\s*["']?\s*(https?:)?//""", text, re.I)
    assert not re.search(r"""@import\s+(url\()?\s*["']?\s*(https?:)?//""", text, re.I)
    assert 'application/vnd.jupyter.stderr"' not in text  # no warning or error printed by a cell
    assert "<script src" not in text and "require.js" not in text.lower() and "mathjax" not in text.lower()
    n_figs = len(re.findall(r'<img alt="[^"]*" src="data:image/svg\+xml;base64,', text))
    assert n_figs >= 4  # map, rate, histogram, at least one site or alert figure
    assert path.stat().st_size < 5e6
    assert path.stat().st_mode & 0o044 == 0o044  # readable by others: a report is meant to be shared


@pytest.mark.slow
def test_report_is_deterministic(demo, tmp_path):
    # Same inputs and parameters: the same HTML but for the generation time. Rendered to the
    # same path so that the reproduce command is the same too.
    path, first, _ = demo
    render_report(ROOT / "example_event", path)
    second = path.read_text(encoding="utf-8")
    assert GENERATED.sub("", first) != first  # the timestamp is there, and only it is removed
    # The demo printed the event folder as debrief found it; render_report got the same folder.
    a = GENERATED.sub("", first)
    b = GENERATED.sub("", second)
    assert a == b


def test_params_are_data_not_code(tmp_path):
    # A parameter value that looks like code stays a string: read_params uses json.load only.
    bad = {"event_dir": "__import__('os').system('echo hacked')", "sites": "x'); raise SystemExit('"}
    p = tmp_path / "params.json"
    p.write_text(json.dumps(bad))
    got = rc.read_params(p)
    assert got["event_dir"] == bad["event_dir"] and got["sites"] == bad["sites"]
    # And no template cell holds a parameter value: the notebooks are the same for any event.
    for name in ("overview", "sites", "outages", "record"):
        src = (templates_dir() / f"{name}.ipynb").read_text()
        assert "example_event" not in src.replace("`example_event/`", "")


def test_build_notebook_keeps_one_setup_cell_and_drops_template_notes():
    nb = build_notebook(["overview", "record"])
    setup = [c for c in nb.cells if "debrief-setup" in c.metadata.get("tags", [])]
    assert len(setup) == 1
    assert not [c for c in nb.cells if "debrief-template-only" in c.metadata.get("tags", [])]
    assert {c.metadata["debrief"]["template"] for c in nb.cells} == {"overview.ipynb", "record.ipynb"}
    assert len({c["id"] for c in nb.cells}) == len(nb.cells)


def test_html_helpers_escape_everything():
    import pandas as pd

    evil = "<script>alert(1)</script>"
    t = rc.html_table(pd.DataFrame({"name": [evil], "n": [1]}))
    assert evil not in t and htmlmod.escape(evil) in t
    assert evil not in rc.kv_table([(evil, evil)])
    assert evil not in rc.figure_html("<svg/>", alt=evil, caption=evil)
    assert evil not in rc.note(evil) and evil not in rc.command_html(evil)


@pytest.mark.slow
def test_user_text_is_escaped_in_the_report(tmp_path, example_event):
    ev = tmp_path / "evil"
    shutil.copytree(example_event, ev)
    evil = "<script>alert(1)</script>"
    toml = (ev / "event.toml").read_text()
    toml = re.sub(r'^name = .*$', 'name = "<script>alert(1)</script>"', toml, flags=re.M)
    (ev / "event.toml").write_text(toml)
    if (ev / "sites.csv").exists():
        lines = (ev / "sites.csv").read_text().splitlines()
        first = lines[1].split(",")
        first[0] = "<script>alert(2)</script>"
        lines[1] = ",".join(first)
        (ev / "sites.csv").write_text("\n".join(lines) + "\n")
    out = tmp_path / "r.html"
    render_report(ev, out)
    text = out.read_text()
    assert "<script>alert" not in text
    assert htmlmod.escape(evil) in text
    if (ev / "sites.csv").exists():
        assert htmlmod.escape("<script>alert(2)</script>") in text
    assert "<script" not in text.lower()  # no script of any kind: the report needs none


# ---- bad input: one clear line, exit status 2, nothing at the output path


def test_cli_bad_event_toml(tmp_path, example_event):
    ev = tmp_path / "ev"
    shutil.copytree(example_event, ev)
    (ev / "event.toml").write_text('name = "x"\n[grouping]\nmax_interval_mss = 300\n')
    out = tmp_path / "r.html"
    r = _run_cli("report", str(ev), "--out", str(out), "--quiet")
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in r.stderr
    assert "line 3" in lines[0] and "max_interval_mss" in lines[0]
    assert not out.exists()


def test_cli_missing_event_folder(tmp_path):
    r = _run_cli("report", str(tmp_path / "nope"), "--out", str(tmp_path / "r.html"), "--quiet")
    assert r.returncode == 2 and "not found" in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_bad_typed_time_stops_before_the_kernel(tmp_path, example_event):
    with pytest.raises(InputError, match="--start"):
        render_report(example_event, tmp_path / "r.html", start="yesterday-ish")
    assert not (tmp_path / "r.html").exists()


def test_strokes_that_all_fail_validation(tmp_path, example_event, capsys):
    ev = tmp_path / "ev"
    ev.mkdir()
    shutil.copy(example_event / "event.toml", ev / "event.toml")
    (ev / "strokes.csv").write_text("time,latitude,longitude,peak_current_ka\n"
                                    "not a time,95,0,0\nnever,-100,0,0\n")
    out = tmp_path / "r.html"
    out.write_text("old report")
    from debrief.cli import main

    status = main(["report", str(ev), "--out", str(out), "--quiet"])  # in-process: no second interpreter
    assert status == 2
    line = capsys.readouterr().err.strip()
    assert len(line.splitlines()) == 1 and "Traceback" not in line
    assert "Marrowfield Basin" in line and "all 2 rows were rejected" in line and "overview.ipynb" in line
    assert out.read_text() == "old report"  # the earlier file is left as it was


def test_failing_template_cell_is_named(tmp_path, example_event):
    tdir = tmp_path / "templates"
    shutil.copytree(templates_dir(), tdir)
    nb = nbformat.read(tdir / "overview.ipynb", as_version=4)
    index = next(i for i, c in enumerate(nb.cells, start=1) if "title_block" in c.source)
    nb.cells[index - 1].source = 'raise ValueError("the template is broken here")'
    nbformat.write(nb, tdir / "overview.ipynb")
    out = tmp_path / "r.html"
    with pytest.raises(ReportError) as e:
        render_report(example_event, out, templates=tdir)
    msg = str(e.value)
    assert f"cell {index} of overview.ipynb: ValueError: the template is broken here" in msg
    assert "Marrowfield Basin" in msg
    assert not out.exists()
    assert not list(tmp_path.glob(".r.html.*"))  # no temporary file left behind


def test_demo_without_example_event(tmp_path, monkeypatch):
    from debrief.cli import report as cli_report

    monkeypatch.setattr(cli_report, "example_event_dir", lambda: tmp_path / "missing")

    class A:
        out = str(tmp_path / "o")
        show_code = False
        quiet = True

    with pytest.raises(InputError, match="example event is missing"):
        cli_report.run_demo(A())


def test_show_code_keeps_the_code_and_default_hides_it():
    from debrief.report.render import export_html

    nb = build_notebook(["overview"])
    marker = "title_block"  # one token, so syntax highlighting keeps it whole
    assert marker in export_html(nb, show_code=True)
    assert marker not in export_html(nb, show_code=False)


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=80, deadline=None)
@given(st.text(min_size=1, max_size=40).filter(lambda t: t.strip() == t and "\r" not in t))
def test_any_user_text_round_trips_through_a_table(text):
    # Whatever a user typed comes back as the same text when the HTML is parsed (stdlib
    # html.parser), so no part of it was taken as markup.
    import pandas as pd

    rows = tables(rc.html_table(pd.DataFrame({"name": [text]})), "debrief-table")[0]
    assert rows[1] == [text]
    assert "<" not in rc.html_table(pd.DataFrame({"name": [text]})).split("<tbody>")[1].replace(
        "<tr>", "").replace("</tr>", "").replace("<td>", "").replace("</td>", "").replace(
        "</tbody></table>", "")


def test_read_params_without_a_file_uses_the_example_event(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv(rc.PARAMS_ENV, raising=False)
    p = rc.read_params()
    assert Path(p["event_dir"]) == ROOT / "example_event"
    assert p["show_code"] is False and p["start"] is None


def test_missing_values_show_as_a_dash():
    import numpy as np
    import pandas as pd

    t = rc.html_table(pd.DataFrame({"a": pd.array([1, None], dtype="Int64"), "b": [np.nan, 2.5],
                                    "c": pd.to_datetime([None, "2026-07-14T19:00Z"], utc=True)}))
    rows = tables(t, "debrief-table")[0]
    assert rows[1] == ["1", "–", "–"] and rows[2] == ["–", "2.5", "2026-07-14T19:00:00Z"]


def test_report_alert_totals_equal_core(demo, core, example_event):
    from debrief.analysis import analyse

    _, text, _ = demo
    ev = core[0]
    # The report's periods are the event analysis's (the same call as `debrief alerts`).
    periods, totals, _ = analyse(ev).alerts()
    table = next(t for t in tables(text, "debrief-table") if t and t[0][:3] == ["Site", "Level", "Periods"])
    got = [(r[0], r[1], int(r[2]), round(float(r[3]))) for r in table[1:]]
    want = [(r.site, r.level, int(r.n_periods), round(float(r.total_min))) for r in totals.itertuples()]
    assert got == want
    assert len(periods) > 0  # the example storm does reach the crew sites (constructed so)

"""One analysis path: a window narrower than the data gives the same answers, row by row, in the
report's HTML and in every CLI output (the example event with ``end = 21:00Z``, constructed
here)."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from debrief.analysis import WINDOW_RULE, analyse
from debrief.event import load_event

from test_report import tables

ROOT = Path(__file__).resolve().parents[1]
NARROW_END = "2026-07-14T21:00:00Z"


def _cli(*args, cwd=ROOT):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "debrief", *map(str, args)], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=300)


@pytest.fixture(scope="module")
def narrow(tmp_path_factory, example_event):
    """A copy of the example event whose event.toml ends the window at 21:00Z."""
    d = tmp_path_factory.mktemp("narrow") / "ev"
    shutil.copytree(example_event, d)
    toml = (d / "event.toml").read_text().replace('end = "2026-07-14T23:00:00Z"', f'end = "{NARROW_END}"')
    assert NARROW_END in toml
    (d / "event.toml").write_text(toml)
    return d


@pytest.fixture(scope="module")
def report_html(narrow, tmp_path_factory):
    out = tmp_path_factory.mktemp("narrow-report") / "report.html"
    r = _cli("report", narrow, "--out", out)
    assert r.returncode == 0, r.stderr
    return out.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def analysis(narrow):
    return analyse(load_event(narrow))


def test_window_is_the_events(analysis):
    assert analysis.end == pd.Timestamp(NARROW_END)
    # strokes by their own time, flashes by their first stroke's
    assert (analysis.strokes["time"] <= analysis.end).all()
    assert (analysis.flashes["time"] <= analysis.end).all()
    fs = analysis.flash_strokes
    assert set(fs["flash_id"]) == set(analysis.flashes["flash_id"])


def test_outage_verdicts_agree_row_by_row(narrow, analysis, report_html, tmp_path):
    out = tmp_path / "m.csv"
    r = _cli("outages", narrow / "strokes.csv", "--event", narrow, "--out", out, "--json")
    assert r.returncode == 0, r.stderr
    cli = {o["outage_id"]: o["verdict"] for o in json.loads(r.stdout)}
    core = dict(zip(analysis.outages().verdicts["outage_id"], analysis.outages().verdicts["verdict"]))
    html_rows = tables(report_html, "debrief-outages")[0]
    head = html_rows[0]
    rep = {row[head.index("Outage")]: row[head.index("Verdict")] for row in html_rows[1:]}
    assert cli == core == rep
    # Trips after 21:00Z are listed as outside the window, not re-analysed or dropped.
    assert cli["OUT-101"] == "outside_window" and cli["OUT-103"] == "outside_window"
    csv = pd.read_csv(out)
    assert dict(csv.groupby("outage_id")["verdict"].first()) == core


def test_alert_periods_and_crew_log_agree_row_by_row(narrow, analysis, report_html, tmp_path):
    per_csv, cmp_csv = tmp_path / "p.csv", tmp_path / "c.csv"
    r = _cli("alerts", narrow / "strokes.csv", "--event", narrow, "--crew-log", narrow / "crew_log.csv",
             "--out", per_csv, "--comparison-out", cmp_csv)
    assert r.returncode == 0, r.stderr
    periods, _totals, comparison = analysis.alerts()
    cli = pd.read_csv(per_csv)
    assert list(cli["site"]) == list(periods["site"])
    assert list(cli["open_at_end"]) == list(periods["open_at_end"])
    assert list(cli["n_strokes"]) == list(periods["n_strokes"])
    assert list(cli["start"]) == [t.strftime("%Y-%m-%dT%H:%M:%S.%fZ").replace(".000000Z", "Z") for t in periods["start"]] or \
        list(pd.to_datetime(cli["start"], utc=True)) == list(periods["start"])
    rows = next(t for t in tables(report_html, "debrief-table") if t and t[0][:3] == ["Site", "Level", "Start (UTC)"])
    head = rows[0]
    rep_open = [r_[head.index("Open at end of window or data")] == "yes" for r_ in rows[1:]]
    rep_n = [int(r_[head.index("Strokes")]) for r_ in rows[1:]]
    assert rep_open == list(periods["open_at_end"]) and rep_n == list(periods["n_strokes"])
    assert any(periods["open_at_end"])  # the narrowed window ends while a period is running
    cmp_cli = pd.read_csv(cmp_csv)
    assert list(cmp_cli["finding"]) == list(comparison["finding"])
    assert np.allclose(cmp_cli["minutes"], comparison["minutes"])
    found = next(t for t in tables(report_html, "debrief-table") if t and t[0][:2] == ["Site", "Finding"])
    assert [r_[1] for r_ in found[1:]] == list(comparison["finding"])


def test_site_figures_agree_row_by_row(narrow, analysis, report_html, tmp_path):
    import html

    out = tmp_path / "s.csv"
    r = _cli("sites", narrow / "strokes.csv", "--event", narrow, "--out", out)
    assert r.returncode == 0, r.stderr
    cli = pd.read_csv(out)
    core, _ = analysis.site_results
    assert list(cli["name"]) == list(core["name"])
    for col in ("n_ground_within", "n_contacts", "n_candidates"):
        assert list(cli[col]) == list(core[col]), col
    for col in ("p_any_within", "max_p_within", "nearest_km"):
        np.testing.assert_allclose(cli[col].to_numpy(float), core[col].to_numpy(float), rtol=1e-9, equal_nan=True)
    assert list(cli["coverage"]) == list(core["coverage"])
    assert set(cli["coverage_source"]) == {"data_extent"}
    rows = tables(report_html, "debrief-sites")[0]
    head = rows[0]
    assert [r_[head.index("Site")] for r_ in rows[1:]] == list(core["name"])
    assert [int(r_[head.index("Reported within")]) for r_ in rows[1:]] == list(core["n_ground_within"])
    assert [r_[head.index("Data coverage")] for r_ in rows[1:]] == list(core["coverage"])
    # Each site's quotable sentence is the same text in both.
    for name, sentence in zip(core["name"], core["sentence"]):
        assert sentence in html.unescape(report_html), name
        assert cli.loc[cli["name"] == name, "sentence"].iloc[0] == sentence


def test_summary_counts_agree(narrow, analysis, report_html):
    r = _cli("summary", narrow, "--json")
    assert r.returncode == 0, r.stderr
    s = json.loads(r.stdout)
    assert s["counts"]["flashes"] == len(analysis.flashes)
    assert s["window"]["end"] == NARROW_END
    assert f"{len(analysis.flashes):,}" in report_html


def test_report_states_the_window_rule_and_coverage(report_html, analysis):
    import html

    text = html.unescape(report_html)
    assert WINDOW_RULE in text
    assert analysis.coverage.describe() in text

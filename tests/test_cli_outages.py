"""``debrief outages`` run as a user runs it (subprocess), on the example event."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[1]


def _run(*args, cwd=None):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "debrief", "outages", *map(str, args)], capture_output=True,
                          text=True, env=env, cwd=cwd, timeout=120)


@pytest.fixture(scope="module")
def ran(example_event, tmp_path_factory):
    if not (example_event / "outages.csv").exists():
        pytest.skip("example_event has no outage log yet")
    d = tmp_path_factory.mktemp("cli")
    out, gj = d / "m.csv", d / "m.geojson"
    p = _run(example_event / "strokes.csv", "--event", example_event, "--out", out, "--geojson", gj)
    return p, out, gj, d


def test_text_output_and_files(ran):
    p, out, gj, _ = ran
    assert p.returncode == 0, p.stderr
    assert "direct_strike_likely" in p.stdout and "Cautions:" in p.stdout
    assert "does not replace, an engineering determination" in p.stdout
    assert "OUT-107" in p.stderr  # the unknown-line row is reported, not lost
    m = pd.read_csv(out, dtype={"outage_id": str})
    for col in ("outage_id", "stroke_time", "dt_s", "distance_m", "p_within_corridor", "p_direct", "p_induced_fo",
                "peak_current_ka", "induced_kv", "verdict"):
        assert col in m.columns
    assert set(m["outage_id"]) == {f"OUT-10{i}" for i in range(1, 8)}
    # outages without candidates: one row, empty stroke fields
    quiet = m[m["outage_id"] == "OUT-105"]
    assert len(quiet) == 1 and quiet["stroke_time"].isna().all()
    # best first within each outage
    for _, g in m.dropna(subset=["rank"]).groupby("outage_id"):
        assert list(g["rank"]) == list(range(1, len(g) + 1))
        assert g["p_within_corridor"].iloc[0] == g["p_within_corridor"].max()
    kinds = [f["properties"]["kind"] for f in json.loads(gj.read_text())["features"]]
    assert kinds.count("search_corridor") == 6


def test_json_output(ran, example_event):
    _, _, _, d = ran
    p = _run(example_event / "strokes.csv", "--event", example_event, "--out", d / "j.csv", "--json")
    assert p.returncode == 0, p.stderr
    recs = {r["outage_id"]: r for r in json.loads(p.stdout)}
    assert recs["OUT-101"]["verdict"] == "direct_strike_likely"
    assert recs["OUT-101"]["best_candidate"]["distance_m"] < 100
    assert recs["OUT-105"]["best_candidate"] is None


def test_no_zone_stops_with_one_line(example_event, tmp_path):
    p = _run(example_event / "strokes.csv", "--lines", example_event / "lines.geojson",
             "--outages", example_event / "outages.csv", "--out", tmp_path / "m.csv")
    assert p.returncode == 2
    assert "no UTC offset" in p.stderr and "Traceback" not in p.stderr
    assert not (tmp_path / "m.csv").exists()


def test_missing_lines_option(example_event, tmp_path):
    p = _run(example_event / "strokes.csv", "--out", tmp_path / "m.csv", "--outages", example_event / "outages.csv")
    assert p.returncode == 2 and "--lines is required" in p.stderr
    bad = tmp_path / "l.geojson"
    bad.write_text('{"type": "FeatureCollection", "crs": {}, "features": []}')
    p = _run(example_event / "strokes.csv", "--out", tmp_path / "m.csv", "--outages", example_event / "outages.csv",
             "--lines", bad, "--tz", "America/Chicago")
    assert p.returncode == 2 and "crs" in p.stderr and len(p.stderr.strip().splitlines()) <= 2


def test_strict_makes_bad_rows_fatal(example_event, tmp_path):
    # The example log has one row naming a line not in the map (OUT-107): fatal under --strict.
    p = _run(example_event / "strokes.csv", "--event", example_event, "--out", tmp_path / "m.csv", "--strict")
    assert p.returncode == 2 and "OUT-107" in p.stderr and "Traceback" not in p.stderr
    assert not (tmp_path / "m.csv").exists()

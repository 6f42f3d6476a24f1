"""``debrief validate`` run as a user runs it: a subprocess, exit codes, stdout and stderr."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data"


def run(*args, cwd=ROOT):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "debrief", "validate", *map(str, args)],
                          cwd=cwd, env=env, capture_output=True, text=True, timeout=120)


def test_text_ledger_exit_0_and_one_line_on_stderr():
    r = run(DATA / "strokes_bad_rows.csv", "--tz", "America/Chicago")
    assert r.returncode == 0, r.stderr
    # The file's truth was constructed by hand (tests/data/strokes_bad_rows.csv): 15 rows,
    # 11 rejected, 1 duplicate.
    err = r.stderr.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("debrief: 11 of 15 rows rejected (")
    assert "1 duplicate dropped" in err[0] and "Traceback" not in r.stderr
    assert "Data ledger:" in r.stdout and "bad_latitude" in r.stdout and "(line 6)" in r.stdout
    # Chicago keeps daylight time (CDT, UTC-5) in July: IANA time zone database.
    assert "First stroke: 2026-07-14 19:00:00 UTC (2026-07-14 14:00:00 CDT)" in r.stdout
    assert "Ground strokes (CG): 2; cloud pulses (IC): 1" in r.stdout


def test_json_ledger_with_time_range_and_type_counts():
    r = run(DATA / "strokes_bad_rows.csv", "--json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert (d["rows_read"], d["rows_accepted"], d["rows_rejected"], d["duplicates_dropped"]) == (15, 3, 11, 1)
    assert d["rejected"]["bad_time"] == {"count": 2, "first_lines": [3, 14], "description": d["rejected"]["bad_time"]["description"]}
    assert d["rejected"]["minor_exceeds_major"]["first_lines"] == [11]
    assert d["missing_ellipse"] == 1 and isinstance(d["notes"], list)
    assert d["time_range"] == {"first": "2026-07-14T19:00:00Z", "last": "2026-07-14T19:00:14Z"}
    assert d["type_counts"] == {"CG": 2, "IC": 1}


def test_strict_fatal_exit_2_one_line():
    r = run(DATA / "strokes_bad_rows.csv", "--strict")
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.count("\n") == 1 and "strict mode" in r.stderr and "Traceback" not in r.stderr


@pytest.mark.parametrize("args, words", [
    (["no_such_file.csv"], "stroke file not found"),
    ([DATA / "strokes_polarity.csv"], "no time column"),
    ([DATA / "strokes_bad_rows.csv", "--columns", "time=UTC"], "no such header"),
    ([DATA / "strokes_bad_rows.csv", "--columns", "time"], "NAME=HEADER"),
])
def test_fatal_input_exit_2_no_traceback(args, words):
    r = run(*args)
    assert r.returncode == 2
    assert words in r.stderr and "Traceback" not in r.stderr
    assert r.stderr.startswith("debrief validate: ") and r.stderr.count("\n") == 1


def test_event_settings_and_columns_option(tmp_path):
    # event.toml gives the reader options; --columns maps the headers; --current-unit converts.
    (tmp_path / "event.toml").write_text(
        'polarity_column = "Pol"\n[type_codes]\nG = "CG"\nC = "IC"\n', encoding="utf-8")
    csv = tmp_path / "s.csv"
    csv.write_text("UTC,Lat,Lon,Amp,Pol,Kind\n2026-07-14T19:00:00Z,45.5,-93.2,12500,-,G\n"
                   "2026-07-14T19:00:01Z,45.6,-93.3,30000,+,C\n", encoding="utf-8")
    r = run(csv, "--event", tmp_path, "--columns", "time=UTC,peak_current_ka=Amp,type=Kind",
            "--current-unit", "A", "--json")
    assert r.returncode == 0, r.stderr
    assert r.stderr == ""  # nothing rejected: nothing on stderr
    d = json.loads(r.stdout)
    assert d["rows_accepted"] == 2 and d["type_counts"] == {"CG": 1, "IC": 1}
    assert "peak current converted from A to kA" in d["notes"]

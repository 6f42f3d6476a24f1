"""``debrief summary`` run as a subprocess on the example event: the numbers it prints are the
core functions' numbers, computed here independently of the command's own code path."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
EVENT = ROOT / "example_event"

pytest.importorskip("debrief.flashes")
pytest.importorskip("debrief.io.strokes")

from debrief import continuing_current as cc  # noqa: E402
from debrief import polarity as P  # noqa: E402
from debrief.event import load_event  # noqa: E402
from debrief.timeutil import parse_user_time  # noqa: E402


def run(*args):
    return subprocess.run([sys.executable, "-m", "debrief", "summary", *map(str, args)], cwd=ROOT,
                          capture_output=True, text=True, timeout=120)


class Result:
    def __init__(self, returncode, stdout, stderr):
        self.returncode, self.stdout, self.stderr = returncode, stdout, stderr


def run_in_process(capsys, *args):
    """The same command through debrief.cli.main (no new interpreter: keeps the file fast)."""
    from debrief.cli import main

    capsys.readouterr()
    code = main(["summary", *map(str, args)])
    out = capsys.readouterr()
    return Result(code, out.out, out.err)


@pytest.fixture(scope="module")
def event():
    return load_event(EVENT)


@pytest.fixture(scope="module")
def text_out():
    r = run(EVENT)
    assert r.returncode == 0, r.stderr
    return r


@pytest.fixture(scope="module")
def json_out():
    r = run(EVENT, "--json")
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout)


def test_json_numbers_equal_core_functions(event, json_out):
    s, f = event.window()
    share = P.positive_share(f)
    assert json_out["polarity"]["share"] == pytest.approx(share["share"], rel=1e-12)
    assert json_out["polarity"]["likely_ic"] == share["likely_ic"] == int(f.loc[f["type"] == "CG", "likely_ic"].sum())
    assert json_out["counts"]["strokes"] == len(s) and json_out["counts"]["flashes"] == len(f)
    assert json_out["counts"]["ground_flashes"] == int((f["type"] == "CG").sum())
    tab = P.multiplicity_table(f)
    assert [r["all_count"] for r in json_out["multiplicity"]["table"]] == tab["all_count"].tolist()
    # the mean multiplicity, computed here straight from the flash table
    neg = f[(f["type"] == "CG") & (f["polarity"] == "negative")]
    mean = {r["polarity"]: r for r in json_out["multiplicity"]["mean"]}
    assert mean["negative"]["mean_multiplicity"] == pytest.approx(neg["multiplicity"].mean())
    inter = {r["polarity"]: r for r in json_out["interstroke"]}
    iv = np.concatenate([np.array(x.split(";"), float) for x in neg["interstroke_ms"] if x])
    assert inter["negative"]["geometric_mean_ms"] == pytest.approx(np.exp(np.log(iv).mean()), rel=1e-12)
    assert inter["negative"]["intervals"] == len(iv)
    med = {r["polarity"]: r for r in json_out["medians"]}
    first_neg = s[(s["type"] == "CG") & (s["stroke_order"] == 1) & (s["peak_current_ka"] < 0)]
    assert med["negative"]["first_median_ka"] == pytest.approx(first_neg["peak_current_ka"].abs().median())
    ref = P.compare_reference(s, config=event.config)
    got = {r["kind"]: r for r in json_out["reference"]}
    assert got["first"]["ks_distance"] == pytest.approx(ref.loc["first", "ks_distance"], rel=1e-12)
    assert got["subsequent"]["ks_distance"] == pytest.approx(ref.loc["subsequent", "ks_distance"], rel=1e-12)
    flagged = cc.flag_continuing_current(s, f, event.config)
    assert json_out["continuing_current"]["suspects"] == int(flagged["cc_suspect"].sum())
    assert json_out["ledger"]["rows_rejected"] == 4 and json_out["ledger"]["duplicates_dropped"] == 1


def test_text_prints_the_same_numbers(event, text_out):
    out = text_out.stdout
    s, f = event.window()
    share = P.positive_share(f)
    assert f"Positive share of ground flashes: {100 * share['share']:.1f}%" in out
    assert f"{share['likely_ic_left_out']:,} likely cloud pulses left out" in out
    assert f"Strokes: {len(s):,} " in out and f"Flashes: {len(f):,} " in out
    means = P.mean_multiplicity(f)
    assert f"negative: mean multiplicity {means.loc['negative', 'mean_multiplicity']:.2f}" in out
    inter = P.interstroke_summary(f)
    assert f"geometric mean {inter.loc['negative', 'geometric_mean_ms']:.1f} ms" in out
    ref = P.compare_reference(s, config=event.config)
    assert f"KS distance {ref.loc['first', 'ks_distance']:.3f}" in out
    assert f"KS distance {ref.loc['subsequent', 'ks_distance']:.3f}" in out
    assert "2026-07-14 19:00:00 UTC (2026-07-14 14:00:00 CDT)" in out  # 19:00 UTC is 14:00 CDT (UTC-5)
    assert event.ledger.one_line() in out
    assert "not a p-value" in out and "qualified people" in out and "not a measurement" in out
    assert "rows rejected" in text_out.stderr  # the ledger one-liner also goes to stderr


def test_window_in_the_display_zone(event, capsys):
    # 15:00-16:00 CDT is 20:00-21:00 UTC
    r = run_in_process(capsys, EVENT, "--start", "2026-07-14T15:00", "--end", "2026-07-14T16:00", "--json")
    assert r.returncode == 0, r.stderr
    got = json.loads(r.stdout)
    start = parse_user_time("2026-07-14T20:00:00Z", None)
    end = parse_user_time("2026-07-14T21:00:00Z", None)
    s, f = event.window(start, end)
    assert got["window"]["start"] == "2026-07-14T20:00:00Z" and got["window"]["end"] == "2026-07-14T21:00:00Z"
    assert got["counts"]["flashes"] == len(f) < len(event.flashes)
    assert (f["time"] >= start).all() and (f["time"] <= end).all()
    assert got["polarity"]["share"] == pytest.approx(P.positive_share(f)["share"])
    utc = json.loads(run_in_process(capsys, EVENT, "--start", "2026-07-14T20:00", "--end", "2026-07-14T21:00", "--tz", "UTC", "--json").stdout)
    assert utc["counts"] == got["counts"]


@pytest.mark.parametrize("args, words", [
    (["/nonexistent/event"], "not found"),
    ([EVENT, "--start", "yesterday-ish"], "--start"),
    ([EVENT, "--tz", "Mars/Olympus"], "time zone"),
    ([EVENT, "--start", "2026-07-14T21:00Z", "--end", "2026-07-14T20:00Z"], "before"),
])
def test_bad_input_is_one_line_and_exit_2(args, words, capsys):
    r = run_in_process(capsys, *args)
    assert r.returncode == 2
    err = [ln for ln in r.stderr.splitlines() if ln.startswith("debrief summary:")]
    assert len(err) == 1 and words in err[0], r.stderr
    assert "Traceback" not in r.stderr


def test_bad_input_from_a_subprocess_has_no_traceback():
    r = run("/nonexistent/event")
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "Traceback" not in r.stderr

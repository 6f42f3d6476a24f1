"""Continuing-current suspicion rules: each fires at its threshold and not just beyond it, and a
scenario on the generator's truth (a constructed storm whose continuing currents we know).

Rule sources (full citations in debrief.references): [Saba2010] for strong positives, single- and
multi-stroke; [Rakov1990] and [Saba2006] for weak strokes before long continuing current;
[Kitagawa1962] for "long" (>= 40 ms, from memory). The flashes below are constructed here.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from debrief import continuing_current as C
from debrief.config import from_dict
from debrief.errors import InputError

from test_polarity import build  # constructed grouped tables to the DEVELOPERS.md contract


def flags(specs, **rules):
    s, f = build(specs)
    return C.flag_continuing_current(s, f, **rules)


@pytest.mark.parametrize("ip, fires", [(20.0, True), (19.9, False), (85.0, True)])
def test_single_positive_at_its_threshold(ip, fires):
    # rule default: positive_min_ka 20 (config.py [continuing_current])
    f = flags([("CG", [(0, ip, 1)])])
    assert bool(f.loc[0, "cc_suspect"]) is fires
    assert f.loc[0, "cc_reasons"] == ("single_positive" if fires else "")


def test_single_positive_not_for_likely_ic_negative_or_cloud():
    f = flags([
        ("CG", [(0, 30.0, 1)], True),            # flagged likely_ic by the grouping: left out
        ("CG", [(0, -30.0, 1)]),                 # negative
        ("IC", [(0, 30.0, 0)]),                  # cloud flash
    ])
    assert not f["cc_suspect"].any()
    assert (f["cc_reasons"] == "").all()


@pytest.mark.parametrize("strokes, fires", [
    ([(0, 30.0, 1), (90, 25.0, 1)], True),     # two strong positive strokes
    ([(0, 20.0, 1), (90, 12.0, 2)], True),     # first stroke exactly at positive_min_ka (20 kA)
    ([(0, 16.0, 1), (90, 20.0, 1)], True),     # the strong stroke is a subsequent one
    ([(0, 19.9, 1), (90, 19.9, 1)], False),    # no stroke at 20 kA
    ([(0, 16.0, 1), (90, -35.0, 1)], False),   # strong, but negative: not a strong positive stroke
    ([(0, 16.0, 1), (90, 30.0, 1), (300, 25.0, 2)], True),
])
def test_positive_multi_stroke_at_its_threshold(strokes, fires):
    # [Saba2010]: 75 % of positive flashes (all multiplicities) had long continuing current;
    # threshold positive_min_ka 20 kA (config.py default, our setting)
    f = flags([("CG", strokes)])
    assert bool(f.loc[0, "cc_suspect"]) is fires
    assert f.loc[0, "cc_reasons"] == ("positive_multi_stroke" if fires else "")


def test_positive_multi_stroke_not_for_likely_ic_negative_or_cloud():
    f = flags([
        ("CG", [(0, 10.0, 1), (90, 40.0, 1)]),           # first stroke likely_ic (< 15 kA): left out as today
        ("CG", [(0, 30.0, 1), (90, 25.0, 1)], True),     # flash flagged likely_ic by the grouping
        ("CG", [(0, -30.0, 1), (90, 25.0, 1)]),          # negative flash with a positive stroke
        ("IC", [(0, 30.0, 0), (40, 25.0, 0)]),           # cloud flash
        ("CG", [(0, 30.0, 1), (90, 25.0, 1)]),           # the one that fires
    ])
    assert f["cc_reasons"].tolist() == ["", "", "", "", "positive_multi_stroke"]
    # a stronger threshold by override: 25 kA still fires (a stroke at 30), 31 kA does not
    assert flags([("CG", [(0, 30.0, 1), (90, 25.0, 1)])], positive_min_ka=30.0)["cc_suspect"].tolist() == [True]
    assert flags([("CG", [(0, 30.0, 1), (90, 25.0, 1)])], positive_min_ka=31.0)["cc_suspect"].tolist() == [False]


@pytest.mark.parametrize("gap_ms, ip, contact, fires", [
    (100.0, -19.9, 1, True),    # interval exactly min_interval_ms, |Ip| just below 20 kA
    (99.9, -19.9, 1, False),    # interval too short
    (100.0, -20.0, 1, False),   # |Ip| not below 20 kA
    (250.0, -8.0, 2, False),    # next stroke at a new ground contact
    (250.0, 8.0, 1, False),     # the weak stroke is positive
])
def test_long_gap_after_weak_at_its_thresholds(gap_ms, ip, contact, fires):
    f = flags([("CG", [(0, -35.0, 1), (60, ip, 1), (60 + gap_ms, -12.0, contact)])])
    assert bool(f.loc[0, "cc_suspect"]) is fires
    assert f.loc[0, "cc_reasons"] == ("long_gap_after_weak" if fires else "")


def test_long_gap_not_in_positive_or_cloud_flashes():
    f = flags([("CG", [(0, 35.0, 1), (10, -10.0, 1), (200, -12.0, 1)]), ("IC", [(0, -5.0, 0), (300, -4.0, 0)])])
    # the positive flash is a multi-stroke positive suspect, but not for its gap
    assert f["cc_reasons"].tolist() == ["positive_multi_stroke", ""]


def test_overrides_and_config_thresholds():
    specs = [("CG", [(0, -35.0, 1), (40, -15.0, 1), (110, -12.0, 1)]), ("CG", [(0, 16.0, 1)])]
    assert not flags(specs)["cc_suspect"].any()  # 70 ms gap, 16 kA positive: nothing at defaults
    f = flags(specs, min_interval_ms=60.0, positive_min_ka=16.0)
    assert f["cc_reasons"].tolist() == ["long_gap_after_weak", "single_positive"]
    s, fl = build(specs)
    cfg = from_dict({"continuing_current": {"min_interval_ms": 50.0}})
    assert C.flag_continuing_current(s, fl, cfg)["cc_suspect"].tolist() == [True, False]
    with pytest.raises(InputError, match="unknown"):
        C.flag_continuing_current(s, fl, min_gap=3)
    with pytest.raises(InputError):
        C.flag_continuing_current(s, fl, min_interval_ms=-5.0)


def test_suspect_gaps_names_the_stroke_and_interval():
    s, f = build([("CG", [(0, -35.0, 1), (60, -9.0, 1), (250, -12.0, 1), (300, -7.0, 1), (420, -6.0, 1)])])
    g = C.suspect_gaps(s, f)
    assert g["stroke_order"].tolist() == [2, 4]
    assert g["interval_ms"].tolist() == pytest.approx([190.0, 120.0])
    assert g["peak_current_ka"].tolist() == [-9.0, -7.0]


def test_window_subset_of_flashes_keeps_others_out():
    s, f = build([("CG", [(0, -35.0, 1), (60, -9.0, 1), (250, -12.0, 1)]), ("CG", [(0, 40.0, 1)])])
    out = C.flag_continuing_current(s, f.iloc[[1]].reset_index(drop=True))
    assert len(out) == 1 and out.loc[0, "cc_reasons"] == "single_positive"
    assert f["cc_suspect"].sum() == 0  # the input is not modified


def test_reason_table_and_cautions():
    # the code names are a contract: the order is the order of codes in cc_reasons
    assert list(C.REASONS) == ["single_positive", "positive_multi_stroke", "long_gap_after_weak"]
    assert all(r["explanation"] and r["source"] for r in C.REASONS.values())
    text = " ".join(C.CAUTIONS).lower()
    assert "missed stroke" in text and "last stroke" in text and "not a measurement" in text


@settings(max_examples=30, deadline=None)
@given(st.lists(st.tuples(st.floats(1, 400), st.floats(-60, 60).filter(lambda v: abs(v) > 0.5), st.integers(1, 2)),
                min_size=1, max_size=8))
def test_flag_matches_the_rule_written_out(steps):
    t, strokes = 0.0, []
    for gap, ip, c in steps:
        strokes.append((t, ip, c))
        t += gap
    s, f = build([("CG", strokes)])
    got = C.flag_continuing_current(s, f)
    neg = strokes[0][1] < 0
    gap_rule = neg and any(
        a[1] < 0 and abs(a[1]) < 20 and b[0] - a[0] >= 100 and a[2] == b[2] for a, b in zip(strokes, strokes[1:]))
    likely_ic = 0 < strokes[0][1] < 15  # the table builder's likely_ic (positive below 15 kA)
    strong_pos = any(ip >= 20 for _, ip, _ in strokes)
    pos_rule = (not neg) and not likely_ic and strong_pos
    assert bool(got.loc[0, "cc_suspect"]) == (gap_rule or pos_rule)
    want = (("single_positive" if len(strokes) == 1 else "positive_multi_stroke") if pos_rule
            else "long_gap_after_weak" if gap_rule else "")
    assert got.loc[0, "cc_reasons"] == want


def test_scenario_on_generator_truth():
    """Scenario test: a generated storm whose true continuing currents are known.

    The flags should find most continuing currents that leave a trace (a long gap between two
    detected strokes at one contact), and flag true-CC flashes far more often than others.
    """
    grouping = pytest.importorskip("debrief.flashes")
    from debrief.synth import generate_storm

    obs, truth = generate_storm(seed=8, n_flashes=4000)
    obs["obs_idx"] = np.arange(len(obs))
    s, f = grouping.group_flashes(obs)
    f = C.flag_continuing_current(s, f)
    det = truth[truth["detected"]].set_index("observed_index")
    s = s.join(det[["flash_id", "flash_cc"]].rename(columns={"flash_id": "true_flash"}), on="obs_idx")
    first = s[s["stroke_order"] == 1].set_index("flash_id")
    f = f.join(first[["flash_cc"]], on="flash_id")
    for pol in ("negative", "positive"):
        cg = f[(f["type"] == "CG") & (f["polarity"] == pol)]
        hit_cc = cg.loc[cg["flash_cc"], "cc_suspect"].mean()
        hit_other = cg.loc[~cg["flash_cc"], "cc_suspect"].mean()
        assert hit_cc > 1.4 * hit_other, pol
    # visible negative continuing currents: the CC stroke and the next one both detected
    t = truth.sort_values(["flash_id", "stroke_order"]).reset_index(drop=True)
    nxt = t.shift(-1)
    vis = t[(t["cc_after_ms"] > 0) & (t["flash_polarity"] == "negative") & t["detected"]
            & (nxt["flash_id"] == t["flash_id"]) & nxt["detected"].astype(bool)
            & (t["peak_current_ka"].abs() < 17)]  # clear of the 20 kA threshold after estimate noise
    obs_flash = s.set_index("obs_idx")["flash_id"]
    flagged = set(f.loc[f["cc_suspect"], "flash_id"])
    found = np.mean([obs_flash[i] in flagged for i in vis["observed_index"]])
    # misses come from the network side of the scenario: a stroke reported as a cloud pulse
    # splits the flash, and location error can put the next stroke at a "new" contact (~20%)
    assert len(vis) > 100 and found > 0.75


def test_long_gap_rate_without_continuing_current():
    """The stated false-flag rate of long_gap_after_weak, re-measured (constructed here).

    Storms of debrief.synth with negative_cc_share=0 have no negative continuing current (the
    positive ones follow the last stroke and leave no trace in the stroke data); every
    long_gap_after_weak flag on them is a false flag. Seeds, size and range: NO_CC_FLAG_RATE,
    also stated in docs/cc-reasons.md and in the rule's REASONS text shown by the report.
    """
    from debrief.flashes import group_flashes
    from debrief.synth import generate_storm

    spec = C.NO_CC_FLAG_RATE
    rates = []
    for seed in spec["seeds"]:
        obs, truth = generate_storm(seed=seed, n_flashes=spec["n_flashes"], duration_h=spec["duration_h"],
                                    negative_cc_share=0.0)
        assert not truth.loc[truth["flash_polarity"] == "negative", "flash_cc"].any()
        s, f = group_flashes(obs)
        f = C.flag_continuing_current(s, f)
        neg = f[(f["type"] == "CG") & (f["polarity"] == "negative")]
        assert len(neg) > 900
        rates.append(neg["cc_reasons"].str.split(";").apply(lambda c: spec["code"] in c).mean())
    # measured 0.1987-0.2059 on seeds 1-5 when the range was set
    assert spec["low"] <= min(rates) and max(rates) <= spec["high"], rates
    # The ordinary-interval share it comes from: P(lognormal(GM 56.5 ms, sigma_ln 0.75) >= 100 ms)
    # = 1 - Phi(ln(100/56.5)/0.75) = 0.2233 (scipy.stats.norm, computed from the formula).
    from scipy import stats
    assert 1 - stats.norm.cdf(np.log(100 / 56.5) / 0.75) == pytest.approx(0.2233, abs=1e-4)
    low, high = f"{100 * spec['low']:.0f}", f"{100 * spec['high']:.0f}"
    assert f"{low}-{high}%" in C.REASONS[spec["code"]]["explanation"]
    from pathlib import Path

    doc = (Path(__file__).resolve().parents[1] / "docs" / "cc-reasons.md").read_text()
    assert f"stated\nrange {low}-{high} %" in doc or f"range {low}-{high} %" in doc
    assert "seeds 1, 2, 3, 4, 5" in doc and "2,000 flashes in 4 h" in doc


def test_reason_document_lists_every_code():
    from pathlib import Path

    doc = (Path(__file__).resolve().parents[1] / "docs" / "cc-reasons.md").read_text()
    for code in C.REASONS:
        assert f"| `{code}` |" in doc

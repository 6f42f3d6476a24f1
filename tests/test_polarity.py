"""Polarity, multiplicity and peak-current statistics against worked examples, IEEE check values
and scipy's Kolmogorov-Smirnov statistic.

Flash and stroke tables are constructed here to the grouped-table contract of DEVELOPERS.md, so
these checks do not depend on the grouping module.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats

from debrief import polarity as P
from debrief.errors import InputError

T0 = pd.Timestamp("2026-07-14T19:00:00Z")


def build(specs):
    """Grouped (strokes, flashes) from ``[(type, [(t_ms, ip_ka, contact), ...]), ...]``.

    Flash k starts k seconds after T0; an optional third item ``likely_ic`` overrides the flag.
    """
    srows, frows = [], []
    for k, spec in enumerate(specs, start=1):
        typ, strokes = spec[0], spec[1]
        lic = spec[2] if len(spec) > 2 else (typ == "CG" and strokes[0][1] > 0 and strokes[0][1] < 15)
        times = [T0 + pd.Timedelta(seconds=k) + pd.Timedelta(milliseconds=t) for t, _, _ in strokes]
        for j, ((t, ip, c), tt) in enumerate(zip(strokes, times), start=1):
            srows.append({"time": tt, "latitude": 45.5, "longitude": -93.2, "peak_current_ka": float(ip), "type": typ,
                          "flash_id": k, "stroke_order": j, "ground_contact": c if typ == "CG" else 0,
                          "likely_ic": bool(typ == "CG" and ip > 0 and ip < 15)})
        iv = np.diff([t for t, _, _ in strokes])
        frows.append({
            "flash_id": k, "type": typ, "time": times[0], "latitude": 45.5, "longitude": -93.2,
            "polarity": "positive" if strokes[0][1] > 0 else "negative",
            "mixed_polarity": len({np.sign(ip) for _, ip, _ in strokes}) > 1,
            "multiplicity": len(strokes), "interstroke_ms": ";".join(str(float(v)) for v in iv),
            "duration_ms": float(strokes[-1][0] - strokes[0][0]),
            "ground_contacts": max(c for _, _, c in strokes) if typ == "CG" else 0,
            "max_abs_peak_ka": max(abs(ip) for _, ip, _ in strokes), "likely_ic": bool(lic),
            "cc_suspect": False, "cc_reasons": "",
        })
    s = pd.DataFrame(srows)
    f = pd.DataFrame(frows)
    for d in (s, f):
        d["type"] = pd.Categorical(d["type"], categories=["CG", "IC"])
        d["time"] = pd.to_datetime(d["time"], utc=True).dt.as_unit("ns")
    return s, f


# Worked example constructed here (flashes worked out with the classic rule of [Cummins1998]):
# multiplicities [4, 1, 1, 2, 1], mean 1.8, single-stroke 0.6, intervals 55/85/460/60 ms, GM 106.58 ms.
WORKED = [
    ("CG", [(0, -25, 1), (55, -12, 1), (140, -9, 2), (600, -11, 1)]),
    ("CG", [(0, -10, 1)]),
    ("CG", [(0, -30, 1)]),
    ("CG", [(0, -8, 1), (60, -14, 1)]),
    ("CG", [(0, 45, 1)]),
]


def test_multiplicity_of_worked_example():
    _, f = build(WORKED)
    tab = P.multiplicity_table(f)
    assert list(tab.index) == ["1", "2", "3", "4", "5", "6", "7", "8", "9", "10+"]
    assert tab.loc["1", "all_count"] == 3 and tab.loc["2", "all_count"] == 1 and tab.loc["4", "all_count"] == 1
    assert tab.loc["1", "positive_count"] == 1 and tab.loc["1", "negative_count"] == 2
    assert tab["negative_percent"].sum() == pytest.approx(100.0)
    assert tab.loc["1", "negative_percent"] == pytest.approx(50.0)
    means = P.mean_multiplicity(f)
    assert means.loc["all", "mean_multiplicity"] == pytest.approx(1.8)  # worked example: 9 strokes / 5 flashes [X]
    assert means.loc["all", "single_stroke_share"] == pytest.approx(0.6)
    assert means.loc["negative", "mean_multiplicity"] == pytest.approx(2.0)


def test_interstroke_summary_of_worked_example():
    _, f = build(WORKED)
    out = P.interstroke_summary(f)
    # worked example: GM of 55, 85, 460, 60 ms is 106.58 ms (computed from the formula) [X].
    assert out.loc["all", "geometric_mean_ms"] == pytest.approx(106.58, abs=0.01)
    assert out.loc["all", "median_ms"] == pytest.approx(72.5)
    assert out.loc["negative", "intervals"] == 4 and out.loc["negative", "flashes"] == 2
    assert out.loc["positive", "intervals"] == 0 and math.isnan(out.loc["positive", "geometric_mean_ms"])


def test_multiplicity_open_bin_and_type_filter():
    m12 = [(i * 40, -10, 1) for i in range(12)]
    _, f = build([("CG", m12), ("CG", [(i * 40, -10, 1) for i in range(15)]), ("IC", [(0, 5, 0), (10, -4, 0)])])
    tab = P.multiplicity_table(f)
    assert tab.loc["10+", "negative_count"] == 2 and tab["all_count"].sum() == 2
    assert P.multiplicity_table(f, type="IC").loc["2", "all_count"] == 1
    assert P.multiplicity_table(f, type=None)["all_count"].sum() == 3
    assert P.multiplicity_table(f, max_bin=15).loc["15+", "all_count"] == 1


def test_positive_share_leaves_likely_ic_out_unless_asked():
    specs = [("CG", [(0, -20, 1)])] * 8 + [("CG", [(0, 40, 1)]), ("CG", [(0, 9, 1)])]
    _, f = build(specs)
    out = P.positive_share(f)
    assert out["likely_ic"] == 1 and out["likely_ic_left_out"] == 1
    assert out["ground_flashes"] == 9 and out["share"] == pytest.approx(1 / 9)
    both = P.positive_share(f, include_likely_ic=True)
    assert both["share"] == pytest.approx(2 / 10) and both["likely_ic_left_out"] == 0


def test_histogram_counts_everything_and_uses_half_open_bins():
    s, _ = build([("CG", [(0, -5.0, 1), (50, -4.99, 1), (90, -250.0, 1)]), ("CG", [(0, 200.0, 1)]), ("IC", [(0, 3, 0)])])
    h = P.polarity_histogram(s)
    assert h[["negative_first", "negative_subsequent", "positive_first", "positive_subsequent"]].to_numpy().sum() == 4
    row5 = h[h["bin_lo_ka"] == 5.0].iloc[0]
    assert row5["negative_first"] == 1  # 5.0 kA is in [5, 10)
    assert h[h["bin_lo_ka"] == 0.0].iloc[0]["negative_subsequent"] == 1
    last = h.iloc[-1]
    assert last["bin_lo_ka"] == 200.0 and math.isinf(last["bin_hi_ka"])
    assert last["negative_subsequent"] == 1 and last["positive_first"] == 1
    h2 = P.polarity_histogram(s, bin_edges_ka=[10, 100])
    assert list(h2["bin_lo_ka"]) == [0.0, 10.0, 100.0]
    assert h2.iloc[0]["negative_first"] == 1 and h2.iloc[0]["negative_subsequent"] == 1
    with pytest.raises(InputError):
        P.polarity_histogram(s, bin_edges_ka=[10, 5])


@settings(max_examples=30, deadline=None)
@given(st.lists(st.floats(0.1, 500, allow_nan=False).flatmap(lambda a: st.sampled_from([a, -a])), min_size=1, max_size=40))
def test_histogram_total_equals_stroke_count(currents):
    s, _ = build([("CG", [(i * 30, ip, 1) for i, ip in enumerate(currents[:15])])] +
                 [("CG", [(0, ip, 1)]) for ip in currents[15:]])
    h = P.polarity_histogram(s, bin_edges_ka=[2, 7.5, 30, 100])
    assert h.iloc[:, 2:].to_numpy().sum() == len(currents)
    assert h["positive_first"].sum() + h["positive_subsequent"].sum() == sum(c > 0 for c in currents)


def test_first_subsequent_medians():
    s, _ = build([("CG", [(0, -30, 1), (50, -10, 1), (100, -14, 1)]), ("CG", [(0, -40, 1), (70, -12, 1)]),
                  ("CG", [(0, 50, 1)])])
    m = P.first_subsequent_medians(s)
    assert m.loc["negative", "first_median_ka"] == pytest.approx(35.0)
    assert m.loc["negative", "subsequent_median_ka"] == pytest.approx(12.0)
    assert m.loc["negative", "subsequent_count"] == 3
    assert m.loc["positive", "first_median_ka"] == pytest.approx(50.0) and m.loc["positive", "subsequent_count"] == 0


@pytest.mark.parametrize("i_ka, first, subsequent", [
    # check values [X] computed from the [IEEE1410] / [IEEE1243] formulas (equations from memory)
    (10, 0.94987, 0.62064), (20, 0.75758, 0.20113), (31, 0.50000, 0.07159),
    (60, 0.15227, 0.01280), (100, 0.04543, 0.00325),
])
def test_ieee_exceedance_check_values(i_ka, first, subsequent):
    assert P.ieee_exceedance(i_ka, "first") == pytest.approx(first, abs=5e-6)
    assert P.ieee_exceedance(i_ka, "subsequent") == pytest.approx(subsequent, abs=5e-6)


def test_conditional_reference_from_check_values():
    # P(I >= 60 | I >= 10) = 0.15227 / 0.94987 from the same check values (IEEE Std 1410, from memory)
    assert P.ieee_conditional_cdf(60.0, "first", 10.0) == pytest.approx(1 - 0.15227 / 0.94987, abs=1e-5)
    assert P.ieee_conditional_cdf(10.0, "first", 10.0) == pytest.approx(0.0)
    assert P.ieee_conditional_cdf(5.0, "subsequent", 10.0) == 0.0
    assert P.ieee_conditional_cdf(1e6, "subsequent", 10.0) == pytest.approx(1.0)


def _ieee_sample(rng, n, kind):
    m, a = P.IEEE_PARAMETERS[kind]
    u = rng.random(n)  # P(I >= i) = u  ->  i = M (1/u - 1)^(1/a)
    return m * (1.0 / u - 1.0) ** (1.0 / a)


def test_ks_distance_equals_scipy_kstest_statistic():
    rng = np.random.default_rng(4)
    x = np.round(_ieee_sample(rng, 700, "first"), 1)  # rounded like a network's 0.1 kA: ties
    x = x[x >= 10]
    cdf = lambda v: P.ieee_conditional_cdf(v, "first", 10.0)  # noqa: E731
    d, at = P.ks_distance(x, cdf)
    ref = stats.kstest(x, cdf)
    assert d == pytest.approx(ref.statistic, abs=1e-12)
    assert at == pytest.approx(ref.statistic_location)


@settings(max_examples=25, deadline=None)
@given(st.lists(st.floats(10, 400, allow_nan=False), min_size=1, max_size=60))
def test_ks_distance_matches_scipy_property(values):
    cdf = lambda v: P.ieee_conditional_cdf(v, "subsequent", 10.0)  # noqa: E731
    assert P.ks_distance(values, cdf)[0] == pytest.approx(stats.kstest(values, cdf).statistic, abs=1e-12)


def test_compare_reference_on_strokes_drawn_from_the_reference():
    rng = np.random.default_rng(7)
    first = -_ieee_sample(rng, 3000, "first")
    sub = -_ieee_sample(rng, 3000, "subsequent")
    s, _ = build([("CG", [(0, a, 1), (60, b, 1)]) for a, b in zip(first, sub)])
    out = P.compare_reference(s)  # default floor 10 kA from config.py [statistics]
    assert out.loc["first", "floor_ka"] == 10.0
    n1 = int((np.abs(first) >= 10).sum())
    assert out.loc["first", "strokes"] == n1 and out.loc["first", "below_floor"] == 3000 - n1
    # drawn from the reference itself: distance within the 1% KS critical value 1.63/sqrt(n) (Smirnov)
    assert out.loc["first", "ks_distance"] < 1.63 / math.sqrt(n1)
    kept = np.abs(sub)[np.abs(sub) >= 10]
    ks = stats.kstest(kept, lambda v: P.ieee_conditional_cdf(v, "subsequent", 10.0)).statistic
    assert out.loc["subsequent", "ks_distance"] == pytest.approx(ks, abs=1e-12)
    # the conditioned reference median solves F(i | I >= 10) = 0.5 (scipy brentq)
    med = optimize.brentq(lambda i: P.ieee_conditional_cdf(i, "first", 10.0) - 0.5, 10, 200)
    assert out.loc["first", "reference_median_ka"] == pytest.approx(med, rel=1e-9)
    # a storm of weaker strokes is far from the reference
    weak, _ = build([("CG", [(0, a / 2, 1)]) for a in first])
    assert P.compare_reference(weak, floor_ka=10.0).loc["first", "ks_distance"] > 0.2


def test_bad_input_is_one_clear_error():
    s, f = build(WORKED)
    with pytest.raises(InputError, match="multiplicity"):
        P.multiplicity_table(f.drop(columns="multiplicity"))
    with pytest.raises(InputError):
        P.compare_reference(s, floor_ka=-1.0)
    with pytest.raises(InputError):
        P.multiplicity_table(f, type="XX")


def test_zero_interval_is_counted_but_kept_out_of_the_geometric_mean():
    # two reports at the same instant in one flash: log(0) would break the geometric mean
    _, f = build([("CG", [(0, -20, 1), (0, -10, 1), (50, -12, 1)])])
    out = P.interstroke_summary(f)
    assert out.loc["negative", "intervals"] == 2 and out.loc["negative", "zero_intervals"] == 1
    assert out.loc["negative", "geometric_mean_ms"] == pytest.approx(50.0)
    assert out.loc["negative", "median_ms"] == pytest.approx(25.0)


def test_exceedance_curve_beside_the_reference():
    rng = np.random.default_rng(9)
    s, _ = build([("CG", [(0, -a, 1)]) for a in _ieee_sample(rng, 4000, "first")])
    cur = P.exceedance_curve(s, "first", floor_ka=10.0, currents_ka=[10.0, 31.0, 60.0])
    # conditioned check values computed from the [IEEE1410] formula (from memory):
    # P(I >= 31 | I >= 10) = 0.5 / 0.94987, P(I >= 60 | I >= 10) = 0.15227 / 0.94987
    assert cur["ieee"].tolist() == pytest.approx([1.0, 0.5 / 0.94987, 0.15227 / 0.94987], abs=1e-5)
    assert cur["observed"].iloc[0] == 1.0
    # sampled from the reference: within 4 binomial standard deviations (n about 3,800)
    n = int((s["peak_current_ka"].abs() >= 10).sum())
    sd = np.sqrt(cur["ieee"] * (1 - cur["ieee"]) / n)
    assert (np.abs(cur["observed"] - cur["ieee"]) < 4 * sd + 1e-12).all()

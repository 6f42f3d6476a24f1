"""The storm generator against published climatology and the geometry of error ellipses.

Truth-side checks compare the generator's TRUE flashes with published figures (sources beside
each check). Tolerances are binomial or order-statistic bands stated beside each check, wide
enough for the sample sizes used (about 20,000 flashes).
"""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from debrief import synth
from debrief.synth import OBSERVED_COLUMNS, generate_storm

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def storm():
    return generate_storm(seed=11, n_flashes=20000)


@pytest.fixture(scope="module")
def true_flashes(storm):
    _, truth = storm
    return truth.groupby("flash_id").agg(
        flash_type=("flash_type", "first"), polarity=("flash_polarity", "first"),
        multiplicity=("stroke_order", "max"), contacts=("ground_contact", "max"), cc=("flash_cc", "first"),
    )


def _true_intervals_ms(truth, polarity):
    t = truth[(truth["flash_type"] == "CG") & (truth["flash_polarity"] == polarity)]
    t = t.sort_values(["flash_id", "stroke_order"])
    dt = t.groupby("flash_id")["time"].diff().dt.total_seconds().to_numpy() * 1e3
    return dt[~np.isnan(dt)]


def _binomial_band(n, p, z=4.0):
    sd = math.sqrt(p * (1 - p) / n)
    return p - z * sd, p + z * sd


def _share_in_ellipse(observed, truth, limit=3000):
    """Share of true points inside their reported ellipse, by geodesic offsets (geographiclib)."""
    det = truth[truth["detected"]].iloc[:limit]
    obs = observed.iloc[det["observed_index"].to_numpy()]
    g = Geodesic.WGS84
    inside = 0
    for (la0, lo0, a, b, brg), (la1, lo1) in zip(
        obs[["latitude", "longitude", "semi_major_km", "semi_minor_km", "major_bearing_deg"]].to_numpy(),
        det[["latitude", "longitude"]].to_numpy(),
    ):
        r = g.Inverse(la0, lo0, la1, lo1)
        d_km, az = r["s12"] / 1000.0, math.radians(r["azi1"] - brg)
        along, across = d_km * math.cos(az), d_km * math.sin(az)
        inside += (along / a) ** 2 + (across / b) ** 2 <= 1.0
    return inside / len(det), len(det)


def test_half_of_true_points_fall_inside_their_50pct_ellipses(storm):
    observed, truth = storm
    share, n = _share_in_ellipse(observed, truth)
    # A 2-D Gaussian's p-ellipse holds p: chi-square with 2 degrees of freedom (scipy), 0.5 here.
    p = stats.chi2.cdf(-2 * math.log(1 - 0.5), df=2)
    assert p == pytest.approx(0.5)
    lo, hi = _binomial_band(n, p)  # 4 binomial standard deviations
    assert lo < share < hi


def test_over_confident_network_puts_fewer_true_points_inside():
    # Constructed scenario: errors twice the reported ellipse; P(inside) = chi2.cdf(k^2/4, 2) = 0.159.
    observed, truth = generate_storm(seed=3, n_flashes=1500, error_scale=2.0)
    share, n = _share_in_ellipse(observed, truth, limit=2000)
    p = stats.chi2.cdf(-2 * math.log(0.5) / 4.0, df=2)
    lo, hi = _binomial_band(n, p)
    assert lo < share < hi


def test_positive_share_of_ground_flashes_is_about_ten_percent(true_flashes):
    cg = true_flashes[true_flashes["flash_type"] == "CG"]
    share = (cg["polarity"] == "positive").mean()
    lo, hi = _binomial_band(len(cg), 0.10)  # about 1 in 10 (common practice), 4 sd
    assert lo < share < hi


def test_negative_multiplicity_within_published_range(true_flashes):
    neg = true_flashes[(true_flashes["flash_type"] == "CG") & (true_flashes["polarity"] == "negative")]
    # Rakov & Uman 2003, Lightning: Physics and Effects (from memory): mean 3-5 strokes per
    # negative flash, 15-20% single-stroke.
    assert 3.0 <= neg["multiplicity"].mean() <= 5.0
    assert 0.15 <= (neg["multiplicity"] == 1).mean() <= 0.20
    assert neg["multiplicity"].max() <= 15  # max strokes per flash, Cummins et al. 1998 (from memory)


def test_positive_flashes_mostly_single_stroke(true_flashes):
    pos = true_flashes[(true_flashes["flash_type"] == "CG") & (true_flashes["polarity"] == "positive")]
    # Saba et al. 2010, JGR 10.1029/2010JD014330: 81% single-stroke, 1.2 strokes per flash.
    lo, hi = _binomial_band(len(pos), 0.81)
    assert lo < (pos["multiplicity"] == 1).mean() < hi
    assert pos["multiplicity"].mean() == pytest.approx(1.2, abs=0.06)


def test_negative_interstroke_geometric_mean_about_60_ms(storm):
    dt = _true_intervals_ms(storm[1], "negative")
    gm = math.exp(np.log(dt).mean())
    # Saba et al. 2010 (about 60 ms); Thottappillil et al. 1992, JGR 97 (57 ms); Zhu et al. 2015 (62 ms).
    assert 55.0 <= gm <= 65.0


def test_positive_interstroke_geometric_mean_about_94_ms(storm):
    dt = _true_intervals_ms(storm[1], "positive")
    gm = math.exp(np.log(dt).mean())
    # Saba et al. 2010: GM 94 ms for positive flashes; few intervals here (about 250), so +-20%.
    assert 75.0 <= gm <= 113.0


def test_first_negative_stroke_currents_follow_the_cigre_lognormal(storm):
    t = storm[1]
    first = t[(t["flash_polarity"] == "negative") & (t["type"] == "CG") & (t["stroke_order"] == 1)]
    ip = first["peak_current_ka"].abs().to_numpy()
    # CIGRE TB 549 (2013) [CIGRE549] as cited by open-source line code (from memory): median 31.1 kA,
    # sigma_ln 0.484. The sample median's log has sd 1.2533*0.484/sqrt(n) (~0.007): 5% is >6 sd.
    assert np.median(ip) == pytest.approx(31.1, rel=0.05)
    ks = stats.kstest(ip, stats.lognorm(s=0.484, scale=31.1).cdf).statistic
    assert ks < 1.63 / math.sqrt(len(ip))  # KS critical value at 1% (Smirnov asymptotic)


def test_positive_first_stroke_median(storm):
    t = storm[1]
    first = t[(t["flash_polarity"] == "positive") & (t["stroke_order"] == 1)]
    # Saba et al. 2010: median +Ip 39.4 kA; about 1,000 flashes with sigma_ln 0.7 -> +-10%.
    assert np.median(first["peak_current_ka"]) == pytest.approx(39.4, rel=0.10)


def test_ground_contacts_per_negative_flash_near_poelman(true_flashes):
    neg = true_flashes[(true_flashes["flash_type"] == "CG") & (true_flashes["polarity"] == "negative")]
    # Poelman et al. 2021, NHESS 21: 1.56 ground strike points per flash.
    assert neg["contacts"].mean() == pytest.approx(1.56, abs=0.1)


def test_new_contacts_lie_km_away_from_the_first_stroke(storm):
    t = storm[1]
    neg = t[(t["flash_polarity"] == "negative") & (t["type"] == "CG")].sort_values(["flash_id", "stroke_order"])
    first = neg[neg["stroke_order"] == 1].set_index("flash_id")[["latitude", "longitude"]]
    new = neg[(neg["ground_contact"] > 1) & (neg.groupby("flash_id")["ground_contact"].diff() > 0)]
    f = first.loc[new["flash_id"]]
    from debrief.geodesy import inverse_km

    d, _ = inverse_km(f["latitude"], f["longitude"], new["latitude"], new["longitude"])
    # Poelman et al. 2021: median first-stroke-to-new-contact distance 1.3-2.75 km.
    assert 1.3 <= np.median(d) <= 2.75


def test_long_continuing_current_shares(true_flashes):
    cg = true_flashes[true_flashes["flash_type"] == "CG"]
    neg, pos = cg[cg["polarity"] == "negative"], cg[cg["polarity"] == "positive"]
    # Saba et al. 2010: about 30% of negative and 75% of positive flashes have long CC.
    lo, hi = _binomial_band(len(neg), 0.30)
    assert lo < neg["cc"].mean() < hi
    lo, hi = _binomial_band(len(pos), 0.75)
    assert lo < pos["cc"].mean() < hi


def test_continuing_currents_are_long_and_follow_weaker_strokes(storm):
    t = storm[1]
    cc = t[t["cc_after_ms"] > 0]
    # long continuing current is >= 40 ms (Kitagawa et al. 1962; Saba et al. 2010).
    assert cc["cc_after_ms"].min() >= 40.0
    # CC-initiating negative subsequent strokes have lower peaks (Rakov & Uman 1990; Saba et al. 2006).
    neg_sub = t[(t["flash_polarity"] == "negative") & (t["type"] == "CG") & (t["stroke_order"] > 1)]
    with_cc = neg_sub[neg_sub["cc_after_ms"] > 0]["peak_current_ka"].abs()
    without = neg_sub[neg_sub["cc_after_ms"] == 0]["peak_current_ka"].abs()
    assert with_cc.median() < 0.85 * without.median()


def test_cells_move_from_south_west_to_north_east(storm):
    # Constructed scenario (the storm was built to move so): the last hour's flashes lie NE of the first hour's.
    t = storm[1]
    t = t[t["stroke_order"] == 1]
    hour = (t["time"] - t["time"].min()).dt.total_seconds() // 3600
    a, b = t[hour == 0], t[hour == hour.max()]
    assert b["latitude"].mean() > a["latitude"].mean() + 0.05
    assert b["longitude"].mean() > a["longitude"].mean() + 0.05


def test_observed_table_is_canonical(storm):
    observed, truth = storm
    assert tuple(observed.columns) == OBSERVED_COLUMNS
    assert str(observed["time"].dtype) == "datetime64[ns, UTC]"
    assert observed["time"].is_monotonic_increasing
    assert list(observed.index) == list(range(len(observed)))
    assert set(observed["type"].cat.categories) == {"CG", "IC"}
    assert (observed["peak_current_ka"] != 0).all()
    assert (observed["semi_minor_km"] <= observed["semi_major_km"]).all()
    assert observed["semi_major_km"].between(0.1, 1.0).all()
    assert ((observed["major_bearing_deg"] >= 0) & (observed["major_bearing_deg"] < 180)).all()
    assert "source_row" not in observed.columns
    assert truth["detected"].sum() == len(observed)


def test_subsequent_stroke_detection_near_design(storm):
    # Our design choice (module docstring): about 82% of negative subsequent strokes detected;
    # regional networks report 60-90% stroke DE (Cummins & Murphy 2009, from memory).
    t = storm[1]
    sub = t[(t["flash_polarity"] == "negative") & (t["type"] == "CG") & (t["stroke_order"] > 1)]
    assert 0.75 <= sub["detected"].mean() <= 0.90


def test_seeded_determinism():
    a = generate_storm(seed=5, n_flashes=300)
    b = generate_storm(seed=5, n_flashes=300)
    c = generate_storm(seed=6, n_flashes=300)
    pd.testing.assert_frame_equal(a[0], b[0])
    pd.testing.assert_frame_equal(a[1], b[1])
    assert not a[0]["latitude"].equals(c[0]["latitude"].iloc[: len(a[0])])


def test_stroke_rate_sets_the_size():
    obs, _ = generate_storm(seed=2, duration_h=1.0, strokes_per_s=2.0)
    assert 0.85 * 7200 < len(obs) < 1.15 * 7200


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 200))
def test_invariants(seed, n):
    observed, truth = generate_storm(seed=seed, n_flashes=n, duration_h=0.5)
    assert truth["flash_id"].nunique() == n
    m = truth.groupby("flash_id")["stroke_order"].agg(["max", "count", "min"])
    assert (m["max"] == m["count"]).all() and (m["min"] == 1).all() and (m["max"] <= 15).all()
    assert truth["time"].is_monotonic_increasing and observed["time"].is_monotonic_increasing
    det = truth[truth["detected"]]
    assert sorted(det["observed_index"]) == list(range(len(observed)))
    o = observed.iloc[det["observed_index"].to_numpy()]
    assert (o["time"].to_numpy() == det["time"].to_numpy()).all()
    assert (np.sign(o["peak_current_ka"].to_numpy()) == np.sign(det["peak_current_ka"].to_numpy())).all()
    assert (truth.loc[~truth["detected"], "observed_index"] == -1).all()


# ---- the example event folder


def test_example_event_is_the_seeded_output(tmp_path):
    # The shipped example must be exactly what the generator writes for its seed (others build on it).
    r = subprocess.run([sys.executable, "-m", "debrief.synth", str(tmp_path), "--seed", str(synth.EXAMPLE_SEED)],
                       cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    for name in ("event.toml", "strokes.csv", "truth.csv"):
        assert (tmp_path / name).read_bytes() == (ROOT / "example_event" / name).read_bytes(), name


def test_example_event_files(example_event):
    from debrief.config import load_event_config

    cfg = load_event_config(example_event)
    assert cfg.name == "Marrowfield Basin storm, 14 July 2026"
    assert cfg.time_zone == "America/Chicago"
    assert cfg.get("ellipse_confidence") == 0.5 and cfg.get("flash_detection_efficiency") == 0.9
    assert (example_event / "event.toml").read_text().startswith("# Invented data")
    lines = (example_event / "strokes.csv").read_text().splitlines()
    assert lines[0] == ",".join(OBSERVED_COLUMNS)
    assert 3000 <= len(lines) - 1 <= 8000
    truth = pd.read_csv(example_event / "truth.csv", dtype={"source_row": "Int64"})
    rows = truth["source_row"].dropna().astype(int)
    # every detected truth row points at a line with its own time; bad rows are in no truth row
    assert all(lines[r - 1].split(",")[0] == t for r, t in zip(rows, truth.loc[rows.index, "time"]))
    bad = {i + 1 for i, ln in enumerate(lines) if ",95.000000," in ln or ln.startswith(",") or ",X," in ln
           or ln.split(",")[3] == "0.0"}
    assert len(bad) == 4 and not bad & set(rows)
    assert len(lines) - 1 == len(rows) + 4 + 1  # accepted + 4 bad + 1 exact duplicate
    assert len(set(lines[1:])) == len(lines) - 2


def test_example_event_through_the_reader(example_event):
    strokes_mod = pytest.importorskip("debrief.io.strokes")
    from debrief.config import load_event_config

    strokes, ledger = strokes_mod.read_strokes(example_event / "strokes.csv", config=load_event_config(example_event))
    truth = pd.read_csv(example_event / "truth.csv", dtype={"source_row": "Int64"})
    assert ledger.rows_rejected == 4 and ledger.duplicates_dropped == 1
    assert len(strokes) == truth["source_row"].notna().sum()
    assert set(strokes["source_row"]) == set(truth["source_row"].dropna().astype(int))


@pytest.mark.parametrize("extra", [["--strokes", "0"], ["--seed", "x"]])
def test_synth_command_bad_input_exit_2(tmp_path, extra):
    r = subprocess.run([sys.executable, "-m", "debrief.synth", str(tmp_path / "ev"), *extra],
                       cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert r.returncode == 2 and "Traceback" not in r.stderr
    assert not (tmp_path / "ev" / "strokes.csv").exists()


def test_synth_command_size_option(tmp_path):
    r = subprocess.run([sys.executable, "-m", "debrief.synth", str(tmp_path), "--strokes", "1000", "--seed", "3"],
                       cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    n = len((tmp_path / "strokes.csv").read_text().splitlines()) - 1 - 5  # header, 4 bad rows, 1 duplicate
    assert 850 <= n <= 1150

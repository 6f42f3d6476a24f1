"""Crew alert periods: scenarios whose truth we constructed, the 30-minute rule, the crew log."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from hypothesis import given, settings
from hypothesis import strategies as st

from debrief import alerts as A
from debrief.config import from_dict
from debrief.errors import InputError

T0 = pd.Timestamp("2026-07-14T19:00:00Z")
SITE = (45.5, -93.2)


def strokes_at(minutes, dist_km=2.0, az=45.0, kind="CG"):
    """Strokes `dist_km` from SITE (GeographicLib Direct, Karney 2013) at T0 + minutes."""
    kinds = [kind] * len(minutes) if isinstance(kind, str) else kind
    dists = [dist_km] * len(minutes) if np.isscalar(dist_km) else dist_km
    rows = []
    for m, k, d in zip(minutes, kinds, dists):
        g = Geodesic.WGS84.Direct(SITE[0], SITE[1], az, d * 1000.0)
        rows.append({"time": T0 + pd.Timedelta(minutes=m), "latitude": g["lat2"], "longitude": g["lon2"],
                     "peak_current_ka": -15.0, "type": k})
    df = pd.DataFrame(rows)
    df["time"] = pd.to_datetime(df["time"], utc=True).astype("datetime64[ns, UTC]")
    return df.sort_values("time").reset_index(drop=True)


def one_site(**kw):
    return pd.DataFrame([{"name": "Depot", "latitude": SITE[0], "longitude": SITE[1], **kw}])


def test_default_is_the_30_minute_rule_and_10_km():
    # 30 min after the last stroke: NOAA/NWS rule, Holle, Lopez & Zimmermann (1999) BAMS 80;
    # 10 km stop radius: common practice. Both are the defaults of event.toml [alerts].
    cfg = from_dict({})
    assert cfg["alerts"]["all_clear_min"] == 30.0 and cfg["alerts"]["stop_km"] == 10.0
    per = A.alert_periods(strokes_at([0.0]), one_site(), cfg, data_end=T0 + pd.Timedelta(hours=2))
    assert per["all_clear"].iloc[0] - per["start"].iloc[0] == pd.Timedelta(minutes=30)


def test_periods_split_where_the_gap_exceeds_the_all_clear():
    # Constructed: strokes at 0, 10, 35 min form one period (each within 30 min of the previous),
    # 70 min starts another (35 + 30 = 65 < 70); exactly 30 min later still extends (<= rule).
    s = strokes_at([0, 10, 35, 70, 100, 131])
    per = A.alert_periods(s, one_site(), data_end=T0 + pd.Timedelta(hours=5))
    assert per["level"].tolist() == ["stop"] * 3
    assert [(p.start - T0) / pd.Timedelta(minutes=1) for p in per.itertuples()] == [0, 70, 131]
    assert [(p.all_clear - T0) / pd.Timedelta(minutes=1) for p in per.itertuples()] == [65, 130, 161]
    assert per["n_strokes"].tolist() == [3, 2, 1]
    assert per["duration_min"].tolist() == pytest.approx([65, 60, 30])
    assert not per["open_at_end"].any()
    tot = A.site_totals(per, ["Depot", "Yard"])
    stop = tot[tot["level"] == "stop"].set_index("site")
    assert stop.loc["Depot", "total_min"] == pytest.approx(155) and stop.loc["Depot", "n_periods"] == 3
    assert stop.loc["Yard", "total_min"] == 0.0


def test_radius_types_and_per_site_radius():
    # 9.9 km counts, 10.1 km does not; cloud pulses only with include_ic; a site's own stop_km wins.
    s = strokes_at([0, 5, 10], dist_km=[9.9, 10.1, 3.0], kind=["CG", "CG", "IC"])
    per = A.alert_periods(s, one_site(), data_end=T0 + pd.Timedelta(hours=2))
    assert per["n_strokes"].tolist() == [1] and per["nearest_km"].iloc[0] == pytest.approx(9.9, abs=1e-6)
    per_ic = A.alert_periods(s, one_site(), include_ic=True, data_end=T0 + pd.Timedelta(hours=2))
    assert per_ic["n_strokes"].tolist() == [2]
    per_site = A.alert_periods(s, one_site(stop_km=12.0), data_end=T0 + pd.Timedelta(hours=2))
    assert per_site["n_strokes"].tolist() == [2]


def test_warning_level_and_open_at_end():
    s = strokes_at([0, 20, 50], dist_km=[14.0, 5.0, 15.0])
    per = A.alert_periods(s, one_site(), warn_km=16.0, data_end=T0 + pd.Timedelta(minutes=60))
    stop = per[per["level"] == "stop"]
    warn = per[per["level"] == "warn"]
    assert len(stop) == 1 and stop["n_strokes"].iloc[0] == 1 and not stop["open_at_end"].iloc[0]
    assert len(warn) == 1 and warn["n_strokes"].iloc[0] == 3
    assert warn["open_at_end"].iloc[0]  # all-clear 80 min > data end 60 min: still open


def test_site_window_counts_strokes_from_one_all_clear_before():
    s = strokes_at([0, 50, 200])
    site = one_site(start=T0 + pd.Timedelta(minutes=40), end=T0 + pd.Timedelta(minutes=100))
    per = A.alert_periods(s, site, data_end=T0 + pd.Timedelta(hours=5))
    assert [(p.start - T0) / pd.Timedelta(minutes=1) for p in per.itertuples()] == [50]
    site = one_site(start=T0 + pd.Timedelta(minutes=20), end=T0 + pd.Timedelta(minutes=100))
    per = A.alert_periods(s, site, data_end=T0 + pd.Timedelta(hours=5))
    assert [(p.start - T0) / pd.Timedelta(minutes=1) for p in per.itertuples()] == [0, 50]  # the period of the stroke at 0 was still running at 20


def test_bad_settings():
    with pytest.raises(InputError):
        A.alert_periods(strokes_at([0]), one_site(), stop_km=0.0)
    with pytest.raises(InputError):
        A.alert_periods(strokes_at([0]), one_site(), all_clear_min=-5.0)
    with pytest.raises(InputError):
        A.alert_periods(strokes_at([0]), one_site(latitude=91.0))


@settings(max_examples=30, deadline=None)
@given(st.lists(st.floats(0, 600), min_size=1, max_size=25), st.floats(5, 60))
def test_period_invariants(minutes, clear):
    # Invariants: periods are ordered and apart by more than the all-clear; every stroke is in one;
    # all_clear = last stroke + all-clear time.
    s = strokes_at(sorted(minutes))
    per = A.alert_periods(s, one_site(), all_clear_min=clear, data_end=T0 + pd.Timedelta(hours=20))
    assert per["n_strokes"].sum() == len(minutes)
    assert (per["start"].diff().dropna() > pd.Timedelta(0)).all()
    gap = per["start"].iloc[1:].reset_index(drop=True) - per["last_stroke"].iloc[:-1].reset_index(drop=True)
    assert (gap > pd.Timedelta(minutes=clear)).all()
    err = (per["all_clear"] - per["last_stroke"] - pd.Timedelta(minutes=clear)).abs()
    assert (err < pd.Timedelta(microseconds=1)).all()


def test_crew_log_comparison():
    # Constructed: a period 0-65 min. The crew stopped at 5 and resumed at 50 (worked 0-5 and
    # 50-65 inside the period), then stopped 100-120 with no period (stopped outside).
    per = A.alert_periods(strokes_at([0, 10, 35]), one_site(), data_end=T0 + pd.Timedelta(hours=5))
    log = pd.DataFrame({"site": ["Depot", "Depot", "Elsewhere"],
                        "stopped": [T0 + pd.Timedelta(minutes=5), T0 + pd.Timedelta(minutes=100), T0],
                        "resumed": [T0 + pd.Timedelta(minutes=50), T0 + pd.Timedelta(minutes=120), pd.NaT],
                        "source_row": [2, 3, 4]})
    out = A.compare_crew_log(per, log, sites=["Depot"])
    dep = out[out["site"] == "Depot"]
    worked = dep[dep["finding"] == "worked during stop period"]
    assert worked["minutes"].tolist() == pytest.approx([5.0, 15.0])
    outside = dep[dep["finding"] == "stopped outside stop period"]
    assert outside["minutes"].tolist() == pytest.approx([20.0]) and outside["crew_log_line"].tolist() == [3]
    assert out[out["site"] == "Elsewhere"]["finding"].tolist() == ["unknown site"]
    # A log that covers the period exactly has no finding.
    exact = pd.DataFrame({"site": ["Depot"], "stopped": [T0], "resumed": [T0 + pd.Timedelta(minutes=65)], "source_row": [2]})
    assert len(A.compare_crew_log(per, exact)) == 0


def test_alert_sites_selects_crew_rows():
    sites = pd.DataFrame({"name": ["Claim", "Crew"], "latitude": [45.0, 45.1], "longitude": [-93.0, -93.1],
                          "radius_km": [1.0, np.nan], "stop_km": [np.nan, 8.0]})
    assert A.alert_sites(sites)["name"].tolist() == ["Crew"]
    assert A.alert_sites(sites.drop(columns="stop_km"))["name"].tolist() == ["Claim", "Crew"]


def test_open_at_start_and_coverage_of_periods():
    # A period whose first stroke comes within the all-clear time after the data start may have
    # begun earlier; periods carry their coverage when a coverage is given (constructed here).
    from debrief.config import from_dict
    from debrief.coverage import data_coverage

    s = strokes_at([5, 12, 70, 80])
    data_start = s["time"].min() - pd.Timedelta(minutes=5)
    per = A.alert_periods(s, one_site(), data_start=data_start)
    assert list(per["open_at_start"]) == [True, False]
    cfg = from_dict({"coverage_bbox": [-94.0, 45.0, -92.0, 46.0], "coverage_start": "2026-07-14T19:00:00Z",
                     "coverage_end": "2026-07-14T20:30:00Z"})
    cov = data_coverage(s, cfg)
    per = A.alert_periods(s, one_site(), coverage=cov)
    assert list(per["coverage"]) == ["inside", "partial"]  # the second period's all-clear runs past 20:30Z


def test_crew_log_is_compared_only_inside_the_window():
    # Constructed: a stop period seen from a window that starts while it runs (open_at_start), a
    # logged stop that began before the window, and one wholly before it. Before the window
    # nothing is known: no finding there, and the stop before the period's first seen stroke is
    # not "outside" it.
    s = strokes_at([40, 50, 60])
    w0 = T0 + pd.Timedelta(minutes=30)
    per = A.alert_periods(s, one_site(), data_start=w0)
    assert bool(per["open_at_start"].iloc[0])
    log = pd.DataFrame({"site": ["Depot", "Depot"], "stopped": [T0 - pd.Timedelta(minutes=60), T0 + pd.Timedelta(minutes=5)],
                        "resumed": [T0 - pd.Timedelta(minutes=30), T0 + pd.Timedelta(minutes=90)], "source_row": [2, 3]})
    log["stopped"] = log["stopped"].astype("datetime64[ns, UTC]")
    log["resumed"] = log["resumed"].astype("datetime64[ns, UTC]")
    found = A.compare_crew_log(per, log, data_start=w0, data_end=T0 + pd.Timedelta(minutes=120), sites=["Depot"])
    assert found.empty, found
    # Without the window's start both stops before 19:40 would read as findings.
    loose = A.compare_crew_log(A.alert_periods(s, one_site()), log, data_end=T0 + pd.Timedelta(minutes=120),
                               sites=["Depot"])
    assert (loose["finding"] == "stopped outside stop period").sum() == 2

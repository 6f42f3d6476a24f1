"""The stroke reader and the ledger: canonical table, reason codes, options, chunks, Parquet.

Reference values: the Unix epoch is from Python's own datetime (ISO 8601 / POSIX time, checked by
the standard library rather than by our code); bearing conversions are plane geometry (an angle
measured counter-clockwise from east is 90 deg minus the angle clockwise from north; an ellipse
axis is undirected, so bearings are taken modulo 180 deg, common practice).
"""

from __future__ import annotations

import gzip
import json
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from debrief.config import from_dict
from debrief.errors import InputError
from debrief.io.ledger import Ledger
from debrief.io.strokes import CANONICAL, REASONS, SYNONYMS, plan_columns, read_strokes

DATA = Path(__file__).parent / "data"
HEADER = "time,latitude,longitude,peak_current_ka,type,semi_major_km,semi_minor_km,major_bearing_deg\n"


def write(tmp_path, text, name="s.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def cfg(**top):
    return from_dict(top)


def row(t="2026-07-14T19:00:00Z", lat=45.5, lon=-93.2, ip=-12.0, kind="CG", a=0.4, b=0.2, brg=30.0):
    return f"{t},{lat},{lon},{ip},{kind},{a},{b},{brg}\n"


# --- every reason code, with line numbers --------------------------------------------------


def test_bad_rows_file_every_reason_with_line_numbers():
    # The file's truth was constructed by hand: see tests/data/strokes_bad_rows.csv.
    df, led = read_strokes(DATA / "strokes_bad_rows.csv")
    expected = {
        "bad_time": [3, 14], "missing_number": [4], "bad_number": [5, 15], "bad_latitude": [6],
        "bad_longitude": [7], "zero_current": [8], "unknown_type": [9], "negative_axis": [10],
        "minor_exceeds_major": [11],
    }
    assert {k: v["first_lines"] for k, v in led.rejected.items()} == expected
    assert {k: v["count"] for k, v in led.rejected.items()} == {k: len(v) for k, v in expected.items()}
    assert all(led.rejected[k]["description"] == REASONS[k] for k in expected)
    assert led.rows_read == 15 and led.rows_rejected == 11
    assert led.duplicates_dropped == 1 and led.duplicate_lines == [13]
    assert led.rows_accepted == 3
    assert df["source_row"].tolist() == [2, 12, 16]
    # Boundary values are inside the valid range: latitude 90 and longitude -180 are accepted.
    assert df.loc[2, "latitude"] == 90.0 and df.loc[2, "longitude"] == -180.0
    # Blank ellipse cells: NaN, counted, not rejected.
    assert led.missing_ellipse == 1 and np.isnan(df.loc[1, "semi_major_km"])
    assert df["sensors"].tolist() == [7, 4, 6] and df["sensors"].dtype == "int64"


def test_polarity_column_and_type_codes_cover_the_remaining_reasons():
    c = cfg(columns={"time": "UTC", "peak_current_ka": "Amplitude", "type": "Kind"},
            polarity_column="Pol", type_codes={"G": "CG", "C": "IC"})
    df, led = read_strokes(DATA / "strokes_polarity.csv", config=c)
    assert {k: v["first_lines"] for k, v in led.rejected.items()} == {
        "bad_polarity": [12], "polarity_conflict": [13], "bad_field_count": [15]}
    # +, -, pos, NEG, positive, Negative, P, n, 1, -1, then -22 with '-' stays -22.
    assert df["peak_current_ka"].tolist() == [10, -11, 12, -13, 14, -15, 16, -17, 18, -19, -22]
    assert df["type"].tolist()[:4] == ["CG", "CG", "IC", "IC"]
    assert any("polarity taken from column 'Pol'" in n for n in led.notes)
    assert any("time <- 'UTC' (given)" in n for n in led.notes)


def test_all_reason_codes_are_exercised_by_the_two_files():
    _, a = read_strokes(DATA / "strokes_bad_rows.csv")
    c = cfg(columns={"time": "UTC", "peak_current_ka": "Amplitude", "type": "Kind"},
            polarity_column="Pol", type_codes={"G": "CG", "C": "IC"})
    _, b = read_strokes(DATA / "strokes_polarity.csv", config=c)
    assert set(a.rejected) | set(b.rejected) == set(REASONS)


def test_one_reason_per_row_first_in_precedence(tmp_path):
    # bad time and bad latitude on one row: counted once, as bad_time.
    p = write(tmp_path, HEADER + row() + row(t="nonsense", lat=99))
    _, led = read_strokes(p)
    assert led.rejected == {"bad_time": {"count": 1, "first_lines": [3], "description": REASONS["bad_time"]}}


# --- columns: synonyms, explicit maps, fatal header problems -------------------------------


@pytest.mark.parametrize("header", [
    "Time,Lat,Lon,Peak_Current,Type",
    "datetime,LATITUDE,lng,current,stroke_type",
    "timestamp,latitude,long,IP,type",
    "Date Time,lat,Longitude,Peak Current (kA),Stroke Type",
    "date_time,Lat,LON,peak_current_ka,TYPE",
])
def test_plain_english_synonyms(tmp_path, header):
    p = write(tmp_path, header + "\n2026-07-14T19:00:00Z,45.5,-93.2,-12.5,IC\n")
    df, led = read_strokes(p)
    assert list(df.columns[:9]) == list(CANONICAL) + ["source_row"]
    assert df.loc[0, "latitude"] == 45.5 and df.loc[0, "longitude"] == -93.2
    assert df.loc[0, "peak_current_ka"] == -12.5 and df.loc[0, "type"] == "IC"


def test_synonym_table_is_one_table_covering_every_canonical_column():
    assert set(SYNONYMS) == set(CANONICAL)
    for canon, names in SYNONYMS.items():
        assert canon in names


def test_explicit_map_wins_and_unmapped_canonical_header_is_renamed(tmp_path):
    p = write(tmp_path, "UTC,Y,X,kA,time\n2026-07-14T19:00:00Z,45.5,-93.2,-5,local\n")
    df, led = read_strokes(p, columns={"time": "UTC", "latitude": "Y", "longitude": "X", "peak_current_ka": "kA"})
    assert df.loc[0, "time"] == pd.Timestamp("2026-07-14T19:00:00Z")
    assert df.loc[0, "time_input"] == "local"
    assert any("time -> time_input" in n for n in led.notes)


def test_explicit_map_merges_over_config_map(tmp_path):
    p = write(tmp_path, "UTC,Y,X,kA\n2026-07-14T19:00:00Z,45.5,-93.2,-5\n")
    c = cfg(columns={"time": "UTC", "latitude": "Y", "longitude": "wrong"})
    df, _ = read_strokes(p, config=c, columns={"longitude": "X", "peak_current_ka": "kA"})
    assert df.loc[0, "longitude"] == -93.2


def test_missing_required_column_names_it_and_lists_headers(tmp_path):
    p = write(tmp_path, "time,lat,Lon_X,current\n2026-07-14T19:00:00Z,45.5,-93.2,-5\n")
    with pytest.raises(InputError) as e:
        read_strokes(p)
    msg = str(e.value)
    assert "no longitude column" in msg and "'Lon_X'" in msg and "'current'" in msg and "\n" not in msg


def test_map_naming_absent_header_is_fatal(tmp_path):
    p = write(tmp_path, HEADER + row())
    with pytest.raises(InputError, match=r"time = 'UTC' but the file has no such header.*'major_bearing_deg'"):
        read_strokes(p, columns={"time": "UTC"})
    with pytest.raises(InputError, match="unknown column name 'lat'.*did you mean 'latitude'"):
        read_strokes(p, columns={"lat": "latitude"})
    with pytest.raises(InputError, match="polarity_column 'pol' is not in the file"):
        read_strokes(p, config=cfg(polarity_column="pol"))


def test_two_candidate_headers_are_ambiguous():
    with pytest.raises(InputError, match="could each be the time column"):
        plan_columns(["datetime", "timestamp", "lat", "lon", "current"])
    # ... unless one of them is the canonical name itself.
    mapping, _, _ = plan_columns(["time", "timestamp", "lat", "latitude", "lon", "current"])
    assert mapping["time"] == "time" and mapping["latitude"] == "latitude"


# --- reader options ------------------------------------------------------------------------


def test_type_codes_zero_one(tmp_path):
    p = write(tmp_path, "time,lat,lon,current,type\n" + "".join(
        f"2026-07-14T19:00:0{i}Z,45.5,-93.2,-5,{c}\n" for i, c in enumerate("0101")))
    df, led = read_strokes(p, config=cfg(type_codes={"0": "CG", "1": "IC"}))
    assert df["type"].tolist() == ["CG", "IC", "CG", "IC"]
    assert df["type"].dtype == pd.CategoricalDtype(["CG", "IC"])
    with pytest.raises(InputError, match="must map to 'CG' or 'IC'"):
        read_strokes(p, config=cfg(type_codes={"0": "ground"}))
    # Without the map, 0/1 are unknown codes: every row rejected, which is fatal.
    with pytest.raises(InputError, match="nothing usable: all 4 rows were rejected.*unknown_type"):
        read_strokes(p)


def test_no_type_column_means_cg_and_the_ledger_says_so(tmp_path):
    p = write(tmp_path, "time,lat,lon,current\n2026-07-14T19:00:00Z,45.5,-93.2,15\n")
    df, led = read_strokes(p)
    assert df["type"].tolist() == ["CG"]
    assert any("no type column" in n and "CG" in n for n in led.notes)
    assert any("no error ellipse columns" in n for n in led.notes)
    assert led.missing_ellipse == 1
    for c in ("semi_major_km", "semi_minor_km", "major_bearing_deg"):
        assert df[c].dtype == "float64" and df[c].isna().all()


def test_full_axes_are_halved(tmp_path):
    p = write(tmp_path, HEADER + row(a=2.0, b=0.5))
    df, led = read_strokes(p, config=cfg(ellipse_axes="full"))
    assert (df.loc[0, "semi_major_km"], df.loc[0, "semi_minor_km"]) == (1.0, 0.25)
    assert any("halved" in n for n in led.notes)


@pytest.mark.parametrize("east_ccw, north_cw", [
    (0.0, 90.0),     # pointing east: 90 deg clockwise from north (plane geometry)
    (90.0, 0.0),     # pointing north
    (30.0, 60.0),
    (135.0, 135.0),  # 90 - 135 = -45, the same axis as 135
    (-30.0, 120.0),
    (180.0, 90.0),   # the opposite direction is the same axis
])
def test_east_ccw_bearing_conversion(tmp_path, east_ccw, north_cw):
    p = write(tmp_path, HEADER + row(brg=east_ccw))
    df, _ = read_strokes(p, config=cfg(bearing_convention="east_ccw"))
    assert df.loc[0, "major_bearing_deg"] == pytest.approx(north_cw, abs=1e-12)


@pytest.mark.parametrize("given_deg, expected", [(190.0, 10.0), (-10.0, 170.0), (180.0, 0.0), (359.5, 179.5), (0.0, 0.0)])
def test_north_bearing_normalised_to_half_turn(tmp_path, given_deg, expected):
    p = write(tmp_path, HEADER + row(brg=given_deg))
    df, _ = read_strokes(p)
    b = df.loc[0, "major_bearing_deg"]
    assert 0.0 <= b < 180.0 and b == pytest.approx(expected, abs=1e-12)


def test_circle_without_bearing_keeps_its_ellipse_partial_ellipse_is_missing(tmp_path):
    p = write(tmp_path, HEADER + row(a=0.5, b=0.5, brg="") + row(t="2026-07-14T19:00:01Z", a=0.5, b=0.2, brg=""))
    df, led = read_strokes(p)
    assert df.loc[0, "semi_major_km"] == 0.5 and df.loc[0, "major_bearing_deg"] == 0.0
    assert df.loc[1, ["semi_major_km", "semi_minor_km", "major_bearing_deg"]].isna().all()
    assert led.missing_ellipse == 1
    assert any("blank axis or bearing" in n and "(1 row)" in n for n in led.notes)


AMPERES = "time,lat,lon,current\n2026-07-14T19:00:00Z,45.5,-93.2,-12500\n2026-07-14T19:00:01Z,45.5,-93.2,31000\n"


def test_current_in_amperes_converted_to_ka(tmp_path):
    p = write(tmp_path, AMPERES)
    df, led = read_strokes(p, config=cfg(current_unit="A"))
    assert df["peak_current_ka"].tolist() == [-12.5, 31.0]  # 1 kA = 1000 A (SI)
    assert "peak current converted from A to kA" in led.notes


def test_unitless_current_header_with_amperes_values_stops_and_asks(tmp_path):
    # -12500 and 31000 under "current": 31000 kA is no lightning stroke (recorded peak currents
    # stay within a few hundred kA, common practice), so the unit must be stated, not guessed.
    p = write(tmp_path, AMPERES)
    with pytest.raises(InputError) as e:
        read_strokes(p)
    msg = str(e.value)
    assert str(p) in msg and "'current'" in msg and "31000" in msg
    assert 'current_unit = "A"' in msg and "--current-unit A" in msg and "\n" not in msg


@pytest.mark.parametrize("header", ["current", "ip", "peak_current", "Peak Current"])
def test_unitless_current_header_with_small_values_is_ka_with_a_note(tmp_path, header):
    p = write(tmp_path, f"time,lat,lon,{header}\n2026-07-14T19:00:00Z,45.5,-93.2,-12.5\n"
                        "2026-07-14T19:00:01Z,45.5,-93.2,1000\n2026-07-14T19:00:02Z,45.5,-93.2,-1000\n")
    df, led = read_strokes(p)
    assert df["peak_current_ka"].tolist() == [-12.5, 1000.0, -1000.0]  # the limit itself is kA
    note = [n for n in led.notes if "states no unit" in n]
    assert len(note) == 1 and f"'{header}'" in note[0] and "read as kA" in note[0] and "current_unit" in note[0]
    # Stated, no note: the user said so.
    _, led = read_strokes(p, config=cfg(current_unit="kA"))
    assert not any("states no unit" in n for n in led.notes)


def test_unitless_limit_uses_every_chunk_and_only_accepted_rows(tmp_path):
    rows = "".join(f"2026-07-14T19:00:{i:02d}Z,45.5,-93.2,-12.5\n" for i in range(20))
    p = write(tmp_path, "time,lat,lon,current\n" + rows + "2026-07-14T19:00:30Z,45.5,-93.2,-12500\n")
    with pytest.raises(InputError, match="up to 12500"):
        read_strokes(p, chunksize=3)  # the large value is in the last chunk
    # A rejected row (latitude 95) does not count towards the limit.
    p = write(tmp_path, "time,lat,lon,current\n" + rows + "2026-07-14T19:00:30Z,95,-93.2,-12500\n")
    df, led = read_strokes(p, chunksize=3)
    assert len(df) == 20 and led.rejected["bad_latitude"]["first_lines"] == [22]


@pytest.mark.parametrize("header, values, expected", [
    ("peak_current_ka", "-12500", -12500.0),   # the header states kA: read as written
    ("Peak Current (kA)", "-12.5", -12.5),
    ("ip_ka", "-12.5", -12.5),
    ("current_a", "-12500", -12.5),            # the header states A: converted (1 kA = 1000 A, SI)
    ("peak_current_a", "-12500", -12.5),
    ("Peak current (A)", "-12500", -12.5),
    ("ip_a", "-800", -0.8),
])
def test_header_with_a_unit_is_read_in_that_unit(tmp_path, header, values, expected):
    p = write(tmp_path, f"time,lat,lon,{header}\n2026-07-14T19:00:00Z,45.5,-93.2,{values}\n")
    df, led = read_strokes(p)
    assert df.loc[0, "peak_current_ka"] == expected
    assert not any("states no unit" in n for n in led.notes)
    converted = expected != float(values)
    assert ("peak current converted from A to kA" in led.notes) == converted
    # Stating the same unit again is fine.
    unit = "A" if converted else "kA"
    df2, _ = read_strokes(p, config=cfg(current_unit=unit))
    assert df2.loc[0, "peak_current_ka"] == expected


@pytest.mark.parametrize("header, stated, says", [("peak_current_ka", "A", "kA"), ("Peak current (A)", "kA", "A")])
def test_stated_unit_against_the_header_unit_is_fatal(tmp_path, header, stated, says):
    p = write(tmp_path, f"time,lat,lon,{header}\n2026-07-14T19:00:00Z,45.5,-93.2,-12.5\n")
    with pytest.raises(InputError) as e:
        read_strokes(p, config=cfg(current_unit=stated))
    msg = str(e.value)
    assert f"current_unit is '{stated}'" in msg and f"'{header}' says {says}" in msg and str(p) in msg


def test_default_current_unit_is_not_a_statement():
    # The schema default kA is not the user's word: only an explicit setting counts.
    assert not cfg().is_given("", "current_unit") and cfg(current_unit="kA").is_given("", "current_unit")


def test_parquet_unitless_current_same_rule(tmp_path):
    p = tmp_path / "s.parquet"
    pd.DataFrame({"time": ["2026-07-14T19:00:00Z", "2026-07-14T19:00:01Z"], "lat": [45.5, 45.5],
                  "lon": [-93.2, -93.2], "ip": [-12500.0, 31000.0]}).to_parquet(p)
    with pytest.raises(InputError, match=r"'ip' states no unit.*up to 31000.*--current-unit A"):
        read_strokes(p)
    df, _ = read_strokes(p, config=cfg(current_unit="A"))
    assert df["peak_current_ka"].tolist() == [-12.5, 31.0]


# --- zero semi-axes --------------------------------------------------------------------------


def test_zero_semi_axis_row_is_kept_without_ellipse_and_counted(tmp_path):
    # 0.0 km is an export rounded to 0.1 km; a location error cannot be zero (constructed here).
    p = write(tmp_path, HEADER + row() + row(t="2026-07-14T19:00:01Z", a=0.0, b=0.0, brg="")
              + row(t="2026-07-14T19:00:02Z", a=0.3, b=0.0, brg=10.0) + row(t="2026-07-14T19:00:03Z", a=0.2, b=0.1)
              + row(t="2026-07-14T19:00:04Z", a=0.0, b=0.2, brg=10.0))  # a zero major axis is the same case
    df, led = read_strokes(p)
    assert df["source_row"].tolist() == [2, 3, 4, 5, 6]
    assert df.loc[[1, 2, 4], ["semi_major_km", "semi_minor_km", "major_bearing_deg"]].isna().all().all()
    assert df.loc[3, "semi_major_km"] == 0.2 and df.loc[0, "semi_major_km"] == 0.4
    assert led.rows_accepted == 5 and led.rows_rejected == 0
    assert led.zero_ellipse == 3 and led.zero_ellipse_lines == [3, 4, 6] and led.missing_ellipse == 3
    assert any("semi-axis of 0 km" in n and "lines 3, 4, 6" in n for n in led.notes)
    assert "zero_ellipse" in led.to_text() and "(lines 3, 4, 6)" in led.to_text()
    d = json.loads(json.dumps(led.to_dict()))
    assert d["zero_ellipse"] == 3 and d["zero_ellipse_lines"] == [3, 4, 6]
    assert "3 with a 0 km ellipse axis" in led.one_line()
    led.check()


def test_zero_semi_axis_uses_default_uncertainty_in_every_module(tmp_path):
    from debrief.flashes import group_flashes
    from debrief.outages import _covariance
    from debrief.sites import check_site
    from debrief.uncertainty import stroke_covariance

    p = write(tmp_path, HEADER + row(a=0.0, b=0.0, brg=0.0) + row(t="2026-07-14T19:00:01Z", lat=45.6, a=0.4, b=0.2))
    c = cfg(default_uncertainty_km=0.5)
    df, led = read_strokes(p, config=c)
    grouped, _ = group_flashes(df, c)
    res = check_site(grouped, 45.5, -93.2, 0.5, config=c)
    cand = res.candidates
    assert len(cand) == 1 and bool(cand["ellipse_from_default"].iloc[0]) and cand["source_row"].iloc[0] == 2
    # The stroke sits on the site and the circle's radius is the default 50 % semi-axis: the
    # probability is 0.5 by the definition of the 50 % circle of a circular bivariate normal
    # (Rayleigh distribution; common practice).
    assert cand["p_within"].iloc[0] == pytest.approx(0.5, abs=1e-9)
    # The outage code and the site code see the same covariance for that row.
    sxx, syy, sxy, filled = stroke_covariance(df, c)
    oxx, oyy, oxy, kind = _covariance(df, c)
    assert filled.tolist() == [True, False] and kind.tolist() == ["default", "ellipse"]
    np.testing.assert_allclose([sxx, syy, sxy], [oxx, oyy, oxy], rtol=1e-12)


# --- times ----------------------------------------------------------------------------------


def test_epoch_seconds_against_python_datetime(tmp_path):
    # 1784055600 s after 1970-01-01T00:00:00Z, computed by the standard library.
    expected = datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(seconds=1784055600)
    assert expected == datetime(2026, 7, 14, 19, 0, 0, tzinfo=timezone.utc)
    p = write(tmp_path, HEADER + row(t="1784055600") + row(t="1784055600.000000123", lat=45.6)
              + row(t="1784055600.5", lat=45.7))
    df, led = read_strokes(p)
    assert df.loc[0, "time"] == pd.Timestamp(expected)
    assert df.loc[1, "time"].value - df.loc[0, "time"].value == 123  # exact to the nanosecond
    assert df.loc[2, "time"] == pd.Timestamp(expected) + pd.Timedelta(milliseconds=500)
    assert any("epoch seconds" in n and "(3 rows)" in n for n in led.notes)


def test_time_format_option_restricts_parsing(tmp_path):
    p = write(tmp_path, HEADER + row(t="1784055600") + row(t="2026-07-14T19:00:01Z", lat=45.6))
    _, led = read_strokes(p, config=cfg(time_format="iso"))
    assert led.rejected["bad_time"]["first_lines"] == [2]
    _, led = read_strokes(p, config=cfg(time_format="epoch_s"))
    assert led.rejected["bad_time"]["first_lines"] == [3]


@pytest.mark.parametrize("text, utc", [
    ("2026-07-14T21:00:00+02:00", "2026-07-14T19:00:00"),   # ISO 8601 offset: local = UTC + offset
    ("2026-07-14T14:00:00-05:00", "2026-07-14T19:00:00"),
    ("2026-07-15T00:30:00+0530", "2026-07-14T19:00:00"),
    ("2026-07-14T19:00:00Z", "2026-07-14T19:00:00"),
    ("2026-07-14 19:00:00", "2026-07-14T19:00:00"),          # no offset: UTC
])
def test_iso_offsets_converted_to_utc(tmp_path, text, utc):
    p = write(tmp_path, HEADER + row(t=text))
    df, led = read_strokes(p)
    expected = datetime.fromisoformat(utc).replace(tzinfo=timezone.utc)
    assert df.loc[0, "time"] == pd.Timestamp(expected)
    naive_note = any("without a UTC offset were read as UTC" in n for n in led.notes)
    assert naive_note == (text == "2026-07-14 19:00:00")
    offset_note = any("non-zero UTC offset" in n for n in led.notes)
    assert offset_note == (text[-6:] in ("+02:00", "-05:00") or text.endswith("+0530"))


def test_time_dtype_is_ns_utc_and_keeps_nanoseconds(tmp_path):
    p = write(tmp_path, HEADER + row(t="2026-07-14T19:00:00.123456789Z") + row(t="2026-07-14T19:00:00Z", lat=45.6))
    df, _ = read_strokes(p)
    assert str(df["time"].dtype) == "datetime64[ns, UTC]"
    assert df.loc[1, "time"].value % 1_000_000_000 == 123456789
    assert df["source_row"].dtype == "int64"


def test_time_outside_ns_range_is_rejected_not_a_crash(tmp_path):
    p = write(tmp_path, HEADER + row() + row(t="3000-01-01T00:00:00Z", lat=45.6) + row(t="99999999999", lat=45.7))
    _, led = read_strokes(p)
    assert led.rejected["bad_time"]["first_lines"] == [3, 4]


# --- table contract -------------------------------------------------------------------------


def test_sorted_by_time_ties_by_source_row_index_reset(tmp_path):
    p = write(tmp_path, HEADER + row(t="2026-07-14T19:00:05Z", lat=1) + row(t="2026-07-14T19:00:01Z", lat=2)
              + row(t="2026-07-14T19:00:05Z", lat=3) + row(t="2026-07-14T19:00:01Z", lat=4))
    df, _ = read_strokes(p)
    assert df["latitude"].tolist() == [2, 4, 1, 3]
    assert df["source_row"].tolist() == [3, 5, 2, 4]
    assert isinstance(df.index, pd.RangeIndex) and df.index.tolist() == [0, 1, 2, 3]


def test_blank_lines_are_not_rows_and_line_numbers_stay_true(tmp_path):
    p = write(tmp_path, HEADER + row() + "\n" + row(t="2026-07-14T19:00:01Z", lat=95) + "\n\n")
    df, led = read_strokes(p)
    assert led.rows_read == 2 and led.rejected["bad_latitude"]["first_lines"] == [4]
    assert any(n.startswith("3 blank lines skipped (lines 3, 5, 6)") for n in led.notes)


def test_gzip_tab_and_semicolon_files(tmp_path):
    text = HEADER + row()
    gz = tmp_path / "s.csv.gz"
    with gzip.open(gz, "wt", encoding="utf-8") as f:
        f.write(text)
    a, _ = read_strokes(gz)
    b, led_b = read_strokes(write(tmp_path, text.replace(",", ";")))
    c, led_c = read_strokes(write(tmp_path, text.replace(",", "\t"), name="s.tsv"))
    pd.testing.assert_frame_equal(a, b)
    pd.testing.assert_frame_equal(a, c)
    assert "columns separated by semicolons" in led_b.notes and "columns separated by tabs" in led_c.notes


def test_chunk_boundaries_do_not_change_the_result(tmp_path):
    # Duplicates placed in different chunks (lines 2 and 9 with chunksize 3) must still be found.
    body = "".join(row(t=f"2026-07-14T19:00:{i:02d}Z", lat=45 + i / 100) for i in range(6))
    body += row(t="bad") + row(lat=-91) + row(t="2026-07-14T19:00:00Z", lat=45.0) + row(t="2026-07-14T18:59:59Z", a="")
    p = write(tmp_path, HEADER + body)
    a, la = read_strokes(p, chunksize=3)
    b, lb = read_strokes(p, chunksize=1_000_000)
    pd.testing.assert_frame_equal(a, b)
    assert la.to_dict() == lb.to_dict()
    assert la.duplicates_dropped == 1 and la.duplicate_lines == [10]
    d, ld = read_strokes(DATA / "strokes_bad_rows.csv", chunksize=1)
    e, le = read_strokes(DATA / "strokes_bad_rows.csv")
    pd.testing.assert_frame_equal(d, e)
    assert ld.to_dict() == le.to_dict()


def test_parquet_round_trip(tmp_path):
    csv_df, _ = read_strokes(DATA / "strokes_bad_rows.csv")
    pq = tmp_path / "s.parquet"
    csv_df.drop(columns="source_row").to_parquet(pq, index=False)
    back, led = read_strokes(pq, chunksize=2)
    pd.testing.assert_frame_equal(back[list(CANONICAL)], csv_df[list(CANONICAL)])
    assert back["source_row"].tolist() == [1, 2, 3]  # row index + 1
    assert back["sensors"].tolist() == [7, 4, 6]
    assert any("Parquet row index + 1" in n for n in led.notes)


def test_parquet_with_typed_columns_and_codes(tmp_path):
    t0 = pd.Timestamp("2026-07-14T19:00:00")  # naive timestamps: UTC, and noted
    frame = pd.DataFrame({
        "Time": pd.Series([t0, t0 + pd.Timedelta(seconds=1), t0 + pd.Timedelta(seconds=2)]).astype("datetime64[us]"),
        "lat": [45.5, 45.6, np.nan], "lon": [-93.2, -93.3, -93.4], "ip": [-10.0, 20.0, 5.0], "type": [0, 1, 0],
    })
    pq = tmp_path / "typed.parquet"
    frame.to_parquet(pq, index=False)
    df, led = read_strokes(pq, config=cfg(type_codes={"0": "CG", "1": "IC"}))
    assert df["type"].tolist() == ["CG", "IC"] and str(df["time"].dtype) == "datetime64[ns, UTC]"
    assert df.loc[0, "time"] == pd.Timestamp("2026-07-14T19:00:00Z")
    assert led.rejected["missing_number"]["first_lines"] == [3]
    assert any("without a UTC offset" in n and "(2 rows)" in n for n in led.notes)


# --- fatal input ----------------------------------------------------------------------------


def test_fatal_inputs_raise_one_line(tmp_path):
    cases = [
        (tmp_path / "missing.csv", "stroke file not found"),
        (write(tmp_path, "", name="empty.csv"), "is empty"),
        (write(tmp_path, HEADER, name="header.csv"), "no data rows"),
        (write(tmp_path, HEADER + row(), name="s.xlsx"), "unknown stroke file type '.xlsx'"),
        (tmp_path, "is a folder"),
        (write(tmp_path, "not parquet", name="x.parquet"), "cannot read as Parquet"),
    ]
    for path, words in cases:
        with pytest.raises(InputError) as e:
            read_strokes(path)
        assert words in str(e.value) and "\n" not in str(e.value), (path, str(e.value))


def test_wrong_number_of_cells_is_a_rejected_row(tmp_path):
    p = write(tmp_path, HEADER + row() + "2026-07-14T19:00:01Z,45.5,-93.2\n" + "   \n"
              + row(t="2026-07-14T19:00:02Z") + row(t="2026-07-14T19:00:03Z").strip() + ",surplus\n")
    df, led = read_strokes(p)
    assert led.rejected["bad_field_count"]["first_lines"] == [3, 6]
    assert df["source_row"].tolist() == [2, 5]  # the whitespace-only line 4 is a blank line
    assert led.rows_read == 4 and any("(line 4)" in n for n in led.notes)


def test_not_utf8_is_fatal(tmp_path):
    p = tmp_path / "latin.csv"
    p.write_bytes((HEADER.replace("type", "t\xffpe")).encode("latin-1") + row().encode())
    with pytest.raises(InputError, match="not UTF-8"):
        read_strokes(p)


def test_strict_names_count_and_first_reason(tmp_path):
    p = write(tmp_path, HEADER + row() + row(t="2026-07-14T19:00:01Z", lat=95) + row(t="2026-07-14T19:00:02Z", ip=0))
    with pytest.raises(InputError, match=r"2 rows rejected \(strict mode\); first reason bad_latitude .* on line 3$"):
        read_strokes(p, strict=True)
    df, led = read_strokes(write(tmp_path, HEADER + row() + row(), name="dup.csv"), strict=True)
    assert len(df) == 1 and led.duplicates_dropped == 1  # duplicates are not rejections


# --- ledger ---------------------------------------------------------------------------------


def test_ledger_one_line_and_text():
    led = Ledger(source="x.csv", rows_read=3041, rows_accepted=3027)
    led.reject("bad_latitude", [9, 5, 40, 12, 41, 7, 100], "latitude outside -90..90 degrees")
    led.reject("zero_current", [3, 4, 6, 8, 10], "peak current is zero")
    led.add_duplicates([20, 21])
    led.check()
    assert led.one_line() == (
        "12 of 3,041 rows rejected (bad_latitude 7, zero_current 5); 2 duplicates dropped; see the ledger"
    )
    assert led.rejected["bad_latitude"]["first_lines"] == [5, 7, 9, 12, 40]
    text = led.to_text()
    assert "bad_latitude" in text and "(lines 5, 7, 9, 12, 40, ...)" in text and "3,041" in text
    d = json.loads(json.dumps(led.to_dict()))
    assert d["rows_rejected"] == 12 and d["rejected"]["zero_current"]["count"] == 5


def test_ledger_check_catches_a_broken_invariant():
    led = Ledger(source="x", rows_read=10, rows_accepted=8)
    led.reject("bad_time", [2], "time")
    assert not led.consistent
    with pytest.raises(ValueError, match="rows read 10"):
        led.check()
    led.add_duplicates([3])
    led.check()


# Row kinds for the property test: a good row, each kind of bad row, and a copy of a good row.
_BAD = {
    "bad_time": dict(t="not-a-time"), "missing_number": dict(lat=""), "bad_number": dict(lon="east"),
    "bad_latitude": dict(lat=91.5), "bad_longitude": dict(lon=200), "zero_current": dict(ip=0),
    "unknown_type": dict(kind="Q"), "negative_axis": dict(b=-1), "minor_exceeds_major": dict(a=0.1, b=0.3),
}


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(kinds=st.lists(st.sampled_from(["good", "dup", "blank", "spaces", "fields", *_BAD]), min_size=1, max_size=40),
       chunksize=st.integers(1, 7))
def test_ledger_invariant_property(tmp_path, kinds, chunksize):
    lines, expected, good_lines, first_good = [], {}, [], None
    for i, k in enumerate(kinds):
        line_no = i + 2  # the header is line 1
        t = f"2026-07-14T19:{i // 60:02d}:{i % 60:02d}Z"
        if k == "good" or (k == "dup" and first_good is None):
            lines.append(row(t=t, lat=45 + i / 1000))
            good_lines.append(line_no)
            first_good = first_good or lines[-1]
        elif k == "dup":
            lines.append(first_good)
        elif k in ("blank", "spaces"):
            lines.append("\n" if k == "blank" else "   \n")
        elif k == "fields":
            lines.append(row(t=t).strip() + ",surplus\n")
            expected["bad_field_count"] = expected.get("bad_field_count", 0) + 1
        else:
            lines.append(row(**{"t": t, "lat": 45 + i / 1000, **_BAD[k]}))
            expected[k] = expected.get(k, 0) + 1
    n_rows = sum(k not in ("blank", "spaces") for k in kinds)
    p = write(tmp_path, HEADER + "".join(lines), name="prop.csv")
    try:
        df, led = read_strokes(p, chunksize=chunksize)
    except InputError as e:
        assert not good_lines and ("nothing usable" in str(e) or "no data rows" in str(e))
        return
    assert led.rows_read == n_rows == led.rows_accepted + led.rows_rejected + led.duplicates_dropped
    assert {k: v["count"] for k, v in led.rejected.items()} == expected
    assert led.rows_accepted == len(good_lines) == len(df)
    assert df["source_row"].tolist() == good_lines  # true line numbers, in time order
    assert df["time"].is_monotonic_increasing


def test_time_forms_agree_whatever_the_chunking(tmp_path):
    # Chunks of one row take the all-offset / all-naive fast paths; one chunk of mixed forms
    # takes the general path. Both must give the same instants (ISO 8601, POSIX time).
    forms = ["2026-07-14T19:00:00.25Z", "2026-07-14 19:00:00.5", "1784055600.75", "2026-07-14T21:00:01+02:00",
             "2026-07-14T19:00:02+0000", "2026-07-14", "2026-07-14T14:00:03.000000001-05:00"]
    p = write(tmp_path, HEADER + "".join(row(t=f, lat=40 + i) for i, f in enumerate(forms)))
    a, la = read_strokes(p, chunksize=1)
    b, lb = read_strokes(p)
    pd.testing.assert_frame_equal(a, b)
    assert la.notes == lb.notes
    expected = [datetime(2026, 7, 14, tzinfo=timezone.utc) + timedelta(hours=h, seconds=s) for h, s in
                [(0, 0), (19, 0.25), (19, 0.5), (19, 0.75), (19, 1), (19, 2), (19, 3)]]
    expected = [pd.Timestamp(e) for e in expected]
    expected[6] += pd.Timedelta(1, "ns")  # the last nanosecond survives
    assert list(b["time"]) == expected


def test_line_numbers_true_across_parser_blocks(tmp_path):
    # About 3 MB: the CSV parser reads it in several blocks; skipped lines in every block.
    n = 50_000
    body = [row(t=f"2026-07-14T{19 + i // 36000}:{i // 600 % 60:02d}:{i % 600 / 10:04.1f}Z", lat=45 + i * 1e-6,
                ip=-(i % 90 + 1)) for i in range(n)]
    odd = {1_000: "   \n", 12_345: "x,y\n", 20_000: "\n", 49_999: body[5].strip() + ",surplus\n"}
    for i, text in odd.items():
        body[i] = text
    p = write(tmp_path, HEADER + "".join(body), name="big.csv")
    assert p.stat().st_size > 2.5e6
    df, led = read_strokes(p, chunksize=1_000)
    expected = [i + 2 for i in range(n) if i not in odd]
    assert sorted(df["source_row"].tolist()) == expected
    assert led.rejected["bad_field_count"]["first_lines"] == [12_347, 50_001]
    assert any("(lines 1002, 20002)" in note for note in led.notes)
    assert led.rows_read == n - 2


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(when=st.lists(st.tuples(
    st.datetimes(min_value=datetime(1990, 1, 1), max_value=datetime(2100, 1, 1)),
    st.integers(-14 * 60, 14 * 60),  # UTC offsets in use span -12:00..+14:00 (common practice)
    st.sampled_from(["iso", "space", "epoch"])), min_size=1, max_size=12))
def test_times_match_the_standard_library(tmp_path, when):
    # Reference: Python's datetime (ISO 8601 text via isoformat, UTC via astimezone).
    text, expected = [], []
    for i, (naive, offset_min, form) in enumerate(when):
        tz = timezone(timedelta(minutes=offset_min))
        local = naive.replace(tzinfo=tz)
        utc = local.astimezone(timezone.utc)
        if form == "epoch":
            seconds = (utc - datetime(1970, 1, 1, tzinfo=timezone.utc)) // timedelta(microseconds=1)
            text.append(f"{seconds // 10**6}.{seconds % 10**6:06d}")
        else:
            text.append(local.isoformat(sep="T" if form == "iso" else " "))
        expected.append(pd.Timestamp(utc))
    p = write(tmp_path, HEADER + "".join(row(t=t, lat=i / 100) for i, t in enumerate(text)), name="t.csv")
    df, _ = read_strokes(p)
    got = df.sort_values("source_row")["time"].tolist()
    assert got == expected, list(zip(text, got, expected))

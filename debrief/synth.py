"""A seeded storm generator: true flashes from published climatology, then what a network reports.

The generator makes the example event and the benchmark inputs. It works in two steps:

1. **Truth.** Storm cells are born over the region, live for a while and drift from south-west
   to north-east, each with its own flash rate. Each flash is a ground flash (CG) or a cloud
   flash (IC). Ground flashes are negative or positive (about 1 in 10 positive, common practice);
   their multiplicity, interstroke intervals, peak currents, new ground contacts and long
   continuing currents follow the published figures listed under References. Cloud flashes are
   several low-current cloud pulses spread over a few kilometres.
2. **Observation.** Every true stroke is detected with a probability that rises with its peak
   current; detected strokes get an error ellipse (semi-axes at 50% confidence) and a reported
   position drawn *from that ellipse* (a well-calibrated network: bivariate normal with
   ``sigma = axis / sqrt(-2 ln(1 - p))``); some ground strokes are reported as cloud pulses and
   some cloud pulses as ground strokes; peak currents carry a multiplicative estimation error.

Choices of our own (not published figures), stated so that nobody mistakes them for data:
cloud flashes are 40% of all flashes with 1 + Poisson(2.5) pulses each (cloud pulses are then
about 27% of the observed strokes); cloud-pulse |Ip| is lognormal with median 6 kA; stroke
detection probability is ``p_max / (1 + (i50/|Ip|)^2.5)`` (ground: p_max 0.98, i50 5 kA, 88% for
a 12 kA stroke and about 82% over all negative subsequent strokes; cloud: 0.7, 4 kA);
semi-major axes lognormal with median 0.3 km in [0.1, 1] km, axis ratio uniform in [0.3, 1];
3% of ground strokes (10% below 8 kA) reported as cloud pulses, 6% of cloud pulses as ground
strokes; peak-current estimates off by a lognormal factor with sigma_ln 0.15.

The generator is vectorised: no Python loop per stroke or per flash.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [Rakov2003] Negative multiplicity 3-5, 15-20% single-stroke (from memory).
.. [Saba2010] 81% single-stroke positives, 1.2 strokes per positive flash, GM interval 94 ms
       for positives, median +Ip 39.4 kA, 75% of positives and about 30% of negatives with long
       continuing current, GM negative interval about 60 ms.
.. [Thottappillil1992] GM interstroke interval 57 ms.
.. [CIGRE549] First negative stroke lognormal, median 31.1 kA, sigma_ln 0.484; subsequent
       12.3 kA, sigma_ln 0.53 (as cited by open-source line-performance code, values from memory).
.. [Poelman2021] 1.56 ground strike points per flash; new contacts a median 1.3-2.75 km from the
       first (from memory).
.. [Kitagawa1962] Long continuing current >= 40 ms (from memory).
.. [Ballarotti2005] Long continuing current >= 40 ms (from memory).
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .geodesy import LocalPlane

#: Canonical stroke-table columns written by the generator (the reader adds ``source_row``).
OBSERVED_COLUMNS = (
    "time", "latitude", "longitude", "peak_current_ka", "type",
    "semi_major_km", "semi_minor_km", "major_bearing_deg",
)

TYPES = ["CG", "IC"]

#: The example event's seed and window.
EXAMPLE_SEED = 20260714
EXAMPLE_START = "2026-07-14T19:00:00Z"
EXAMPLE_DURATION_H = 4.0
EXAMPLE_CENTRE = (45.50, -93.20)

# Approximate observed strokes per flash at the default parameters (measured on the generator
# itself: 2.516 for seeds 1-3 at 1e5 flashes); used only to turn a stroke rate into a flash count.
_OBSERVED_PER_FLASH = 2.52

_P50_TO_SIGMA = math.sqrt(-2.0 * math.log(1.0 - 0.5))  # 1.177410: 50% ellipse axis / 1-sigma


def _lognormal(rng, median, sigma_ln, size):
    return median * np.exp(sigma_ln * rng.standard_normal(size))


_WGS84_A_KM = 6378.137
_WGS84_E2 = 6.69437999014e-3


def _offset_deg(lat_deg, lon_deg, east_km, north_km):
    """Move points by small (east, north) km offsets on the WGS84 ellipsoid, first order."""
    phi = np.radians(lat_deg)
    w = 1.0 - _WGS84_E2 * np.sin(phi) ** 2
    meridian_km = _WGS84_A_KM * (1.0 - _WGS84_E2) / w ** 1.5
    normal_km = _WGS84_A_KM / np.sqrt(w)
    return (lat_deg + np.degrees(north_km / meridian_km),
            lon_deg + np.degrees(east_km / (normal_km * np.cos(phi))))


def _utc_ns(ns):
    """int64 ns since the epoch -> datetime64[ns, UTC] without parsing."""
    return pd.DatetimeIndex(np.asarray(ns, dtype=np.int64).view("datetime64[ns]"), tz="UTC")


def _within_group_cumsum(values, group_start_index, counts):
    """Cumulative sum of `values` restarted at each group (groups contiguous, in order)."""
    c = np.cumsum(values)
    before = np.repeat(c[group_start_index] - values[group_start_index], counts)
    return c - before


def generate_storm(
    seed: int = EXAMPLE_SEED,
    start: str | pd.Timestamp = EXAMPLE_START,
    duration_h: float = EXAMPLE_DURATION_H,
    centre_lat: float = EXAMPLE_CENTRE[0],
    centre_lon: float = EXAMPLE_CENTRE[1],
    region_km: float = 80.0,
    n_flashes: int | None = None,
    strokes_per_s: float | None = None,
    n_cells: int = 12,
    positive_share: float = 0.10,
    ic_flash_share: float = 0.40,
    negative_cc_share: float = 0.30,
    new_contact_prob: float = 0.20,
    interval_gm_ms: float = 56.5,
    interval_sigma_ln: float = 0.75,
    error_scale: float = 1.0,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Make a storm: the true strokes and what a lightning location network reports of them.

    Parameters
    ----------
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same tables.
    start : str or Timestamp
        Start of the storm window (UTC).
    duration_h : float
        Window length, hours.
    centre_lat, centre_lon : float
        Centre of the region, degrees WGS84.
    region_km : float
        Side of the square region, km; cells cross it from south-west to north-east.
    n_flashes : int, optional
        Number of true flashes (ground and cloud). Default 2,000, or from `strokes_per_s`.
    strokes_per_s : float, optional
        Wanted mean rate of *observed* strokes, 1/s (approximate; used when `n_flashes` is None).
    n_cells : int
        Number of storm cells.
    positive_share : float
        Share of ground flashes that are positive (about 0.1, common practice).
    ic_flash_share : float
        Share of all flashes that are cloud flashes (our choice: 0.4).
    negative_cc_share : float
        Share of negative ground flashes with a long continuing current (about 0.3, Saba 2010).
    new_contact_prob : float
        Probability that a negative subsequent stroke makes a new ground contact (0.2 gives
        about 1.5 contacts per flash, near Poelman 2021's 1.56).
    interval_gm_ms : float
        Geometric mean of the ordinary negative interstroke interval, ms. 52 ms so that all
        intervals, the longer ones after continuing currents included, have a GM near 60 ms.
    interval_sigma_ln : float
        Log-standard deviation of the interstroke interval.
    error_scale : float
        True location error / reported ellipse (1: the network's ellipses are right; >1: the
        network is over-confident).

    Returns
    -------
    observed : DataFrame
        The network's report in canonical stroke-table columns (``OBSERVED_COLUMNS``), time
        order, index 0..n-1, times at microsecond precision, positions rounded to 1e-6 degrees.
    truth : DataFrame
        One row per true stroke, in time order: ``time``, ``latitude``, ``longitude`` (true),
        ``peak_current_ka`` (true, signed), ``type`` (true), ``flash_id`` (true flash, from 1 in
        time order), ``flash_type``, ``flash_polarity`` (NaN for cloud flashes),
        ``stroke_order``, ``ground_contact`` (0 for cloud pulses), ``cell_id``, ``cc_after_ms`` (long continuing current following this stroke, ms; 0 when
        none), ``flash_cc`` (the flash has a long continuing current), ``detected``,
        ``observed_index`` (row of `observed`, -1 when missed), ``reported_type``.

    References
    ----------
    See the module docstring: [Rakov2003]; [Saba2010]; [Thottappillil1992]; [CIGRE549];
    [Poelman2021]; [Kitagawa1962]; [Ballarotti2005].
    """
    if duration_h <= 0 or region_km <= 0 or n_cells < 1:
        raise InputError("duration_h, region_km and n_cells must be positive")
    rng = np.random.default_rng(seed)
    t0 = pd.Timestamp(start)
    t0 = t0.tz_localize("UTC") if t0.tzinfo is None else t0.tz_convert("UTC")
    dur_s = float(duration_h) * 3600.0
    if n_flashes is None:
        n_flashes = 2000 if strokes_per_s is None else int(round(strokes_per_s * dur_s / _OBSERVED_PER_FLASH))
    n_flashes = int(n_flashes)
    if n_flashes < 1:
        raise InputError("the storm needs at least one flash")

    # --- cells: born along a system that sweeps the region SW -> NE, drifting the same way
    sweep_km = 0.6 * region_km
    system_speed = sweep_km / dur_s  # km/s
    birth_s = rng.uniform(-0.15, 0.85, n_cells) * dur_s
    life_s = np.clip(_lognormal(rng, 3600.0, 0.4, n_cells), 1200.0, 3.0 * 3600.0)
    heading = np.radians(45.0 + rng.normal(0.0, 10.0, n_cells))
    speed = system_speed * rng.uniform(0.8, 1.3, n_cells) + 0.004 * rng.uniform(0.5, 1.5, n_cells)
    along = (birth_s / dur_s - 0.5) * sweep_km
    cx0 = along * math.sin(math.radians(45.0)) + rng.normal(0.0, region_km / 8.0, n_cells)
    cy0 = along * math.cos(math.radians(45.0)) + rng.normal(0.0, region_km / 8.0, n_cells)
    cell_radius_km = rng.uniform(2.5, 5.0, n_cells)
    # a cell's flashes fall in its life clipped to the window
    a_s = np.maximum(birth_s, 0.0)
    b_s = np.minimum(birth_s + life_s, dur_s)
    weight = _lognormal(rng, 1.0, 0.6, n_cells) * np.maximum(b_s - a_s, 0.0)
    if weight.sum() <= 0:  # no cell overlaps the window (only for odd inputs): spread evenly
        a_s, b_s, weight = np.zeros(n_cells), np.full(n_cells, dur_s), np.ones(n_cells)

    # --- flashes
    cell = rng.choice(n_cells, size=n_flashes, p=weight / weight.sum())
    # rise quickly, decay slowly through the cell's life: Beta(2, 3) shape
    flash_s = birth_s[cell] + rng.beta(2.0, 3.0, n_flashes) * life_s[cell]
    flash_s = np.where((flash_s < a_s[cell]) | (flash_s > b_s[cell]),
                       rng.uniform(a_s[cell], b_s[cell]), flash_s)
    # first strokes fall in [0, duration); a flash that starts near the end may run past it
    order = np.argsort(flash_s, kind="stable")
    cell, flash_s = cell[order], flash_s[order]
    dt = flash_s - birth_s[cell]
    fx = cx0[cell] + speed[cell] * dt * np.sin(heading[cell]) + rng.normal(0.0, 1.0, n_flashes) * cell_radius_km[cell]
    fy = cy0[cell] + speed[cell] * dt * np.cos(heading[cell]) + rng.normal(0.0, 1.0, n_flashes) * cell_radius_km[cell]

    is_ic = rng.random(n_flashes) < ic_flash_share
    is_pos = (~is_ic) & (rng.random(n_flashes) < positive_share)
    is_neg = (~is_ic) & (~is_pos)

    # multiplicity. Negative: 1 + NegBin(r=2, p=0.412) -> single share p^2 = 0.17, mean 3.85
    # (Rakov & Uman 2003: 3-5, 15-20% single). Positive: 81% single, else 2 + Poisson(0.1)
    # -> 1.2 strokes per flash (Saba 2010). Cloud: 1 + Poisson(2.5) pulses (our choice).
    m_neg = 1 + rng.negative_binomial(2, 0.412, n_flashes)
    m_pos = np.where(rng.random(n_flashes) < 0.81, 1, 2 + rng.poisson(0.1, n_flashes))
    m_ic = 1 + rng.poisson(2.5, n_flashes)
    mult = np.where(is_neg, m_neg, np.where(is_pos, m_pos, m_ic))
    mult = np.minimum(mult, 15)

    # long continuing current. Negative: ~30% of flashes (Saba 2010), after a subsequent stroke
    # when the flash has several (such strokes are weak: Rakov & Uman 1990; Saba et al. 2006).
    # Positive: 75% (Saba 2010), more likely for strong first strokes (decided below, needs Ip).
    neg_cc = is_neg & (rng.random(n_flashes) < negative_cc_share)
    cc_stroke = np.where(mult > 1, 2 + np.floor(rng.random(n_flashes) * (mult - 1)).astype(np.int64), 1)
    cc_ms_flash = np.clip(_lognormal(rng, 140.0, 0.5, n_flashes), 40.0, 400.0)  # >= 40 ms: long CC

    # --- strokes
    n = int(mult.sum())
    fidx = np.repeat(np.arange(n_flashes), mult)
    first = np.zeros(n, dtype=bool)
    starts = np.concatenate(([0], np.cumsum(mult)[:-1]))
    first[starts] = True
    stroke_order = np.arange(n) - np.repeat(starts, mult) + 1
    s_neg, s_pos, s_ic = is_neg[fidx], is_pos[fidx], is_ic[fidx]

    # peak currents (true, |Ip| kA)
    z = rng.standard_normal(n)
    ip = np.empty(n)
    ip[:] = 12.3 * np.exp(0.53 * z)  # subsequent negative (CIGRE TB 549 as cited)
    m = s_neg & first
    ip[m] = 31.1 * np.exp(0.484 * z[m])  # first negative
    m = s_pos & first
    ip[m] = 39.4 * np.exp(0.7 * z[m])  # first positive, median per Saba 2010 (sigma our choice)
    m = s_pos & ~first
    ip[m] = 20.0 * np.exp(0.6 * z[m])  # subsequent positive (our choice)
    ip[s_ic] = 6.0 * np.exp(0.6 * z[s_ic])  # cloud pulses (our choice)
    is_cc_stroke = neg_cc[fidx] & (stroke_order == cc_stroke[fidx])
    weak = is_cc_stroke & ~first  # CC-initiating subsequent strokes are weak
    ip[weak] = 9.0 * np.exp(0.45 * z[weak])
    ip = np.clip(ip, 1.0, 400.0)

    first_ip = ip[starts]
    # positives: more likely after a strong first stroke; ~75% overall. The CC follows the last
    # stroke (for 81% of positives the only one), so it leaves no gap in the stroke data.
    pos_cc_p = 0.45 + 0.4 / (1.0 + np.exp(-(first_ip - 25.0) / 6.0))
    pos_cc = is_pos & (rng.random(n_flashes) < pos_cc_p)
    flash_cc = neg_cc | pos_cc
    last = np.zeros(n, dtype=bool)
    last[starts + mult - 1] = True
    cc_after = np.where((neg_cc[fidx] & is_cc_stroke) | (pos_cc[fidx] & last), cc_ms_flash[fidx], 0.0)

    # interstroke intervals (ms). Negative GM `interval_gm_ms`; positive GM 94 ms (Saba 2010);
    # cloud pulses GM 25 ms (our choice). After a long CC the gap is CC duration + a short pause.
    gm = np.where(s_ic, 25.0, np.where(s_pos, 94.0, interval_gm_ms))
    sig = np.where(s_ic, 1.0, np.where(s_pos, 0.7, interval_sigma_ln))
    gap_ms = gm * np.exp(sig * rng.standard_normal(n))  # one exp: lognormal, per-kind GM and sigma
    del gm, sig
    prev_cc = np.concatenate(([0.0], cc_after[:-1]))
    gap_ms = np.where(prev_cc > 0, prev_cc + _lognormal(rng, 15.0, 0.5, n), gap_ms)
    gap_ms = np.clip(gap_ms, 1.0, 480.0)
    gap_ms[first] = 0.0
    offset_ms = _within_group_cumsum(gap_ms, starts, mult)

    # ground contacts: a negative subsequent stroke may strike a new point (Poelman 2021),
    # never right after a continuing current (the channel continues).
    new_c = s_neg & ~first & (rng.random(n) < new_contact_prob) & (prev_cc == 0)
    contact = _within_group_cumsum(new_c.astype(np.int64), starts, mult) + 1
    c_dist = np.clip(_lognormal(rng, 2.0, 0.6, n), 0.4, 8.0)
    c_dir = rng.uniform(0.0, 2 * np.pi, n)
    dx_new = np.where(new_c, c_dist * np.sin(c_dir), 0.0)
    dy_new = np.where(new_c, c_dist * np.cos(c_dir), 0.0)
    # each new contact is placed about the first stroke; later strokes stay at the latest one
    cum_key = np.where(new_c, np.arange(n), -1)
    last_new = np.maximum.accumulate(np.where(first, np.arange(n), cum_key))
    sx = fx[fidx] + np.where(new_c[last_new], dx_new[last_new], 0.0)
    sy = fy[fidx] + np.where(new_c[last_new], dy_new[last_new], 0.0)
    jitter = np.where(s_ic, 1.5, 0.03)  # cloud pulses spread over km; a channel's foot ~30 m
    sx = sx + jitter * rng.standard_normal(n)
    sy = sy + jitter * rng.standard_normal(n)
    contact = np.where(s_ic, 0, contact)  # as the grouping does: cloud pulses have no ground contact

    sign = np.where(s_neg, -1.0, 1.0)
    sign = np.where(s_ic, np.where(rng.random(n) < 0.6, 1.0, -1.0), sign)
    true_ip = sign * ip
    true_type = s_ic.astype(np.int8)  # codes of TYPES: 0 CG, 1 IC
    time_us = np.round((flash_s[fidx] * 1e3 + offset_ms) * 1e3).astype(np.int64)

    # --- network
    pmax = np.where(s_ic, 0.70, 0.98)
    i50 = np.where(s_ic, 4.0, 5.0)
    detected = rng.random(n) < pmax / (1.0 + (i50 / ip) ** 2.5)
    a50 = np.clip(_lognormal(rng, 0.3, 0.5, n), 0.1, 1.0)
    b50 = a50 * rng.uniform(0.3, 1.0, n)
    bearing = rng.uniform(0.0, 180.0, n)
    br = np.radians(bearing)
    za, zb = rng.standard_normal(n), rng.standard_normal(n)
    ea = error_scale * a50 / _P50_TO_SIGMA * za
    eb = error_scale * b50 / _P50_TO_SIGMA * zb
    ex = ea * np.sin(br) + eb * np.cos(br)  # major axis u = (sin b, cos b), minor v = (cos b, -sin b)
    ey = ea * np.cos(br) - eb * np.sin(br)
    del br, za, zb, ea, eb
    del z, gap_ms, offset_ms, prev_cc, c_dist, c_dir, dx_new, dy_new, cum_key, last_new, new_c, jitter
    u = rng.random(n)
    to_ic = (~s_ic) & (u < np.where(ip < 8.0, 0.10, 0.03))
    to_cg = s_ic & (u < 0.06)
    rep_type = np.where(to_ic, 1, np.where(to_cg, 0, true_type)).astype(np.int8)
    rep_ip = np.round(true_ip * np.exp(0.15 * rng.standard_normal(n)), 1)
    rep_ip = np.where(np.abs(rep_ip) < 1.0, np.sign(true_ip) * 1.0, rep_ip)

    plane = LocalPlane(centre_lat, centre_lon)
    tlat, tlon = plane.to_latlon(sx, sy)
    det_idx = np.flatnonzero(detected)
    # The reported offset (east, north) is drawn in the tangent plane AT the stroke, where its
    # ellipse lives; turned into degrees with the WGS84 radii of curvature there (the error
    # of this first-order step is (offset / Earth radius)^2 relative, below a millimetre).
    olat, olon = _offset_deg(tlat[det_idx], tlon[det_idx], ex[det_idx], ey[det_idx])
    del ex, ey, sx, sy

    # observed table, time order (stable: ties keep true order)
    o_order = np.argsort(time_us[det_idx], kind="stable")
    d = det_idx[o_order]
    base_ns = t0.as_unit("ns").value
    observed = pd.DataFrame({
        "time": _utc_ns(base_ns + time_us[d] * 1000),
        "latitude": np.round(olat[o_order], 6),
        "longitude": np.round(olon[o_order], 6),
        "peak_current_ka": rep_ip[d],
        "type": pd.Categorical.from_codes(rep_type[d], categories=TYPES),
        "semi_major_km": np.round(a50[d], 3),
        "semi_minor_km": np.round(b50[d], 3),
        "major_bearing_deg": np.mod(np.round(bearing[d], 1), 180.0),
    })
    obs_index = np.full(n, -1, dtype=np.int64)
    obs_index[d] = np.arange(len(d))

    t_order = np.argsort(time_us, kind="stable")
    truth = pd.DataFrame({
        "time": _utc_ns(base_ns + time_us[t_order] * 1000),
        "latitude": tlat[t_order],
        "longitude": tlon[t_order],
        "peak_current_ka": true_ip[t_order],
        "type": pd.Categorical.from_codes(true_type[t_order], categories=TYPES),
        "flash_id": fidx[t_order] + 1,
        "flash_type": pd.Categorical.from_codes(is_ic.astype(np.int8)[fidx[t_order]], categories=TYPES),
        "flash_polarity": pd.Categorical.from_codes(
            np.where(is_pos, 1, np.where(is_neg, 0, -1)).astype(np.int8)[fidx[t_order]],
            categories=["negative", "positive"]),  # NaN for cloud flashes
        "stroke_order": stroke_order[t_order],
        "ground_contact": contact[t_order],
        "cell_id": cell[fidx[t_order]] + 1,
        "cc_after_ms": np.round(cc_after[t_order], 1),
        "flash_cc": flash_cc[fidx[t_order]],
        "detected": detected[t_order],
        "observed_index": obs_index[t_order],
        "reported_type": pd.Categorical.from_codes(
            np.where(detected[t_order], rep_type[t_order], -1).astype(np.int8), categories=TYPES),
    })
    return observed, truth


def _iso_z(times: pd.Series) -> np.ndarray:
    """ISO 8601 UTC with Z at microsecond precision, vectorised."""
    v = times.dt.tz_convert("UTC").dt.tz_localize(None).to_numpy(dtype="datetime64[us]")
    return np.char.add(np.datetime_as_string(v, unit="us"), "Z")


def _format_observed(observed: pd.DataFrame) -> pd.DataFrame:
    out = pd.DataFrame({
        "time": _iso_z(observed["time"]),
        "latitude": np.char.mod("%.6f", observed["latitude"].to_numpy()),
        "longitude": np.char.mod("%.6f", observed["longitude"].to_numpy()),
        "peak_current_ka": np.char.mod("%.1f", observed["peak_current_ka"].to_numpy()),
        "type": observed["type"].astype(str).to_numpy(),
        "semi_major_km": np.char.mod("%.3f", observed["semi_major_km"].to_numpy()),
        "semi_minor_km": np.char.mod("%.3f", observed["semi_minor_km"].to_numpy()),
        "major_bearing_deg": np.char.mod("%.1f", observed["major_bearing_deg"].to_numpy()),
    })
    return out


#: The deliberately bad rows of the example file: (where, as a share of the file; field; value;
#: what the reader should say). Each is a copy of a real row with one field broken.
BAD_ROWS = (
    (0.10, "latitude", "95.000000", "latitude out of range"),
    (0.30, "peak_current_ka", "0.0", "zero peak current"),
    (0.50, "time", "", "missing time"),
    (0.70, "type", "X", "unknown type code"),
)
#: Where the one exact duplicate goes (as a share of the file); it repeats the row before it.
DUPLICATE_AT = 0.90


def write_event_files(out_dir, observed: pd.DataFrame, truth: pd.DataFrame, *, toml_text: str,
                      bad_rows: bool = True, truth_name: str = "truth.csv") -> dict:
    """Write event.toml, strokes.csv (with the bad rows and one duplicate) and the truth file.

    The truth file gains ``source_row``: the detected stroke's line in strokes.csv (header = 1),
    which is what :func:`debrief.io.strokes.read_strokes` reports as ``source_row``; empty when
    the stroke was missed.

    Returns
    -------
    dict
        ``{"bad_lines": {line: reason}, "duplicate_line": line, "original_of_duplicate": line}``.
    """
    from .io.atomic import write_csv_atomic, write_text_atomic

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rows = _format_observed(observed)
    n = len(rows)
    line_of = np.arange(n, dtype=np.int64) + 2  # line in file, header = 1
    info = {"bad_lines": {}, "duplicate_line": None, "original_of_duplicate": None}
    if bad_rows and n >= 10:
        inserts = []  # (insert before observed position k, row dict, reason)
        for share, col, value, reason in BAD_ROWS:
            k = int(share * n)
            r = rows.iloc[k].to_dict()
            r[col] = value
            inserts.append((k, r, reason))
        k_dup = int(DUPLICATE_AT * n)
        inserts.append((k_dup + 1, rows.iloc[k_dup].to_dict(), "duplicate"))
        inserts.sort(key=lambda t: t[0])
        pieces, prev = [], 0
        shift = np.zeros(n, dtype=np.int64)
        for j, (k, r, reason) in enumerate(inserts):
            pieces.append(rows.iloc[prev:k])
            pieces.append(pd.DataFrame([r], columns=rows.columns))
            shift[k:] += 1
            prev = k
        pieces.append(rows.iloc[prev:])
        rows = pd.concat(pieces, ignore_index=True)
        line_of = line_of + shift
        for j, (k, r, reason) in enumerate(inserts):
            line = int(k + 2 + j)
            if reason == "duplicate":
                info["duplicate_line"] = line
                info["original_of_duplicate"] = int(line_of[k - 1])
            else:
                info["bad_lines"][line] = reason
    write_text_atomic(out / "event.toml", toml_text)
    write_csv_atomic(out / "strokes.csv", rows)
    t = truth.copy()
    t["time"] = _iso_z(t["time"])
    t["latitude"] = np.round(t["latitude"], 6)
    t["longitude"] = np.round(t["longitude"], 6)
    t["peak_current_ka"] = np.round(t["peak_current_ka"], 2)
    oi = t["observed_index"].to_numpy()
    src = np.where(oi >= 0, line_of[np.maximum(oi, 0)], -1)
    t["source_row"] = pd.array(np.where(src >= 0, src, 0), dtype="Int64")
    t.loc[src < 0, "source_row"] = pd.NA
    write_csv_atomic(out / truth_name, t)
    return info


def example_toml(seed: int = EXAMPLE_SEED, start: str = EXAMPLE_START, duration_h: float = EXAMPLE_DURATION_H) -> str:
    """The example event's event.toml text."""
    t0 = pd.Timestamp(start).tz_convert("UTC")
    t1 = t0 + pd.Timedelta(hours=duration_h)
    fmt = "%Y-%m-%dT%H:%M:%SZ"
    return (
        f"# Invented data: an imagined storm made by debrief.synth (seed {seed}); no real storm, place or network.\n"
        'name = "Marrowfield Basin storm, 14 July 2026"\n'
        'time_zone = "America/Chicago"\n'
        f'start = "{t0.strftime(fmt)}"\n'
        f'end = "{t1.strftime(fmt)}"\n'
        'strokes = "strokes.csv"\n'
        "ellipse_confidence = 0.5\n"
        "default_uncertainty_km = 0.5\n"
        "flash_detection_efficiency = 0.9\n"
        'flash_detection_efficiency_source = "assumed for this invented example"\n'
        "\n[lines]\n"
        "ground_flash_density = 2.0\n"
        'ground_flash_density_source = "assumed for this invented example"\n'
    )


def write_example_event(out_dir, seed: int = EXAMPLE_SEED, n_strokes: int | None = None) -> dict:
    """Write the Marrowfield Basin example event (event.toml, strokes.csv, truth.csv) to `out_dir`.

    Only these three files are written; other files in the folder (sites, lines, outages) are
    left alone.

    Parameters
    ----------
    out_dir : path
    seed : int
        Generator seed (the shipped example uses 20260714).
    n_strokes : int, optional
        About how many observed strokes over the 4 hours (default: 2,000 flashes, ~4,600 strokes).
    """
    rate = None if n_strokes is None else n_strokes / (EXAMPLE_DURATION_H * 3600.0)
    observed, truth = generate_storm(seed=seed, strokes_per_s=rate)
    info = write_event_files(out_dir, observed, truth, toml_text=example_toml(seed))
    info["observed"] = len(observed)
    info["true_strokes"] = len(truth)
    return info


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="python -m debrief.synth",
                                description="Write an invented example event folder (event.toml, strokes.csv, truth.csv).")
    p.add_argument("dir", metavar="DIR", help="folder to write (created if missing)")
    p.add_argument("--seed", type=int, default=EXAMPLE_SEED, help=f"generator seed (default {EXAMPLE_SEED})")
    p.add_argument("--strokes", type=int, default=None, metavar="N", help="about N observed strokes (default ~4,600)")
    args = p.parse_args(argv)
    try:
        if args.strokes is not None and args.strokes < 1:
            raise InputError("--strokes must be at least 1")
        info = write_example_event(args.dir, seed=args.seed, n_strokes=args.strokes)
    except InputError as e:
        print(f"debrief.synth: {e}", file=sys.stderr)
        return 2
    except OSError as e:  # e.g. DIR is a file, or not writable
        print(f"debrief.synth: cannot write {args.dir}: {e.strerror or e}", file=sys.stderr)
        return 2
    print(f"wrote {args.dir}: {info['observed']} observed strokes of {info['true_strokes']} true, "
          f"{len(info['bad_lines'])} bad rows, 1 duplicate", file=sys.stderr)
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

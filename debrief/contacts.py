"""Ground contacts: one position fix per channel to ground.

The strokes of one ground contact (``flash_id``, ``ground_contact`` from
:func:`debrief.flashes.group_flashes`) share one channel and so one termination point; their
reported positions are repeated measurements of that point. Probabilities that a channel ended
inside a circle, parcel or corridor are computed once per contact, from the combined fix
(:func:`debrief.uncertainty.combine_fixes`: inverse-covariance weighting, flat prior, errors
assumed independent between strokes), never by taking the largest of the strokes' own
probabilities, nor by treating the strokes as independent strikes.

The contact table has the columns of a stroke table, so the site check and outage matching use
it as they use strokes: ``flash_id``, ``ground_contact``, ``time`` (the contact's first stroke),
``latitude``, ``longitude`` (the combined fix), ``peak_current_ka`` (the first stroke's, signed),
``max_abs_peak_ka``, ``type`` ("CG"), ``likely_ic``, ``n_strokes`` (fixes combined),
``semi_major_km``, ``semi_minor_km``, ``major_bearing_deg`` (the combined error as an ellipse at
the event's ``ellipse_confidence``), ``sxx_km2``, ``syy_km2``, ``sxy_km2``,
``ellipse_from_default`` (some stroke used ``default_uncertainty_km``), ``location_error``
(``ellipse``/``default``/``none``), ``first_stroke`` (row of the first stroke in the stroke table)
and ``source_row`` (its input line).

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [BarShalom2001] Combining independent Gaussian estimates by inverse-covariance weighting.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import InputError
from .uncertainty import combine_fixes, principal_axes, sigma_scale, stroke_covariance

#: WGS84 semi-major axis (km) and first eccentricity squared.
_A_KM = 6378.137
_E2 = 6.69437999014e-3

#: The assumption behind every per-contact probability, for the texts that show one.
INDEPENDENCE_NOTE = ("The strokes of one ground contact are combined into one position fix "
                     "(inverse-covariance weighting, errors taken as independent between strokes); "
                     "different ground contacts are taken as independent.")

CONTACT_COLUMNS = (
    "flash_id", "ground_contact", "time", "latitude", "longitude", "peak_current_ka", "max_abs_peak_ka", "type",
    "likely_ic", "n_strokes", "semi_major_km", "semi_minor_km", "major_bearing_deg", "sxx_km2", "syy_km2",
    "sxy_km2", "ellipse_from_default", "location_error", "first_stroke", "source_row",
)


def _radii_km(lat_deg):
    """Meridional and prime-vertical radii of curvature of WGS84 at `lat_deg`, km."""
    s2 = np.sin(np.radians(lat_deg)) ** 2
    w = np.sqrt(1.0 - _E2 * s2)
    return _A_KM * (1.0 - _E2) / w**3, _A_KM / w


def contact_fixes(strokes: pd.DataFrame, config=None, *, include_likely_ic: bool = False) -> pd.DataFrame:
    """One row per ground contact: the combined position fix of its strokes and its error.

    Parameters
    ----------
    strokes : DataFrame
        Grouped stroke table (``flash_id``, ``ground_contact``, ``likely_ic``, ellipse columns).
    config : EventConfig, optional
        ``ellipse_confidence`` and ``default_uncertainty_km``.
    include_likely_ic : bool
        Count low-amplitude positive ground reports (``likely_ic``). By default they are left out
        of the fixes, and a contact made only of them is not a contact.

    Returns
    -------
    DataFrame
        :data:`CONTACT_COLUMNS`, in first-stroke time order. Strokes without any location error
        (no ellipse and no ``default_uncertainty_km``) are left out of a fix that has strokes with
        one; a contact with none keeps its first stroke's position and NaN covariance
        (``location_error`` ``none``).

    Notes
    -----
    Offsets within a contact are taken about its first stroke with the WGS84 radii of curvature
    at the mid-latitude; a contact spans at most a few km (``ground_contact_km``), where any two
    local planes differ by terms of order d^2/R (about 2 cm at 1.3 km), far below the location
    errors.
    """
    for c in ("flash_id", "ground_contact", "likely_ic", "type"):
        if c not in strokes.columns:
            raise InputError(f"the stroke table lacks {c!r}: group the strokes into flashes first")
    conf = config.get("ellipse_confidence") if config is not None else 0.5
    ok = (strokes["type"].astype(str).to_numpy() == "CG") & (strokes["ground_contact"].to_numpy() > 0)
    if not include_likely_ic:
        ok &= ~strokes["likely_ic"].to_numpy(dtype=bool)
    rows = np.flatnonzero(ok)
    if rows.size == 0:
        return _empty()
    st = strokes.iloc[rows]
    t_ns = pd.DatetimeIndex(pd.to_datetime(st["time"], utc=True)).as_unit("ns").asi8
    fid = st["flash_id"].to_numpy(np.int64)
    gc = st["ground_contact"].to_numpy(np.int64)
    # One label per contact, numbered in (flash, contact) order; the first stroke by time.
    order = np.lexsort((st["source_row"].to_numpy() if "source_row" in st else np.arange(rows.size), t_ns, gc, fid))
    fid_o, gc_o = fid[order], gc[order]
    new = np.ones(order.size, dtype=bool)
    new[1:] = (fid_o[1:] != fid_o[:-1]) | (gc_o[1:] != gc_o[:-1])
    label_o = np.cumsum(new) - 1
    label = np.empty(order.size, np.int64)
    label[order] = label_o
    first = order[new]  # position (in `st`) of each contact's first stroke
    lat = st["latitude"].to_numpy(float)
    lon = st["longitude"].to_numpy(float)
    lat0, lon0 = lat[first][label], lon[first][label]
    # Mid-latitude radii and cosine keep the offsets second-order accurate (like the mid-latitude
    # form of the plane-sailing formulas).
    mid = 0.5 * (lat + lat0)
    m_km, n_km = _radii_km(mid)
    dlon = (lon - lon0 + 180.0) % 360.0 - 180.0  # across the antimeridian too
    x = np.radians(dlon) * n_km * np.cos(np.radians(mid))
    y = np.radians(lat - lat0) * m_km
    sxx, syy, sxy, filled = stroke_covariance(st, config, on_missing="nan")
    has = np.isfinite(sxx)
    n_c = first.size
    has_any = np.bincount(label, weights=has.astype(float), minlength=n_c) > 0
    use = has | ~has_any[label]  # strokes with an error, or every stroke of a contact with none
    cx, cy = np.zeros(n_c), np.zeros(n_c)
    cxx, cyy, cxy = (np.full(n_c, np.nan) for _ in range(3))
    n_used = np.zeros(n_c, np.int64)
    w = use & has
    if np.any(w):
        lab, fx, fy, fxx, fyy, fxy, cnt = combine_fixes(x[w], y[w], sxx[w], syy[w], sxy[w], label[w])
        cx[lab], cy[lab], cxx[lab], cyy[lab], cxy[lab], n_used[lab] = fx, fy, fxx, fyy, fxy, cnt
    none = ~has_any
    if np.any(none):
        n_used[none] = np.bincount(label, minlength=n_c)[none]  # position of the first stroke stays
    la0, lo0 = lat[first], lon[first]
    lat_f = la0 + np.degrees(cy / _radii_km(la0)[0])
    for _ in range(2):  # the mid-latitude depends on the answer: two passes settle it to < 1e-12 deg
        mid_f = 0.5 * (la0 + lat_f)
        mm, nn = _radii_km(mid_f)
        lat_f = la0 + np.degrees(cy / mm)
    lon_f = lo0 + np.degrees(cx / (nn * np.cos(np.radians(0.5 * (la0 + lat_f)))))
    lon_f = (lon_f + 180.0) % 360.0 - 180.0
    s1, s2, ang = principal_axes(cxx, cyy, cxy)
    k = float(sigma_scale(conf))  # semi-axis = k standard deviations
    bearing = np.degrees(np.pi / 2.0 - ang) % 180.0
    default_any = np.bincount(label, weights=(filled & use).astype(float), minlength=n_c) > 0
    ip = st["peak_current_ka"].to_numpy(float)
    max_abs = np.zeros(n_c)
    np.maximum.at(max_abs, label, np.abs(ip))
    likely = st["likely_ic"].to_numpy(bool)
    all_likely = np.bincount(label, weights=likely.astype(float), minlength=n_c) == np.bincount(label, minlength=n_c)
    out = pd.DataFrame({
        "flash_id": fid[first], "ground_contact": gc[first],
        "time": pd.to_datetime(t_ns[first], utc=True),
        "latitude": lat_f, "longitude": lon_f,
        "peak_current_ka": ip[first], "max_abs_peak_ka": max_abs,
        "type": pd.Categorical(["CG"] * n_c, categories=["CG", "IC"]),
        "likely_ic": all_likely, "n_strokes": n_used,
        "semi_major_km": s1 * k, "semi_minor_km": s2 * k, "major_bearing_deg": bearing,
        "sxx_km2": cxx, "syy_km2": cyy, "sxy_km2": cxy,
        "ellipse_from_default": default_any,
        "location_error": np.where(none, "none", np.where(default_any, "default", "ellipse")).astype(object),
        "first_stroke": rows[first].astype(np.int64),
        "source_row": (st["source_row"].to_numpy()[first] if "source_row" in st else rows[first] + 1).astype(np.int64),
    })
    out["time"] = out["time"].astype("datetime64[ns, UTC]")
    out = out.sort_values(["time", "flash_id", "ground_contact"], kind="stable").reset_index(drop=True)
    return out


def _empty() -> pd.DataFrame:
    out = pd.DataFrame({c: pd.Series(dtype=float) for c in CONTACT_COLUMNS})
    for c in ("flash_id", "ground_contact", "n_strokes", "first_stroke", "source_row"):
        out[c] = out[c].astype(np.int64)
    out["time"] = pd.to_datetime(out["time"], utc=True).astype("datetime64[ns, UTC]")
    out["type"] = pd.Categorical([], categories=["CG", "IC"])
    out["likely_ic"] = out["likely_ic"].astype(bool)
    out["ellipse_from_default"] = out["ellipse_from_default"].astype(bool)
    out["location_error"] = out["location_error"].astype(object)
    return out

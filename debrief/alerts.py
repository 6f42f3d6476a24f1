"""Crew alert periods after the event: when lightning came within a stop (or warning) radius.

A period at a site starts with the first ground stroke (cloud pulses too when ``include_ic``)
whose reported position lies within the radius, and ends at the all-clear, ``all_clear_min``
after the last such stroke; a stroke before the all-clear extends the period. A period whose
all-clear falls after the end of the data is marked ``open_at_end``: the data cannot say when it
ended. Every ground report counts here, including low-amplitude positives flagged ``likely_ic``:
for a safety record the cautious reading is to count them.

These periods are a record of what the network's data show, reconstructed afterwards; they are
not a live warning, and lightning can strike beyond any radius and before the first recorded
stroke.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [Holle1999] The 30-minute rule; the NOAA/NWS wording.
.. Stop radius 10 km and warning radius 16 km: common practice, not a standard.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import InputError
from .geodesy import inverse_km

PERIOD_COLUMNS = ("site", "level", "start", "last_stroke", "all_clear", "duration_min", "n_strokes",
                  "nearest_km", "open_at_end", "open_at_start", "coverage", "coverage_note")

RECORD_NOTE = ("These alert periods are a record reconstructed from the network's data after the "
               "event, not a live warning; networks miss some strokes, lightning can strike beyond "
               "any radius, and site safety rules and qualified people decide when work stops.")


def _settings(config, stop_km, warn_km, all_clear_min, include_ic):
    a = config["alerts"] if config is not None else {"stop_km": 10.0, "warn_km": None, "all_clear_min": 30.0, "include_ic": False}
    out = {
        "stop_km": a["stop_km"] if stop_km is None else stop_km,
        "warn_km": a["warn_km"] if warn_km is None else warn_km,
        "all_clear_min": a["all_clear_min"] if all_clear_min is None else all_clear_min,
        "include_ic": a["include_ic"] if include_ic is None else include_ic,
    }
    for k in ("stop_km", "all_clear_min"):
        if not (isinstance(out[k], (int, float)) and out[k] > 0):
            raise InputError(f"{k} must be a positive number, got {out[k]!r}")
    if out["warn_km"] is not None and not (out["warn_km"] > 0):
        raise InputError(f"warn_km must be a positive number, got {out['warn_km']!r}")
    return out


def alert_sites(sites: pd.DataFrame) -> pd.DataFrame:
    """The rows of a sites table that are crew sites: those with ``stop_km``, or all rows if none has it."""
    if "stop_km" in sites.columns and sites["stop_km"].notna().any():
        return sites[sites["stop_km"].notna()].reset_index(drop=True)
    return sites.reset_index(drop=True)


def alert_periods(strokes: pd.DataFrame, sites: pd.DataFrame, config=None, *, stop_km=None, warn_km=None,
                  all_clear_min=None, include_ic=None, data_end=None, data_start=None, coverage=None) -> pd.DataFrame:
    """Alert periods at each site, stop level and (when a warning radius is set) warning level.

    Parameters
    ----------
    strokes : DataFrame
        Stroke table (``time`` UTC, ``latitude``, ``longitude``, ``type``).
    sites : DataFrame
        ``name, latitude, longitude`` with optional per-site ``stop_km``, ``warn_km``, ``start``,
        ``end`` (UTC; strokes from ``start - all_clear`` to ``end`` count). A per-site radius wins
        over the default.
    config : EventConfig, optional
        ``[alerts]`` defaults: ``stop_km`` 10, ``warn_km`` none, ``all_clear_min`` 30,
        ``include_ic`` false (common practice; 30 min after Holle et al. 1999 [Holle1999]_).
    stop_km, warn_km, all_clear_min, include_ic : optional
        Override the ``[alerts]`` defaults.
    data_end : Timestamp, optional
        End of the data's coverage (default: the last stroke); a period whose all-clear falls
        after it is ``open_at_end``.
    data_start : Timestamp, optional
        Start of the data's coverage (or of the analysis window); a period whose first stroke
        comes within the all-clear time after it is ``open_at_start``: it may have begun earlier.
    coverage : debrief.coverage.Coverage, optional
        States each period's coverage (the stop or warning circle over start to all-clear):
        ``inside``, ``partial`` or ``outside``, with a note.

    Returns
    -------
    DataFrame
        :data:`PERIOD_COLUMNS`, one row per period, by site, level and start. ``nearest_km`` is
        the closest reported stroke of the period (geodesic).

    References
    ----------
    Holle, López and Zimmermann (1999) [Holle1999]_.
    """
    from scipy.spatial import cKDTree

    from .sites import _chord, _time_ns, _unit_vectors, _validate_site

    cfg = _settings(config, stop_km, warn_km, all_clear_min, include_ic)
    for c in ("name", "latitude", "longitude"):
        if c not in sites.columns:
            raise InputError(f"the sites table lacks the column {c!r}")
    n = len(sites)
    lat = sites["latitude"].to_numpy(dtype=float)
    lon = sites["longitude"].to_numpy(dtype=float)
    stop = sites["stop_km"].to_numpy(dtype=float) if "stop_km" in sites else np.full(n, np.nan)
    stop = np.where(np.isfinite(stop), stop, cfg["stop_km"])
    warn = sites["warn_km"].to_numpy(dtype=float) if "warn_km" in sites else np.full(n, np.nan)
    if cfg["warn_km"] is not None:
        warn = np.where(np.isfinite(warn), warn, cfg["warn_km"])
    _validate_site(lat, lon, stop, where="alert sites")
    clear_ns = np.int64(round(cfg["all_clear_min"] * 60e9))
    t_all = _time_ns(strokes["time"])
    end_ns = int(pd.Timestamp(data_end).tz_convert("UTC").value) if data_end is not None else (int(t_all.max()) if t_all.size else 0)
    start_ns = int(pd.Timestamp(data_start).tz_convert("UTC").value) if data_start is not None else None
    kinds = strokes["type"].astype(str).to_numpy()
    use = (kinds == "CG") | ((kinds == "IC") & bool(cfg["include_ic"]))
    idx = np.flatnonzero(use)
    empty = pd.DataFrame({c: pd.Series(dtype=object) for c in PERIOD_COLUMNS})
    if idx.size == 0 or n == 0:
        return _typed(empty)
    slat = strokes["latitude"].to_numpy(dtype=float)[idx]
    slon = strokes["longitude"].to_numpy(dtype=float)[idx]
    t = t_all[idx]
    tree = cKDTree(_unit_vectors(slat, slon))
    radius = np.fmax(stop, np.nan_to_num(warn, nan=0.0))
    lists = tree.query_ball_point(_unit_vectors(lat, lon), r=_chord(radius), return_sorted=False)
    counts = np.fromiter((len(x) for x in lists), dtype=np.int64, count=n)
    si = np.repeat(np.arange(n), counts)
    sj = np.fromiter((j for x in lists for j in x), dtype=np.int64, count=int(counts.sum()))
    d, _ = inverse_km(lat[si], lon[si], slat[sj], slon[sj])
    lo = np.full(n, np.iinfo(np.int64).min)
    hi = np.full(n, np.iinfo(np.int64).max)
    for col, arr, shift in (("start", lo, -clear_ns), ("end", hi, 0)):
        if col in sites.columns:
            tt = pd.to_datetime(sites[col], utc=True)
            ok = tt.notna().to_numpy()
            arr[ok] = _time_ns(tt[ok]) + shift
    tw = (t[sj] >= lo[si]) & (t[sj] <= hi[si])
    frames = []
    for level, rad in (("stop", stop), ("warn", warn)):
        m = tw & (d <= rad[si])  # NaN warn radius -> no warning periods
        if not np.any(m):
            continue
        frames.append(_periods(si[m], t[sj[m]], d[m], clear_ns, end_ns, level, start_ns))
    if not frames:
        return _typed(empty)
    per = pd.concat(frames, ignore_index=True)
    if coverage is not None and len(per):
        from .coverage import check_places

        k = per["site_index"].to_numpy()
        rad = np.where(per["level"].to_numpy() == "stop", stop[k], warn[k])
        cov = check_places(coverage, lat[k], lon[k], rad, pd.DatetimeIndex(per["start"]).as_unit("ns").asi8,
                           pd.DatetimeIndex(per["all_clear"]).as_unit("ns").asi8)
        per["coverage"] = cov["coverage"].to_numpy()
        per["coverage_note"] = cov["coverage_note"].to_numpy()
    per.insert(0, "site", sites["name"].to_numpy()[per.pop("site_index").to_numpy()])
    per = per.sort_values(["site", "level", "start"], kind="stable").reset_index(drop=True)
    return _typed(per[list(PERIOD_COLUMNS)])


def _periods(site, t_ns, d_km, clear_ns, end_ns, level, start_ns=None):
    """Vectorised: sort by (site, time); a new period where the site changes or the gap > all-clear."""
    order = np.lexsort((t_ns, site))
    s, t, d = site[order], t_ns[order], d_km[order]
    new = np.ones(s.size, dtype=bool)
    new[1:] = (s[1:] != s[:-1]) | (np.diff(t) > clear_ns)
    pid = np.cumsum(new) - 1
    starts = np.flatnonzero(new)
    last = np.r_[starts[1:] - 1, s.size - 1]
    nearest = np.minimum.reduceat(d, starts)
    all_clear = t[last] + clear_ns
    return pd.DataFrame({
        "site_index": s[starts], "level": level,
        "start": pd.to_datetime(t[starts], utc=True), "last_stroke": pd.to_datetime(t[last], utc=True),
        "all_clear": pd.to_datetime(all_clear, utc=True),
        "duration_min": (all_clear - t[starts]) / 60e9,
        "n_strokes": np.bincount(pid).astype(np.int64), "nearest_km": nearest,
        "open_at_end": all_clear > end_ns,
        # A stroke in the all-clear time before the data start would have opened the period earlier.
        "open_at_start": (t[starts] - clear_ns < start_ns) if start_ns is not None else False,
        "coverage": "not_checked", "coverage_note": "",
    })


def _typed(per: pd.DataFrame) -> pd.DataFrame:
    for c in ("start", "last_stroke", "all_clear"):
        per[c] = pd.to_datetime(per[c], utc=True).astype("datetime64[ns, UTC]")
    per["duration_min"] = per["duration_min"].astype(float)
    per["n_strokes"] = per["n_strokes"].astype("int64")
    per["nearest_km"] = per["nearest_km"].astype(float)
    per["open_at_end"] = per["open_at_end"].astype(bool)
    per["open_at_start"] = per["open_at_start"].astype(bool)
    for c in ("coverage", "coverage_note"):
        per[c] = per[c].astype(object)
    per["site"] = per["site"].astype(object)
    per["level"] = per["level"].astype(object)
    return per


def site_totals(periods: pd.DataFrame, sites=None) -> pd.DataFrame:
    """Per site and level: number of periods, total time in periods (min), whether one is still open.

    With `sites` (names), sites without any period appear with zero. A total that includes an
    open period is a lower bound (``open_at_end`` true).
    """
    g = periods.groupby(["site", "level"], sort=True)
    out = pd.DataFrame({
        "n_periods": g.size(), "total_min": g["duration_min"].sum(), "open_at_end": g["open_at_end"].any(),
    }).reset_index()
    if sites is not None:
        names = pd.Series(list(sites), dtype=object)
        missing = names[~names.isin(out.loc[out["level"] == "stop", "site"])]
        extra = pd.DataFrame({"site": missing.to_numpy(), "level": "stop", "n_periods": 0, "total_min": 0.0, "open_at_end": False})
        out = pd.concat([out, extra], ignore_index=True).sort_values(["site", "level"], kind="stable").reset_index(drop=True)
    out["n_periods"] = out["n_periods"].astype("int64")
    return out


def _merge(iv):
    """Union of [a, b] intervals (int ns), sorted."""
    iv = sorted(iv)
    out = []
    for a, b in iv:
        if out and a <= out[-1][1]:
            out[-1][1] = max(out[-1][1], b)
        else:
            out.append([a, b])
    return out


def _subtract(a_iv, b_iv):
    """Parts of the intervals `a_iv` not covered by `b_iv`: list of (a, b, index into a_iv)."""
    cover = _merge(b_iv)
    out = []
    for k, (a, b) in enumerate(a_iv):
        cur = a
        for c0, c1 in cover:
            if c1 <= cur or c0 >= b:
                continue
            if c0 > cur:
                out.append((cur, c0, k))
            cur = max(cur, c1)
            if cur >= b:
                break
        if cur < b:
            out.append((cur, b, k))
    return out


def _ts(v):
    return pd.Timestamp(int(v), tz="UTC")


def compare_crew_log(periods: pd.DataFrame, crew_log: pd.DataFrame, *, data_end=None, tolerance_min: float = 1.0,
                     sites=None, data_start=None, all_clear_min: float | None = None) -> pd.DataFrame:
    """Where work went on inside a stop period, or stopped outside one.

    Parameters
    ----------
    periods : DataFrame
        From :func:`alert_periods`; only ``stop`` periods are compared.
    crew_log : DataFrame
        ``site, stopped, resumed`` (UTC; ``resumed`` NaT = not resumed within the log, taken as
        `data_end`), ``source_row`` (:func:`debrief.io.sites.read_crew_log`).
    data_end : Timestamp, optional
        End of the data (default: the latest time in either table).
    data_start : Timestamp, optional
        Start of the data or of the analysis window: before it nothing is known, so both the
        periods and the logged stops are compared from there on.
    all_clear_min : float, optional
        With `data_start`: for this long after it a stop period may still be running from strokes
        before it, so a logged stop there is not called "outside" one.
    tolerance_min : float
        Pieces shorter than this are not listed (typed times carry minutes only).
    sites : sequence of str, optional
        Known site names: log rows for other names are listed as ``unknown site``.

    Returns
    -------
    DataFrame
        ``site, finding, start, end, minutes, crew_log_line``; finding is ``worked during stop
        period`` (a period not covered by a logged stop), ``stopped outside stop period`` or
        ``unknown site``.
    """
    stop = periods[periods["level"] == "stop"]
    times = [pd.to_datetime(stop["all_clear"], utc=True).max(), pd.to_datetime(crew_log["stopped"], utc=True).max(),
             pd.to_datetime(crew_log["resumed"], utc=True).max()]
    if data_end is None:
        times = [x for x in times if x is not pd.NaT and not pd.isna(x)]
        data_end = max(times) if times else pd.Timestamp(0, tz="UTC")
    end_ns = pd.Timestamp(data_end).tz_convert("UTC").value
    start_ns = pd.Timestamp(data_start).tz_convert("UTC").value if data_start is not None else np.iinfo(np.int64).min
    tol = tolerance_min * 60e9
    rows = []
    known = set(sites) if sites is not None else None
    names = sorted(set(stop["site"]) | set(crew_log["site"]))
    for name in names:
        if known is not None and name not in known:
            for r in crew_log[crew_log["site"] == name].itertuples():
                rows.append((name, "unknown site", r.stopped, r.resumed, np.nan, r.source_row))
            continue
        p = stop[stop["site"] == name]
        c = crew_log[crew_log["site"] == name]
        # Outside the data (or the window) nothing is known: periods and logged stops are cut to
        # it, and open stops run to its end.
        early = p["open_at_start"].to_numpy(bool) if "open_at_start" in p else np.zeros(len(p), bool)
        seen = [(max(a.value, start_ns), min(b.value, end_ns), e) for a, b, e in zip(p["start"], p["all_clear"], early)
                if a.value < end_ns and b.value > start_ns]
        p_iv = [(a, b) for a, b, _e in seen]
        # A period that may have begun before the data start: a stop logged before its first seen
        # stroke is not "outside" it (unknown, not a finding).
        p_iv_stop = [(start_ns if e else a, b) for a, b, e in seen]
        if data_start is not None and all_clear_min:
            p_iv_stop.append((start_ns, start_ns + int(all_clear_min * 60e9)))
        c_iv = [(max(a.value, start_ns), min(b.value if b is not pd.NaT and not pd.isna(b) else end_ns, end_ns))
                for a, b in zip(c["stopped"], c["resumed"])]
        keep = [k for k, (a, b) in enumerate(c_iv) if b > a]
        c_iv = [c_iv[k] for k in keep]
        lines = [c["source_row"].tolist()[k] for k in keep]
        for a, b, _k in _subtract(p_iv, c_iv):
            if b - a >= tol:
                rows.append((name, "worked during stop period", _ts(a), _ts(b), (b - a) / 60e9, pd.NA))
        for a, b, k in _subtract(c_iv, p_iv_stop):
            if b - a >= tol:
                rows.append((name, "stopped outside stop period", _ts(a), _ts(b), (b - a) / 60e9, lines[k]))
    out = pd.DataFrame(rows, columns=["site", "finding", "start", "end", "minutes", "crew_log_line"])
    for col in ("start", "end"):
        out[col] = pd.to_datetime(out[col], utc=True).astype("datetime64[ns, UTC]")
    out["minutes"] = out["minutes"].astype(float)
    out["crew_log_line"] = out["crew_log_line"].astype("Int64")
    return out

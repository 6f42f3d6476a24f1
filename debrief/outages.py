"""Outage-to-stroke matching and verdicts: was lightning the likely cause, how, and which stroke.

For each outage in the log, the candidate strokes are the ground strokes (CG) within the clock
tolerance of the outage's operations (the trip and, for a reclosing sequence, the later
operations) and within ``search_km`` of the line, or of the fault location when the log gives
one. For each candidate:

* ``distance_m``: reported position to the line, in a local azimuthal equidistant plane about
  the line (:class:`debrief.geodesy.LocalPlane`), by shapely;
* the line physics of :mod:`debrief.lines` at the stroke's estimated peak current: the
  direct-strike zone ``y_min`` and the induced-flashover distance ``y_fo``;
* probabilities under the network's location error (bivariate normal from the error ellipse,
  :func:`debrief.uncertainty.p_within_corridor`): ``p_direct = P(y < y_min)``,
  ``p_induced_fo = P(y_min < y < y_fo)`` and their sum ``p_within_corridor = P(y < max(y_min,
  y_fo))``, the probability that the stroke fell inside the line's flashover corridor;
* the same at 0.7 I and 1.3 I (peak currents are estimates), to see whether the verdict holds.

Verdicts (one per outage, decided on the best candidate; thresholds ``[lines] likely_p`` 0.5
and ``possible_p`` 0.1) are listed in :data:`VERDICTS` (:func:`verdict_table_markdown` renders
it), tried in this order:

==================================  ==========================================================
``not_analysed``                    the outage row has a problem (unknown line, bad time, ...)
``no_lightning_in_tolerance``       no ground stroke in the time window and search distance
``direct_strike_likely``            best candidate p_direct >= likely_p
``induced_flashover_likely``        best candidate p_induced_fo >= likely_p
``direct_strike_possible``          p_within_corridor >= possible_p and p_direct >= p_induced_fo
``induced_flashover_possible``      p_within_corridor >= possible_p and p_induced_fo > p_direct
``lightning_nearby_unlikely_cause`` candidates, but p_within_corridor < possible_p
==================================  ==========================================================
 Candidates are ranked by ``p_within_corridor``
(highest first, compared to 1e-6), then by the time from the nearest logged operation, then
by distance.

Not modelled: shield wires (a line's ``shielded`` flag is recorded only), nearby trees and
buildings that intercept strokes, ground conductivity, line ends and surge arresters: lines are
single conductors over flat, perfectly conducting ground (IEEE Std 1410's simplified methods).

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [IEEE1410] Electrogeometric model, Rusck's formula, the 1.5 CFO rule (from memory).
.. [Rusck1958] Induced voltage of a line near a stroke (from memory).
.. [Eriksson1987] Expected direct strikes per line length (from memory).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import shapely
import shapely.geometry

from . import lines as phys
from .config import from_dict
from .geodesy import LocalPlane, inverse_km, lon_near_deg, normalise_lon_deg
from .timeutil import iso_utc

#: Verdict code -> (rule, meaning). One table, used by docs, reports and the CLI.
VERDICTS = {
    "direct_strike_likely": ("best candidate p_direct >= likely_p",
                             "a stroke most likely hit the line"),
    "induced_flashover_likely": ("best candidate p_induced_fo >= likely_p",
                                 "a nearby stroke most likely induced a flashover"),
    "direct_strike_possible": ("p_within_corridor >= possible_p, p_direct >= p_induced_fo",
                               "lightning may have caused it, most probably by hitting the line"),
    "induced_flashover_possible": ("p_within_corridor >= possible_p, p_induced_fo > p_direct",
                                   "lightning may have caused it, most probably by an induced flashover"),
    "lightning_nearby_unlikely_cause": ("candidates, but p_within_corridor < possible_p for all",
                                        "lightning was near in time and place but probably not close or strong enough"),
    "no_lightning_in_tolerance": ("no candidate stroke",
                                  "no ground stroke within the clock tolerance and search distance"),
    "not_analysed": ("the outage row has a problem",
                     "the row could not be analysed (see reasons)"),
    "outside_window": ("the trip time is outside the analysis window",
                       "not analysed in this window (see reasons)"),
    "outside_coverage": ("the trip time (with its clock tolerance) or the line lies outside the data's coverage",
                         "the stroke data do not cover it: no conclusion"),
}

#: Internal markers of outages set aside before matching (verdicts of the same name).
OUTSIDE_WINDOW = "outside_window"
OUTSIDE_COVERAGE = "outside_coverage"

#: The order in which verdicts are listed (strongest first).
VERDICT_ORDER = tuple(VERDICTS)

#: Peak-current factors of the sensitivity check (±30 %).
CURRENT_FACTORS = (0.7, 1.3)

CAUTIONS = (
    "This record supports, and does not replace, an engineering determination by qualified staff "
    "under local codes and licensed practice.",
    "Control-system clocks can be seconds off: a stroke within the clock tolerance is linked to an "
    "outage only as well as the clocks were synchronised.",
    "Peak currents are the network's estimates (often 20-30 % off); the verdict is recomputed at "
    "0.7 and 1.3 times the estimate and a change is flagged.",
    "Positions carry the network's location error (bivariate normal from the error ellipse), and the "
    "network misses some strokes (detection efficiency below 100 %): 'no lightning' does not prove "
    "there was none.",
    "Shield wires are not modelled (the 'shielded' flag is recorded only), nor trees and buildings "
    "that intercept strokes, ground conductivity, line ends or arresters: each line is one conductor "
    "over flat, perfectly conducting ground (IEEE Std 1410 simplified methods).",
)

CANDIDATE_COLUMNS = [
    "outage_id", "line_id", "rank", "stroke_index", "stroke_time", "latitude", "longitude", "type",
    "peak_current_ka", "flash_id", "stroke_order", "dt_s", "dt_op_s", "operation", "distance_m",
    "fault_distance_m", "y_min_m", "y_fo_m", "mechanism_at_position", "induced_kv", "p_within_corridor",
    "p_direct", "p_induced_fo", "p_direct_low_current", "p_induced_fo_low_current",
    "p_direct_high_current", "p_induced_fo_high_current", "location_error", "likely_ic",
    "ground_contact", "contact_n_strokes", "contact_distance_m", "contact_p_within_corridor", "contact_p_direct",
    "contact_p_induced_fo", "contact_p_direct_low_current", "contact_p_induced_fo_low_current",
    "contact_p_direct_high_current", "contact_p_induced_fo_high_current",
]


_BEST = ("stroke_time", "peak_current_ka", "dt_s", "distance_m", "p_within_corridor", "p_direct",
         "p_induced_fo", "induced_kv", "latitude", "longitude", "flash_id", "contact_n_strokes")
VERDICT_COLUMNS = ["outage_id", "line_id", "time", "device", "clock_tolerance_s", "verdict", "reasons",
                   "n_candidates", "n_contacts", "p_any", "coverage", "coverage_note", "verdict_low_current",
                   "verdict_high_current", "current_sensitive"] + ["best_" + c for c in _BEST]


def _settings(config):
    if config is None:
        config = from_dict({})
    return config, config["lines"]


def _ns(times) -> np.ndarray:
    return pd.DatetimeIndex(pd.to_datetime(times, utc=True)).as_unit("ns").asi8


def _covariance(strokes: pd.DataFrame, config):
    """(sxx, syy, sxy, kind) per stroke; kind 'ellipse', 'default' or 'none' (NaN covariance)."""
    from .uncertainty import ellipse_covariance

    n = len(strokes)
    a = strokes["semi_major_km"].to_numpy(dtype=float) if "semi_major_km" in strokes else np.full(n, np.nan)
    b = strokes["semi_minor_km"].to_numpy(dtype=float) if "semi_minor_km" in strokes else np.full(n, np.nan)
    br = strokes["major_bearing_deg"].to_numpy(dtype=float) if "major_bearing_deg" in strokes else np.full(n, np.nan)
    br = np.where((a == b) & ~np.isfinite(br), 0.0, br)
    ok = np.isfinite(a) & np.isfinite(b) & np.isfinite(br) & (a > 0) & (b > 0)
    kind = np.where(ok, "ellipse", "none").astype(object)
    d = config.get("default_uncertainty_km")
    if d is not None:
        a, b, br = np.where(ok, a, d), np.where(ok, b, d), np.where(ok, br, 0.0)
        kind[~ok] = "default"
        ok = np.ones(n, bool)
    sxx, syy, sxy = (np.full(n, np.nan) for _ in range(3))
    if np.any(ok):
        sxx[ok], syy[ok], sxy[ok] = ellipse_covariance(a[ok], b[ok], br[ok], config.get("ellipse_confidence"))
    return sxx, syy, sxy, kind


@dataclass
class _LineGeo:
    plane: LocalPlane
    parts: list  # shapely LineStrings in the plane, km
    whole: object  # shapely (Multi)LineString in the plane, km
    bounds_deg: tuple  # lon_min, lat_min, lon_max, lat_max, continuous across 180 (line_box_deg)


def _line_geo(geometry) -> _LineGeo:
    """The line in one plane about the middle of its extent (continuous across 180 degrees).

    Parts cut at the antimeridian are joined into one (:func:`debrief.io.lines.connected_parts_lonlat`);
    the plane takes longitudes modulo 360, so a segment across 180 is the short way.
    """
    from .io.lines import connected_parts_lonlat, line_box_deg

    pts = connected_parts_lonlat(geometry)
    box = line_box_deg(geometry)
    # Centre the plane on the middle of the line's extent: distances there are nearly exact.
    # (For a line that does not cross 180 degrees this is the middle of its lon/lat bounds.)
    lon0 = float(normalise_lon_deg(0.5 * (box[0] + box[2])))
    lat0 = 0.5 * (box[1] + box[3])
    plane = LocalPlane(lat0, lon0)
    parts = []
    for p in pts:
        x, y = plane.to_xy_km(p[:, 1], p[:, 0])
        parts.append(shapely.LineString(np.column_stack([x, y])))
    whole = parts[0] if len(parts) == 1 else shapely.MultiLineString(parts)
    return _LineGeo(plane, parts, whole, box)


def _in_box(lat_deg, lon_deg, lon_lo, lat_lo, lon_hi, lat_hi, dlat, dlon):
    """Points inside lon/lat boxes widened by (dlat, dlon), longitudes compared modulo 360."""
    lon = lon_deg
    if np.any((np.asarray(lon_lo) - dlon < -180.0) | (np.asarray(lon_hi) + dlon > 180.0)):
        # only boxes reaching past 180 need the shift (it costs a pass over the strokes)
        lon = lon_near_deg(lon_deg, 0.5 * (np.asarray(lon_lo) + np.asarray(lon_hi)))
    return (lat_deg >= lat_lo - dlat) & (lat_deg <= lat_hi + dlat) & (lon >= lon_lo - dlon) & (lon <= lon_hi + dlon)


def _bbox_margin_deg(lat_deg, km):
    lat_deg = np.asarray(lat_deg, dtype=float)
    dlat = np.full(lat_deg.shape, km / 110.5 * 1.02 + 1e-6)
    dlon = km / (111.4 * np.maximum(np.cos(np.radians(np.minimum(np.abs(lat_deg) + dlat, 89.0))), 1e-3)) * 1.02 + 1e-6
    return dlat, dlon


def stroke_line_physics(strokes: pd.DataFrame, line: pd.Series, config=None, *, geo: _LineGeo | None = None,
                        factors=(1.0,) + CURRENT_FACTORS):
    """Distance, flashover band and corridor probabilities of strokes with respect to one line.

    Parameters
    ----------
    strokes : DataFrame
        Stroke table rows (``latitude``, ``longitude``, ``peak_current_ka`` and the ellipse columns).
    line : Series
        A row of :func:`debrief.io.lines.read_lines`: ``geometry``, ``height_m``, ``cfo_kv``.
    config : EventConfig, optional
        ``[lines]`` settings (model, return-stroke speed), ``ellipse_confidence``,
        ``default_uncertainty_km``.
    factors : tuple of float
        Peak-current factors; the first is the estimate itself (1.0).

    Returns
    -------
    dict of ndarray, one value per stroke
        ``x_km``, ``y_km`` (plane about the line), ``distance_m``, ``location_error``
        (``ellipse``/``default``/``none``) and, per factor ``f`` (key suffix ``""`` for 1.0,
        ``"_low_current"``/``"_high_current"`` for 0.7/1.3): ``y_min_m``, ``y_fo_m``, ``p_direct``,
        ``p_induced_fo``, ``p_within_corridor``. Without any location error (no ellipse, no
        ``default_uncertainty_km``) the probabilities are 1 or 0 from the reported position.

    References
    ----------
    [IEEE1410] and [Rusck1958] via :mod:`debrief.lines`; the corridor probability of
    :func:`debrief.uncertainty.p_within_corridor`.
    """
    from .uncertainty import p_within_corridor

    config, lc = _settings(config)
    geo = geo or _line_geo(line["geometry"])
    n = len(strokes)
    x, y = geo.plane.to_xy_km(strokes["latitude"].to_numpy(float), strokes["longitude"].to_numpy(float))
    x, y = np.atleast_1d(x).astype(float), np.atleast_1d(y).astype(float)
    pts = shapely.points(x, y)
    part_d = np.vstack([shapely.distance(part, pts) for part in geo.parts]) if n else np.zeros((len(geo.parts), 0))
    d_km = part_d.min(axis=0) if n else np.zeros(0)
    nearest = part_d.argmin(axis=0) if n else np.zeros(0, int)
    sxx, syy, sxy, kind = _covariance(strokes, config)
    has_cov = np.isfinite(sxx)
    i_ka = np.abs(strokes["peak_current_ka"].to_numpy(float))
    h, cfo = float(line["height_m"]), float(line["cfo_kv"])
    model, v = lc["striking_distance_model"], lc["return_stroke_speed_m_s"]
    out = {"x_km": x, "y_km": y, "distance_m": d_km * 1000.0, "location_error": kind}
    # Every corridor width wanted, stacked so that each line part is one call.
    widths, keys = [], []
    for f in factors:
        ymin, yfo = phys.flashover_band_m(f * i_ka, h, cfo, model=model, return_stroke_speed_m_s=v)
        sfx = _suffix(f)
        out["y_min_m" + sfx], out["y_fo_m" + sfx] = ymin, yfo
        widths += [ymin, np.maximum(yfo, ymin)]
        keys += [("min", sfx), ("outer", sfx)]
    w_km = np.vstack(widths) / 1000.0  # (k, n)
    p = (d_km[None, :] < w_km).astype(float)  # reported position only (no location error)

    def fill(rows, strokes_mask):
        """Corridor probabilities for width rows `rows` (pairs: min, outer) and chosen strokes."""
        for k_part, part in enumerate(geo.parts):
            sel = np.flatnonzero(strokes_mask & (nearest == k_part))
            if sel.size == 0:
                continue
            coords = np.asarray(part.coords)
            ww = w_km[np.ix_(rows, sel)]
            # Skip an outer width equal to its direct-strike width (empty band): same probability.
            need = np.ones(ww.shape, bool)
            need[1::2] = ww[1::2] > ww[0::2]
            kk, jj = np.nonzero(need)
            st_ = sel[jj]
            pv = p_within_corridor(x[st_], y[st_], sxx[st_], syy[st_], sxy[st_], coords[:, 0], coords[:, 1], ww[kk, jj])
            block = np.zeros(ww.shape)
            block[kk, jj] = pv
            block[1::2] = np.where(need[1::2], block[1::2], block[0::2])
            p[np.ix_(rows, sel)] = block

    first = [j for j, (_, sfx) in enumerate(keys) if sfx in ("", "_high_current")]
    lower = [j for j, (_, sfx) in enumerate(keys) if sfx == "_low_current"]
    if "" in [sfx for _, sfx in keys] and lower:
        fill(first, has_cov)
        # The flashover corridor max(y_min, y_fo) widens with current, so at a lower current
        # every probability is at most p_within_corridor at the estimate: skip where that is ~0.
        j0 = keys.index(("outer", ""))
        fill(lower, has_cov & (np.maximum(p[j0], p[j0 - 1]) > 1e-12))
        low_skip = has_cov & ~(np.maximum(p[j0], p[j0 - 1]) > 1e-12)
        p[np.ix_(lower, np.flatnonzero(low_skip))] = 0.0
    else:
        fill(list(range(len(keys))), has_cov)
    for j, (what, sfx) in enumerate(keys):
        if what == "min":
            pd_ = p[j]
            po = np.maximum(p[j + 1], pd_)  # a wider corridor cannot hold less
            out["p_direct" + sfx] = pd_
            out["p_induced_fo" + sfx] = np.where(out["y_fo_m" + sfx] > out["y_min_m" + sfx], po - pd_, 0.0)
            out["p_within_corridor" + sfx] = pd_ + out["p_induced_fo" + sfx]
    out["induced_kv"] = phys.induced_kv(i_ka, h, d_km * 1000.0, model=model, return_stroke_speed_m_s=v)
    return out


def _suffix(f):
    if f == 1.0:
        return ""
    return "_low_current" if f < 1.0 else "_high_current"


@dataclass
class OutageMatch:
    """The result of :func:`match_outages`.

    Attributes
    ----------
    candidates : DataFrame
        One row per (outage, candidate stroke), ``CANDIDATE_COLUMNS``, best first per outage.
    verdicts : DataFrame
        One row per outage: ``outage_id``, ``line_id``, ``time``, ``verdict``, ``reasons``
        (plain sentences joined by "; "), ``n_candidates``, ``p_any`` (probability that at least
        one candidate was in the corridor, taking candidates as independent), the best
        candidate's fields (``best_*``), ``verdict_low_current``, ``verdict_high_current``,
        ``current_sensitive``.
    cautions : list of str
    notes : list of str
        Settings and defaults that shaped the result (e.g. a line's default height).
    """

    candidates: pd.DataFrame
    verdicts: pd.DataFrame
    cautions: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    coverage_source: str = "not_checked"


def _candidate_pairs(t_ns, outages, lc):
    """(outage position, stroke index, nearest-operation dt) of strokes in each time window."""
    tol_s = outages["clock_tolerance_s"].to_numpy(float)
    tol_s = np.where(np.isfinite(tol_s), tol_s, lc["clock_tolerance_s"])
    t0 = _ns(outages["time"])
    last = np.array([max([t] + [_ns([r])[0] for r in ops]) if len(ops) else t
                     for t, ops in zip(t0, outages["reclose_times"])], dtype=np.int64)
    tol_ns = np.round(tol_s * 1e9).astype(np.int64)
    lo = np.searchsorted(t_ns, t0 - tol_ns, side="left")
    hi = np.searchsorted(t_ns, last + tol_ns, side="right")
    counts = np.maximum(hi - lo, 0)
    po = np.repeat(np.arange(len(outages)), counts)
    starts = np.repeat(lo, counts)
    offs = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    return po, starts + offs


def match_outages(strokes: pd.DataFrame, outages: pd.DataFrame, lines: pd.DataFrame, config=None, *,
                  window=None, coverage=None) -> OutageMatch:
    """Match outages to candidate strokes and give each outage a verdict.

    Parameters
    ----------
    strokes : DataFrame
        The stroke table (DEVELOPERS.md), grouped or not; only ``type == "CG"`` strokes are
        candidates unless ``[lines] include_ic``.
    outages : DataFrame
        As :func:`debrief.io.lines.read_outages` returns it (rows with a ``problem`` get the
        verdict ``not_analysed``).
    lines : DataFrame
        As :func:`debrief.io.lines.read_lines` returns it.
    config : EventConfig, optional
        ``[lines]`` settings, ``ellipse_confidence``, ``default_uncertainty_km``.
    window : (Timestamp, Timestamp), optional
        The analysis window: an outage whose trip falls outside it gets the verdict
        ``outside_window`` and is not analysed. An outage inside it is matched against every
        stroke within its clock tolerance, even one a few seconds past the window's edge.
    coverage : debrief.coverage.Coverage, optional
        The data's coverage: an outage whose time or line lies outside it gets
        ``outside_coverage`` (no conclusion); ``partial`` is stated in the reasons.

    Returns
    -------
    OutageMatch

    Notes
    -----
    The strokes of one ground contact are combined into one position fix
    (:mod:`debrief.contacts`) and the corridor probabilities of the verdict are the contact's:
    position from every stroke of the channel, peak current from its strongest candidate stroke
    (the zones widen with current). ``p_any`` treats contacts (not strokes) as independent. Each
    candidate row keeps its own stroke's probabilities beside the contact's (``contact_*``).

    References
    ----------
    [IEEE1410]; [Rusck1958] (see :mod:`debrief.lines`).
    """
    config, lc = _settings(config)
    if lc["possible_p"] > lc["likely_p"]:
        from .errors import InputError
        raise InputError(f"[lines] possible_p ({lc['possible_p']:g}) must not exceed likely_p ({lc['likely_p']:g})")
    notes = []
    strokes = strokes.reset_index(drop=True)
    if not lc["include_ic"] and "type" in strokes:
        use = (strokes["type"] == "CG").to_numpy(dtype=bool)
    else:
        use = np.ones(len(strokes), bool)
    t_all = _ns(strokes["time"]) if len(strokes) else np.zeros(0, np.int64)
    order = np.flatnonzero(use)
    order = order[np.argsort(t_all[order], kind="stable")]
    t_ns = t_all[order]
    lat_all = strokes["latitude"].to_numpy(float)
    lon_all = strokes["longitude"].to_numpy(float)

    outages = outages.reset_index(drop=True)
    line_pos = {lid: k for k, lid in enumerate(lines["line_id"])}
    problem = outages["problem"].fillna("").astype(str).to_numpy() if "problem" in outages else np.full(len(outages), "")
    problem = np.array([p if p or lid in line_pos else f"line {lid!r} is not among the usable lines"
                        for p, lid in zip(problem, outages["line_id"])], dtype=object)
    cov_state = np.full(len(outages), "inside" if coverage is not None else "not_checked", dtype=object)
    cov_note = np.full(len(outages), "", dtype=object)
    t_trip = pd.to_datetime(outages["time"], utc=True)
    cov_state[problem != ""] = "not_checked"  # rows that cannot be analysed say nothing of coverage
    if window is not None:
        w0, w1 = window
        out_w = ((t_trip < w0) | (t_trip > w1)).to_numpy() & (problem == "")
        problem = np.where(out_w, OUTSIDE_WINDOW, problem).astype(object)
        cov_state[out_w] = "outside"
        cov_note[out_w] = "the trip is outside the analysis window"
    if coverage is not None and len(outages):
        from .coverage import check_lines, check_span, combine

        by_line = check_lines(coverage, lines, lc["search_km"]).set_index("line_id") if len(lines) else None
        tol = outages["clock_tolerance_s"].to_numpy(float)
        tol = np.where(np.isfinite(tol), tol, lc["clock_tolerance_s"])
        for i in range(len(outages)):
            if problem[i] or pd.isna(t_trip.iloc[i]):
                continue
            a = t_trip.iloc[i] - pd.Timedelta(seconds=float(tol[i]))
            b = t_trip.iloc[i] + pd.Timedelta(seconds=float(tol[i]))
            state, note_ = check_span(coverage, a, b)
            lid = outages["line_id"].iloc[i]
            if by_line is not None and lid in by_line.index:
                ls, ln = by_line.loc[lid, "coverage"], by_line.loc[lid, "coverage_note"]
                state = combine(state, ls)
                note_ = "; ".join(x for x in (note_, ln) if x)
            cov_state[i], cov_note[i] = state, note_
            if state == "outside":
                problem[i] = OUTSIDE_COVERAGE
    good = np.flatnonzero(problem == "")
    og = outages.iloc[good].reset_index(drop=True)

    search_km = lc["search_km"]
    cand = pd.DataFrame(columns=CANDIDATE_COLUMNS)
    if len(og) and len(t_ns):
        po, ps_sorted = _candidate_pairs(t_ns, og, lc)
        ps = order[ps_sorted]
        # Spatial prefilter in degrees: the line's box or the fault point, widened by search_km
        # (longitudes modulo 360, boxes continuous across 180).
        from .io.lines import line_box_deg

        li = np.array([line_pos[lid] for lid in og["line_id"]], dtype=np.int64)
        b = np.array([line_box_deg(g) for g in lines["geometry"]]).reshape(-1, 4)
        fl_lat = og["fault_latitude"].to_numpy(float)
        fl_lon = og["fault_longitude"].to_numpy(float)
        has_fault = np.isfinite(fl_lat)
        lon_lo = np.where(has_fault, fl_lon, b[li, 0])
        lon_hi = np.where(has_fault, fl_lon, b[li, 2])
        lat_lo = np.where(has_fault, fl_lat, b[li, 1])
        lat_hi = np.where(has_fault, fl_lat, b[li, 3])
        dlat, dlon = _bbox_margin_deg(np.maximum(np.abs(lat_lo), np.abs(lat_hi)), search_km)
        slat, slon = lat_all[ps], lon_all[ps]
        keep = _in_box(slat, slon, lon_lo[po], lat_lo[po], lon_hi[po], lat_hi[po], dlat[po], dlon[po])
        po, ps = po[keep], ps[keep]
        cand = _evaluate_pairs(po, ps, og, li, lines, strokes, t_all, config, lc, has_fault)
        cand = _contact_probabilities(cand, strokes, lines, config, lc)
    for k in range(len(lines)):
        row = lines.iloc[k]
        if row.get("height_defaulted", False):
            notes.append(f"line {row['line_id']}: height {row['height_m']:g} m from [lines] default_height_m")
        if row.get("cfo_defaulted", False):
            notes.append(f"line {row['line_id']}: CFO {row['cfo_kv']:g} kV from [lines] default_cfo_kv")
    if len(cand) and (cand["location_error"] == "none").any():
        # A position without its error would read as certainty: ask, as the site check does.
        from .errors import InputError

        k = int((cand["location_error"] == "none").sum())
        raise InputError(f"{k} candidate stroke(s) have no error ellipse; set default_uncertainty_km in event.toml "
                         "or pass --default-uncertainty-km KM (circular semi-axis at ellipse_confidence)")
    verdicts = _verdicts(outages, problem, cand, lines, lc, cov_state, cov_note)
    return OutageMatch(candidates=cand, verdicts=verdicts, cautions=list(CAUTIONS), notes=notes,
                       coverage_source=coverage.source if coverage is not None else "not_checked")


def _evaluate_pairs(po, ps, og, li, lines, strokes, t_all, config, lc, has_fault):
    search_km = lc["search_km"]
    frames = []
    pair_line = li[po]
    for k in np.unique(pair_line):
        sel = np.flatnonzero(pair_line == k)
        line = lines.iloc[k]
        geo = _line_geo(line["geometry"])
        uniq, inv = np.unique(ps[sel], return_inverse=True)
        # Distances first (cheap), probabilities only for strokes that pass the search distance.
        sub = strokes.iloc[uniq]
        x, y = geo.plane.to_xy_km(sub["latitude"].to_numpy(float), sub["longitude"].to_numpy(float))
        d_line_km = shapely.distance(geo.whole, shapely.points(np.atleast_1d(x), np.atleast_1d(y)))
        o = po[sel]
        fault_km = np.full(sel.size, np.nan)
        hf = has_fault[o]
        if np.any(hf):
            fault_km[hf], _ = inverse_km(og["fault_latitude"].to_numpy(float)[o[hf]], og["fault_longitude"].to_numpy(float)[o[hf]],
                                         sub["latitude"].to_numpy(float)[inv[hf]], sub["longitude"].to_numpy(float)[inv[hf]])
        ok = np.where(hf, fault_km <= search_km, d_line_km[inv] <= search_km)
        if not np.any(ok):
            continue
        sel, inv, fault_km, o = sel[ok], inv[ok], fault_km[ok], o[ok]
        u2, inv2 = np.unique(inv, return_inverse=True)
        phys_out = stroke_line_physics(sub.iloc[u2], line, config, geo=geo)
        s_idx = uniq[u2][inv2]
        t_str = t_all[s_idx]
        t_out = _ns(og["time"])[o]
        dt_s = (t_str - t_out) / 1e9
        # Nearest logged operation (trip or reclosing) to the stroke.
        dt_op = dt_s.copy()
        op_no = np.zeros(sel.size, np.int64)
        for j in range(sel.size):
            ops = og["reclose_times"].iloc[o[j]]
            if len(ops):
                all_ops = np.concatenate([[t_out[j]], _ns(list(ops))])
                d = (t_str[j] - all_ops) / 1e9
                m = int(np.argmin(np.abs(d)))
                dt_op[j], op_no[j] = d[m], m
        f = {key: val[inv2] for key, val in phys_out.items()}
        frame = pd.DataFrame({
            "outage_pos": o, "outage_id": og["outage_id"].to_numpy()[o], "line_id": line["line_id"],
            "stroke_index": s_idx, "stroke_time": strokes["time"].iloc[s_idx].to_numpy(),
            "latitude": strokes["latitude"].to_numpy(float)[s_idx], "longitude": strokes["longitude"].to_numpy(float)[s_idx],
            "type": strokes["type"].iloc[s_idx].astype(str).to_numpy() if "type" in strokes else "CG",
            "peak_current_ka": strokes["peak_current_ka"].to_numpy(float)[s_idx],
            "flash_id": strokes["flash_id"].iloc[s_idx].to_numpy() if "flash_id" in strokes else pd.NA,
            "stroke_order": strokes["stroke_order"].iloc[s_idx].to_numpy() if "stroke_order" in strokes else pd.NA,
            "dt_s": dt_s, "dt_op_s": dt_op, "operation": op_no,
            "distance_m": f["distance_m"], "fault_distance_m": fault_km * 1000.0,
            "y_min_m": f["y_min_m"], "y_fo_m": f["y_fo_m"],
            "induced_kv": f["induced_kv"],
            "p_within_corridor": f["p_within_corridor"], "p_direct": f["p_direct"], "p_induced_fo": f["p_induced_fo"],
            "p_direct_low_current": f["p_direct_low_current"], "p_induced_fo_low_current": f["p_induced_fo_low_current"],
            "p_direct_high_current": f["p_direct_high_current"], "p_induced_fo_high_current": f["p_induced_fo_high_current"],
            "location_error": f["location_error"],
            "likely_ic": strokes["likely_ic"].iloc[s_idx].to_numpy(bool) if "likely_ic" in strokes else False,
        })
        frames.append(frame)
    if not frames:
        return pd.DataFrame(columns=["outage_pos"] + CANDIDATE_COLUMNS)
    c = pd.concat(frames, ignore_index=True)
    d = c["distance_m"].to_numpy()
    c["mechanism_at_position"] = np.where(d < c["y_min_m"], "direct", np.where(d < c["y_fo_m"], "induced", "none"))
    c["_abs_dt"] = c["dt_op_s"].abs()
    # Rank on probabilities rounded to 1e-6 so that differences at rounding level (far strokes,
    # p ~ 1e-16) do not outrank time and distance.
    c["_p"] = c["p_within_corridor"].round(6)
    c = c.sort_values(["outage_pos", "_p", "_abs_dt", "distance_m"],
                      ascending=[True, False, True, True], kind="stable")
    c["rank"] = c.groupby("outage_pos").cumcount() + 1
    c["stroke_time"] = pd.to_datetime(c["stroke_time"], utc=True).astype("datetime64[ns, UTC]")
    return c.drop(columns=["_abs_dt", "_p"]).reset_index(drop=True)


_CONTACT_P = ("p_within_corridor", "p_direct", "p_induced_fo", "p_direct_low_current", "p_induced_fo_low_current",
              "p_direct_high_current", "p_induced_fo_high_current")


def _contact_probabilities(c: pd.DataFrame, strokes: pd.DataFrame, lines: pd.DataFrame, config, lc) -> pd.DataFrame:
    """Add the ground contact's corridor probabilities to every candidate row and rank on them.

    The strokes of one contact are combined into one fix (:func:`debrief.contacts.contact_fixes`,
    every ground stroke of the file, likely cloud pulses included as they are candidates too);
    its current is that of the contact's strongest candidate stroke.
    Rows without a contact (cloud pulses, ungrouped input) keep their stroke's own figures.
    """
    from .contacts import contact_fixes

    if not len(c):
        return c
    for col in _CONTACT_P:
        c["contact_" + col] = c[col].to_numpy(float)
    c["contact_distance_m"] = c["distance_m"].to_numpy(float)
    c["contact_n_strokes"] = 1
    c["ground_contact"] = (strokes["ground_contact"].to_numpy(np.int64)[c["stroke_index"].to_numpy()]
                           if "ground_contact" in strokes else 0)
    have = c["ground_contact"].to_numpy() > 0
    if np.any(have):
        # Only the candidates' contacts (all their strokes), not every contact of the file.
        fid_all = strokes["flash_id"].to_numpy(np.int64)
        mine = np.isin(fid_all, pd.to_numeric(c["flash_id"].to_numpy()[have]).astype(np.int64))
        contacts = contact_fixes(strokes[mine], config, include_likely_ic=True)
        key = contacts["flash_id"].to_numpy(np.int64) * (1 << 20) + contacts["ground_contact"].to_numpy(np.int64)
        pos_of = pd.Series(np.arange(len(contacts)), index=key)
        rows = np.flatnonzero(have)
        ck = pd.to_numeric(c["flash_id"].to_numpy()[rows]).astype(np.int64) * (1 << 20) + c["ground_contact"].to_numpy()[rows]
        cpos = pos_of.reindex(ck).to_numpy()
        ok = np.isfinite(cpos)
        rows, cpos = rows[ok], cpos[ok].astype(np.int64)
        # One evaluation per (outage, contact) at the contact's strongest candidate stroke: the
        # zones widen with current, so the channel lies in some stroke's zone exactly when it
        # lies in the strongest one's.
        sub = pd.DataFrame({"row": rows, "o": c["outage_pos"].to_numpy()[rows], "k": cpos,
                            "i": -np.abs(c["peak_current_ka"].to_numpy(float)[rows]),
                            "a": np.abs(c["dt_op_s"].to_numpy(float)[rows])})
        pick = sub.sort_values(["o", "k", "i", "a", "row"], kind="stable").groupby(["o", "k"], sort=False).head(1)
        fx = contacts.iloc[pick["k"].to_numpy()]
        pseudo = pd.DataFrame({
            "latitude": fx["latitude"].to_numpy(), "longitude": fx["longitude"].to_numpy(),
            "peak_current_ka": c["peak_current_ka"].to_numpy(float)[pick["row"].to_numpy()],
            "semi_major_km": fx["semi_major_km"].to_numpy(), "semi_minor_km": fx["semi_minor_km"].to_numpy(),
            "major_bearing_deg": fx["major_bearing_deg"].to_numpy(),
        })
        line_of = c["line_id"].to_numpy()[pick["row"].to_numpy()]
        vals = {col: np.full(len(pick), np.nan) for col in _CONTACT_P + ("distance_m",)}
        for lid in pd.unique(line_of):
            m = np.flatnonzero(line_of == lid)
            line = lines[lines["line_id"] == lid].iloc[0]
            res = stroke_line_physics(pseudo.iloc[m], line, config)
            for col in vals:
                vals[col][m] = res[col]
        g = pd.DataFrame({"o": pick["o"].to_numpy(), "k": pick["k"].to_numpy(),
                          "n": fx["n_strokes"].to_numpy(), **vals})
        merged = sub.merge(g, on=["o", "k"], how="left")
        r = merged["row"].to_numpy()
        for col in _CONTACT_P:
            c.loc[r, "contact_" + col] = merged[col].to_numpy()
        c.loc[r, "contact_distance_m"] = merged["distance_m"].to_numpy()
        c.loc[r, "contact_n_strokes"] = merged["n"].to_numpy()
    # Rank by the contact's probability, then within a contact by the stroke's own.
    c["_abs_dt"] = c["dt_op_s"].abs()
    c["_p"] = c["contact_p_within_corridor"].round(6)
    c["_ps"] = c["p_within_corridor"].round(6)
    c = c.sort_values(["outage_pos", "_p", "_ps", "_abs_dt", "distance_m"], ascending=[True, False, False, True, True],
                      kind="stable")
    c["rank"] = c.groupby("outage_pos").cumcount() + 1
    return c.drop(columns=["_abs_dt", "_p", "_ps"]).reset_index(drop=True)[["outage_pos"] + CANDIDATE_COLUMNS]


def classify(p_direct, p_induced_fo, has_candidate, *, likely_p=0.5, possible_p=0.1):
    """Verdict codes from the best candidate's probabilities (vectorised; see :data:`VERDICTS`)."""
    pdir = np.asarray(p_direct, float)
    pind = np.asarray(p_induced_fo, float)
    tot = pdir + pind
    has = np.asarray(has_candidate, bool)
    return np.select(
        [~has, pdir >= likely_p, pind >= likely_p, (tot >= possible_p) & (pdir >= pind), tot >= possible_p],
        ["no_lightning_in_tolerance", "direct_strike_likely", "induced_flashover_likely",
         "direct_strike_possible", "induced_flashover_possible"],
        "lightning_nearby_unlikely_cause").astype(object)


def _best_at(cand, sfx):
    """Per outage position: (p_direct, p_induced_fo) of the best contact at a current factor."""
    tot = (cand["contact_p_direct" + sfx] + cand["contact_p_induced_fo" + sfx]).round(6)
    tmp = pd.DataFrame({"o": cand["outage_pos"], "t": tot, "a": cand["dt_op_s"].abs(), "d": cand["distance_m"],
                        "pd": cand["contact_p_direct" + sfx], "pi": cand["contact_p_induced_fo" + sfx]})
    tmp = tmp.sort_values(["o", "t", "a", "d"], ascending=[True, False, True, True], kind="stable")
    return tmp.groupby("o").first()[["pd", "pi"]]


def _verdicts(outages, problem, cand, lines, lc, cov_state=None, cov_note=None):
    likely, possible = lc["likely_p"], lc["possible_p"]
    good = np.flatnonzero(problem == "")
    n_good = len(good)
    best = cand[cand["rank"] == 1].set_index("outage_pos") if len(cand) else pd.DataFrame()
    has = np.zeros(n_good, bool)
    pdir, pind = np.zeros(n_good), np.zeros(n_good)
    if len(best):
        pos = best.index.to_numpy()
        has[pos] = True
        pdir[pos] = best["contact_p_direct"].to_numpy(float)
        pind[pos] = best["contact_p_induced_fo"].to_numpy(float)
    verdict = classify(pdir, pind, has, likely_p=likely, possible_p=possible)
    alt = {}
    for sfx in ("_low_current", "_high_current"):
        a, b_ = np.zeros(n_good), np.zeros(n_good)
        if len(cand):
            bb = _best_at(cand, sfx)
            a[bb.index.to_numpy()] = bb["pd"].to_numpy(float)
            b_[bb.index.to_numpy()] = bb["pi"].to_numpy(float)
        alt[sfx] = classify(a, b_, has, likely_p=likely, possible_p=possible)
    p_any = np.zeros(n_good)
    n_c = np.zeros(n_good, np.int64)
    n_k = np.zeros(n_good, np.int64)
    if len(cand):
        g = cand.groupby("outage_pos")
        n_c[g.size().index.to_numpy()] = g.size().to_numpy()
        # Contacts, not strokes, are the independent events: one probability per contact.
        fid = pd.to_numeric(cand["flash_id"], errors="coerce").fillna(-1).to_numpy(np.int64)
        gc = cand["ground_contact"].to_numpy(np.int64)
        solo = gc <= 0  # no contact: the stroke is its own event
        key = np.where(solo, -(cand["stroke_index"].to_numpy(np.int64) + 1), fid * (1 << 20) + gc)
        per = pd.DataFrame({"o": cand["outage_pos"].to_numpy(), "k": key,
                            "p": cand["contact_p_within_corridor"].to_numpy(float)}).drop_duplicates(["o", "k"])
        with np.errstate(divide="ignore"):
            per["l"] = np.log1p(-np.clip(per["p"].to_numpy(), 0.0, 1.0))
        agg = per.groupby("o").agg(l=("l", "sum"), n=("k", "size"))
        p_any[agg.index.to_numpy()] = 0.0 - np.expm1(agg["l"].to_numpy())
        n_k[agg.index.to_numpy()] = agg["n"].to_numpy()
    rows = []
    gi = {int(k): j for j, k in enumerate(good)}
    best_rec = best.to_dict("index") if len(best) else {}
    shielded = dict(zip(lines["line_id"], lines["shielded"])) if len(lines) else {}
    for i, o in enumerate(outages.to_dict("records")):
        tol = o["clock_tolerance_s"] if np.isfinite(o["clock_tolerance_s"]) else lc["clock_tolerance_s"]
        base = {"outage_id": o["outage_id"], "line_id": o["line_id"], "time": o["time"], "device": o.get("device", ""),
                "clock_tolerance_s": tol,
                "coverage": cov_state[i] if cov_state is not None else "not_checked",
                "coverage_note": cov_note[i] if cov_note is not None else ""}
        if problem[i] in (OUTSIDE_WINDOW, OUTSIDE_COVERAGE):
            why = (f"the trip at {iso_utc(o['time'])} is outside the analysis window; analyse a window that holds it"
                   if problem[i] == OUTSIDE_WINDOW else
                   f"outside the data's coverage ({base['coverage_note']}): the stroke data cannot say whether "
                   "lightning was involved")
            rows.append(base | {"verdict": problem[i], "reasons": why, "n_candidates": 0, "n_contacts": 0,
                                "p_any": np.nan, "verdict_low_current": problem[i],
                                "verdict_high_current": problem[i], "current_sensitive": False})
            continue
        if problem[i]:
            rows.append(base | {"verdict": "not_analysed", "reasons": f"not analysed: {problem[i]}", "n_candidates": 0,
                                "n_contacts": 0, "p_any": np.nan, "verdict_low_current": "not_analysed",
                                "verdict_high_current": "not_analysed", "current_sensitive": False})
            continue
        j = gi[i]
        v = verdict[j]
        reasons = []
        if has[j]:
            bc = best_rec[j]
            reasons.append(_stroke_sentence(bc, tol))
            ymin, yfo = float(bc["y_min_m"]), float(bc["y_fo_m"])
            zone_text = (f"direct-strike zone within {ymin:.0f} m, induced-flashover band {ymin:.0f}-{yfo:.0f} m"
                         if yfo > ymin else
                         f"direct-strike zone within {ymin:.0f} m; no induced flashover beyond it (1.5 CFO reached only within {yfo:.0f} m)")
            k_str = int(bc["contact_n_strokes"])
            how = (f"the {k_str} strokes of its ground contact combined into one position fix, "
                   f"{bc['contact_distance_m']:.0f} m from the line" if k_str > 1 else "a single-stroke contact")
            reasons.append(f"P(direct strike) {bc['contact_p_direct']:.2f}, P(induced flashover) "
                           f"{bc['contact_p_induced_fo']:.2f} at {abs(bc['peak_current_ka']):.0f} kA ({how}; {zone_text})")
            if n_k[j] > 1:
                reasons.append(f"{n_c[j]} candidate strokes in {n_k[j]} ground contacts; taking contacts as independent, "
                               f"P(at least one in the corridor) {p_any[j]:.2f}")
            if bc["location_error"] == "none":
                reasons.append("the stroke has no error ellipse: judged on its reported position alone")
            elif bc["location_error"] == "default":
                reasons.append("the stroke has no error ellipse: default_uncertainty_km used")
            if bool(bc["likely_ic"]):
                reasons.append("the stroke may be a cloud pulse (positive, low peak current)")
        else:
            where = "the fault location" if np.isfinite(o["fault_latitude"]) else "the line"
            reasons.append(f"no ground stroke within ±{tol:g} s of the logged operations and {lc['search_km']:g} km of {where}")
        ops = o.get("reclose_times") or ()
        if len(ops):
            last_s = (pd.Timestamp(max(ops)) - o["time"]).total_seconds()
            reasons.append(f"reclosing sequence: {len(ops)} later operation(s), the last {last_s:.2f} s after the trip; "
                           "strokes up to the last operation plus the tolerance were considered")
        lo_v, hi_v = alt["_low_current"][j], alt["_high_current"][j]
        sensitive = bool(lo_v != v or hi_v != v)
        if has[j]:
            if sensitive:
                reasons.append(f"sensitive to the peak-current estimate: {lo_v} at 0.7 I, {hi_v} at 1.3 I")
            else:
                reasons.append("unchanged for a peak current 30% lower or higher")
        if bool(shielded.get(o["line_id"], False)):
            reasons.append("the line is marked shielded; shielding is not modelled")
        if base["coverage"] == "partial":
            reasons.append(f"the data cover this outage only in part ({base['coverage_note']})"
                           + ("; a stroke in the uncovered part would not be seen" if not has[j] else ""))
        rec = base | {"verdict": v, "reasons": "; ".join(reasons), "n_candidates": int(n_c[j]),
                      "n_contacts": int(n_k[j]), "p_any": p_any[j],
                      "verdict_low_current": lo_v, "verdict_high_current": hi_v, "current_sensitive": sensitive}
        for col in _BEST:
            src = "contact_" + col if col in ("p_within_corridor", "p_direct", "p_induced_fo") else col
            rec["best_" + col] = best_rec[j][src] if has[j] else (pd.NaT if col == "stroke_time" else np.nan)
        rows.append(rec)
    out = pd.DataFrame(rows, columns=VERDICT_COLUMNS)
    out["time"] = pd.to_datetime(out["time"], utc=True).astype("datetime64[ns, UTC]")
    out["best_stroke_time"] = pd.to_datetime(out["best_stroke_time"], utc=True).astype("datetime64[ns, UTC]")
    return out


def _stroke_sentence(bc, tol):
    dt = float(bc["dt_s"])
    when = f"{abs(dt):.2f} s {'before' if dt < 0 else 'after'} the logged trip"
    if int(bc["operation"]) > 0:
        when += f" ({abs(bc['dt_op_s']):.2f} s from reclosing operation {int(bc['operation'])})"
    s = (f"stroke at {iso_utc(bc['stroke_time'])}, {bc['peak_current_ka']:+.1f} kA, {when}, "
         f"{bc['distance_m']:.0f} m from the line (reported position)")
    if abs(float(bc["dt_op_s"])) > 1.0:
        s += f"; more than 1 s from any logged operation, so the link rests on the ±{tol:g} s clock tolerance"
    elif dt > 0.5:
        s += "; after the trip, which fits only if the log's clock is early"
    return s


EXPOSURE_COLUMNS = ["line_id", "name", "length_km", "height_m", "cfo_kv", "strokes_within_search",
                    "strokes_in_corridor", "expected_in_corridor", "max_p_within_corridor", "max_p_direct",
                    "direct_strikes_per_100km_yr", "expected_direct_strikes_per_yr", "ground_flash_density_source"]


def line_exposure(strokes: pd.DataFrame, lines: pd.DataFrame, config=None) -> pd.DataFrame:
    """Per line: strokes during the given period that could have flashed it over.

    Parameters
    ----------
    strokes : DataFrame
        Stroke table for the period of interest (e.g. the event window); CG only unless
        ``[lines] include_ic``.
    lines : DataFrame
        :func:`debrief.io.lines.read_lines` output.
    config : EventConfig, optional

    Returns
    -------
    DataFrame
        ``line_id``, ``name``, ``length_km``, ``height_m``, ``cfo_kv``, ``strokes_within_search``
        (within ``search_km``), ``strokes_in_corridor`` (reported position inside the flashover
        corridor max(y_min, y_fo) at the stroke's current), ``expected_in_corridor`` (sum of
        ``p_within_corridor``), ``max_p_within_corridor``, ``max_p_direct``,
        ``direct_strikes_per_100km_yr`` and ``expected_direct_strikes_per_yr`` (Eriksson 1987
        from ``ground_flash_density``; NaN when it is not set), ``ground_flash_density_source``.

    References
    ----------
    [Eriksson1987]; [IEEE1410] (from memory).
    """
    config, lc = _settings(config)
    strokes = strokes.reset_index(drop=True)
    if not lc["include_ic"] and "type" in strokes:
        strokes = strokes[(strokes["type"] == "CG").to_numpy(dtype=bool)].reset_index(drop=True)
    lat, lon = strokes["latitude"].to_numpy(float), strokes["longitude"].to_numpy(float)
    ng = lc["ground_flash_density"]
    rows = []
    for _, line in lines.iterrows():
        geo = _line_geo(line["geometry"])
        lon_lo, lat_lo, lon_hi, lat_hi = geo.bounds_deg
        dlat, dlon = _bbox_margin_deg(max(abs(lat_lo), abs(lat_hi)), lc["search_km"])
        m = np.flatnonzero(_in_box(lat, lon, lon_lo, lat_lo, lon_hi, lat_hi, dlat, dlon))
        x, y = geo.plane.to_xy_km(lat[m], lon[m])
        d = shapely.distance(geo.whole, shapely.points(np.atleast_1d(x), np.atleast_1d(y))) if m.size else np.zeros(0)
        m = m[d <= lc["search_km"]]
        res = stroke_line_physics(strokes.iloc[m], line, config, geo=geo, factors=(1.0,)) if m.size else None
        n_corr = int(np.sum(res["distance_m"] < np.maximum(res["y_min_m"], res["y_fo_m"]))) if res else 0
        n100 = float(phys.direct_strikes_per_100km_yr(ng, line["height_m"], line["spacing_m"])) if ng is not None else np.nan
        rows.append({
            "line_id": line["line_id"], "name": line["name"], "length_km": line["length_km"],
            "height_m": line["height_m"], "cfo_kv": line["cfo_kv"], "strokes_within_search": int(m.size),
            "strokes_in_corridor": n_corr,
            "expected_in_corridor": float(res["p_within_corridor"].sum()) if res else 0.0,
            "max_p_within_corridor": float(res["p_within_corridor"].max()) if res else 0.0,
            "max_p_direct": float(res["p_direct"].max()) if res else 0.0,
            "direct_strikes_per_100km_yr": n100,
            "expected_direct_strikes_per_yr": n100 * line["length_km"] / 100.0,
            "ground_flash_density_source": lc["ground_flash_density_source"] or "",
        })
    return pd.DataFrame(rows, columns=EXPOSURE_COLUMNS)


def matches_table(result: OutageMatch) -> pd.DataFrame:
    """The CSV view: one row per (outage, candidate), best first; outages without candidates once.

    Times as ISO 8601 UTC text with ``Z``.
    """
    v = result.verdicts
    c = result.candidates
    keep = ["outage_id", "verdict", "rank", "stroke_time", "dt_s", "dt_op_s", "distance_m", "p_within_corridor",
            "p_direct", "p_induced_fo", "peak_current_ka", "induced_kv", "y_min_m", "y_fo_m", "type", "latitude",
            "longitude", "flash_id", "stroke_order", "fault_distance_m", "mechanism_at_position", "location_error",
            "p_direct_low_current", "p_induced_fo_low_current", "p_direct_high_current", "p_induced_fo_high_current"]
    vv = v[["outage_id", "line_id", "time", "verdict", "verdict_low_current", "verdict_high_current", "current_sensitive",
            "coverage", "n_contacts", "p_any", "reasons"]]
    cc = c.drop(columns=["line_id", "outage_pos"], errors="ignore")
    merged = vv.merge(cc, on="outage_id", how="left", sort=False)
    merged = merged.rename(columns={"time": "outage_time"})
    for c in ("rank", "flash_id", "stroke_order"):
        merged[c] = pd.to_numeric(merged[c]).astype("Int64")
    merged["stroke_time"] = [iso_utc(t) if pd.notna(t) else "" for t in merged["stroke_time"]]
    merged["outage_time"] = [iso_utc(t) if pd.notna(t) else "" for t in merged["outage_time"]]
    # Rounded for the record: cm for distances, 1e-6 for probabilities and seconds.
    for c in merged.columns:
        if c.endswith("_m"):
            merged[c] = merged[c].astype(float).round(2)
        elif c.startswith("p_") or c.endswith("_s"):
            merged[c] = merged[c].astype(float).round(6)
    merged["induced_kv"] = merged["induced_kv"].astype(float).round(3)
    cols = ["outage_id", "line_id", "outage_time"] + [k for k in keep if k != "outage_id"] + \
           [k for k in merged.columns if k.startswith("contact_")] + \
           ["verdict_low_current", "verdict_high_current", "current_sensitive", "coverage", "n_contacts", "p_any", "reasons"]
    return merged[cols]


def verdict_records(result: OutageMatch) -> list[dict]:
    """One JSON-ready dict per outage: id, verdict, reasons, best candidate (or None)."""
    out = []
    for _, r in result.verdicts.iterrows():
        best = None
        if pd.notna(r.get("best_stroke_time", pd.NaT)):
            best = {"stroke_time": iso_utc(r["best_stroke_time"]), "peak_current_ka": _num(r["best_peak_current_ka"]),
                    "dt_s": _num(r["best_dt_s"]), "distance_m": _num(r["best_distance_m"]),
                    "p_within_corridor": _num(r["best_p_within_corridor"]), "p_direct": _num(r["best_p_direct"]),
                    "p_induced_fo": _num(r["best_p_induced_fo"]), "induced_kv": _num(r["best_induced_kv"]),
                    "latitude": _num(r["best_latitude"]), "longitude": _num(r["best_longitude"])}
        out.append({"outage_id": r["outage_id"], "line_id": r["line_id"],
                    "time": iso_utc(r["time"]) if pd.notna(r["time"]) else None, "verdict": r["verdict"],
                    "reasons": r["reasons"], "current_sensitive": bool(r["current_sensitive"]),
                    "verdict_low_current": r["verdict_low_current"], "verdict_high_current": r["verdict_high_current"],
                    "n_candidates": int(r["n_candidates"]), "n_contacts": int(r["n_contacts"]),
                    "p_any": _num(r["p_any"]), "coverage": r["coverage"], "coverage_note": r["coverage_note"],
                    "coverage_source": result.coverage_source,
                    "best_candidate": best})
    return out


def verdict_table_markdown() -> str:
    """The verdict codes, their rules and meanings as a Markdown table (docs, reports)."""
    rows = ["| verdict | rule (best candidate) | meaning |", "|---|---|---|"]
    rows += [f"| `{code}` | {rule} | {meaning} |" for code, (rule, meaning) in VERDICTS.items()]
    return "\n".join(rows) + "\n"


def _num(v):
    v = float(v)
    return None if not np.isfinite(v) else round(v, 6)


def _polygon_lonlat(geo: _LineGeo, poly) -> dict:
    """GeoJSON geometry of a polygon in the line's plane (km), back in lon/lat rounded to 1e-7 deg.

    Split at the antimeridian as RFC 7946 section 3.1.9 asks: the polygon is taken back with
    longitudes continuous about the plane's centre, cut at +-180 and the pieces beyond shifted by
    360 degrees, so every longitude is in [-180, 180] and a corridor across 180 is a MultiPolygon
    with parts on each side. Exterior rings counter-clockwise (RFC 7946 section 3.1.6). Not for
    polygons around a pole.
    """
    def tr(xy):
        lat, lon = geo.plane.to_latlon(xy[:, 0], xy[:, 1])
        return np.column_stack([lon_near_deg(lon, geo.plane.lon0_deg), lat])

    g = shapely.transform(poly, tr)
    lon_lo, _, lon_hi, _ = g.bounds
    pieces = [g]
    if lon_lo < -180.0 or lon_hi > 180.0:
        pieces = []
        for shift in (-360.0, 0.0, 360.0):  # the piece in [-180 - shift, 180 - shift], moved by shift
            cut = shapely.intersection(g, shapely.box(-180.0 - shift, -90.0, 180.0 - shift, 90.0))
            pieces.append(shapely.transform(cut, lambda xy, s=shift: xy + np.array([s, 0.0])))
    polys = [q for piece in pieces for q in shapely.get_parts(piece) if isinstance(q, shapely.Polygon) and not q.is_empty]
    polys = [shapely.transform(shapely.geometry.polygon.orient(q, 1.0), lambda xy: np.round(xy, 7)) for q in polys]
    # a sliver beyond 180 narrower than the rounding (an edge just touching it) is dropped
    polys = [q for q in polys if q.area > 0.0] or polys[:1]
    return shapely.geometry.mapping(polys[0] if len(polys) == 1 else shapely.MultiPolygon(polys))


def _corridor_feature(geo: _LineGeo, half_width_km: float) -> dict:
    """The buffer of a line by `half_width_km` in its plane, as a GeoJSON geometry."""
    return _polygon_lonlat(geo, shapely.buffer(geo.whole, float(half_width_km), quad_segs=16))


def corridor_geojson(lines: pd.DataFrame, half_width_km: float) -> dict:
    """Each line's corridor, every point within `half_width_km` of the line, as GeoJSON (RFC 7946).

    The corridor is the buffer of the line (round ends, 16 segments per quarter circle) in the
    line's local azimuthal equidistant plane (:class:`debrief.geodesy.LocalPlane` about the middle
    of its extent, parts cut at the antimeridian joined), taken back to longitude/latitude and
    rounded to 1e-7 degrees (about 1 cm). A corridor across 180 degrees is split there into a
    MultiPolygon with longitudes in [-180, 180] (RFC 7946 section 3.1.9); exterior rings run
    counter-clockwise.

    Parameters
    ----------
    lines : DataFrame
        As :func:`debrief.io.lines.read_lines` returns it: ``line_id``, ``geometry`` (shapely
        (Multi)LineString, lon/lat) and optionally ``name``.
    half_width_km : float
        Distance from the line to the corridor's edge, km (e.g. ``[lines] search_km``).

    Returns
    -------
    dict
        A FeatureCollection, one Polygon (or MultiPolygon) feature per line, in the order of
        `lines`, with properties ``line_id``, ``name`` and ``half_width_m``.
    """
    feats = []
    if lines is None:
        return {"type": "FeatureCollection", "features": feats}
    for _, row in lines.iterrows():
        geo = _line_geo(row["geometry"])
        name = row.get("name")
        name = str(row["line_id"]) if name is None or pd.isna(name) else str(name)
        feats.append({"type": "Feature", "geometry": _corridor_feature(geo, half_width_km),
                      "properties": {"line_id": row["line_id"], "name": name,
                                     "half_width_m": float(half_width_km) * 1000.0}})
    return {"type": "FeatureCollection", "features": feats}


def to_geojson(result: OutageMatch, lines: pd.DataFrame, config=None) -> dict:
    """Corridors and candidates as a GeoJSON FeatureCollection (RFC 7946, WGS84).

    Features: per line its search corridor (``kind`` ``search_corridor``, buffer of
    ``search_km``, from :func:`corridor_geojson`); per outage with a candidate, the line's
    flashover corridor at the best candidate's current (``flashover_corridor``, buffer of
    max(y_min, y_fo)); every candidate stroke as a point (``candidate_stroke``) with its
    probabilities and rank.
    """
    config, lc = _settings(config)
    feats = []
    geos = {row["line_id"]: _line_geo(row["geometry"]) for _, row in lines.iterrows()}
    for f in corridor_geojson(lines, lc["search_km"])["features"]:
        p = f["properties"]
        feats.append({"type": "Feature", "geometry": f["geometry"],
                      "properties": {"kind": "search_corridor", "line_id": p["line_id"], "half_width_m": p["half_width_m"]}})
    v = result.verdicts
    for _, r in v.iterrows():
        if r["line_id"] not in geos or not pd.notna(r.get("best_stroke_time", pd.NaT)):
            continue
        c = result.candidates
        bc = c[(c["outage_id"] == r["outage_id"]) & (c["rank"] == 1)].iloc[0]
        w_m = max(bc["y_min_m"], bc["y_fo_m"])
        geo = geos[r["line_id"]]
        feats.append({"type": "Feature", "geometry": _corridor_feature(geo, w_m / 1000.0),
                      "properties": {"kind": "flashover_corridor", "outage_id": r["outage_id"], "line_id": r["line_id"],
                                     "half_width_m": round(float(w_m), 2), "y_min_m": round(float(bc["y_min_m"]), 2),
                                     "peak_current_ka": float(bc["peak_current_ka"]), "verdict": r["verdict"]}})
    for _, c in result.candidates.iterrows():
        feats.append({"type": "Feature",
                      "geometry": {"type": "Point", "coordinates": [round(float(c["longitude"]), 7), round(float(c["latitude"]), 7)]},
                      "properties": {"kind": "candidate_stroke", "outage_id": c["outage_id"], "line_id": c["line_id"],
                                     "rank": int(c["rank"]), "stroke_time": iso_utc(c["stroke_time"]),
                                     "peak_current_ka": float(c["peak_current_ka"]), "dt_s": round(float(c["dt_s"]), 6),
                                     "distance_m": round(float(c["distance_m"]), 2),
                                     "p_within_corridor": round(float(c["p_within_corridor"]), 6),
                                     "p_direct": round(float(c["p_direct"]), 6),
                                     "p_induced_fo": round(float(c["p_induced_fo"]), 6)}})
    return {"type": "FeatureCollection", "features": feats}

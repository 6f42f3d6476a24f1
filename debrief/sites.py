"""Did lightning strike near a site? Candidates, probabilities, and a sentence a letter can quote.

For a site (a point with a radius, optionally a parcel outline) and a time window, every stroke
whose error ellipse could reach the circle is a candidate: its reported position is within
``radius + reach`` of the site, where ``reach`` is the distance beyond which its true position
lies with probability below 1e-6 (:func:`debrief.uncertainty.reach_km`, from the stroke's own
ellipse, not a fixed guess). Each candidate gets its geodesic distance and bearing from the site
and ``p_within``, the probability under the bivariate-normal error model that its true point lies
within the radius.

Summary probability: the strokes of one ground contact ``(flash_id, ground_contact)`` share one
channel, so their reported positions are repeated measurements of one point. They are combined
into one fix by inverse-covariance weighting (:mod:`debrief.contacts`; flat prior, errors taken
as independent between strokes), and ``p_within`` of that fix is the contact's probability.
``p_any_within`` is the probability that at least one ground contact terminated within the
radius, treating different contacts as independent: ``1 - prod(1 - p_contact)``;
``max_p_within`` is the largest contact probability. Only ground strokes count (low-amplitude
positives flagged ``likely_ic`` are left out unless asked, and the answer says what was set
aside). Each candidate stroke keeps its own ``p_within`` in the candidate table.

Coverage: with a :class:`debrief.coverage.Coverage`, every answer states whether the data cover
the site's circle and period (``inside``/``partial``/``outside``). Outside, the answer is "no
conclusion", with no probability and no unrecorded-flash chance.

When nothing is found the network may still have missed a flash. With flash detection
efficiency DE, the expected number of unrecorded ground flashes in the circle is
``lambda = rho * A * (1 - DE) / DE`` with ``rho`` the density of recorded ground flashes in an
annulus about the site (from the radius out to 10 km) during the window and ``A`` the circle's
area; the chance of at least one is ``1 - exp(-lambda)`` (Poisson). An upper bound is stated beside it,
from the exact one-sided 95 % Poisson limit of the ring's count ([Garwood1936]); with no flash
recorded in the ring only that bound is stated ([Hanley1983]: about 3 / area at 95 %).

Planar offsets are azimuthal equidistant about the site (``dx = d sin(az)``, ``dy = d cos(az)``
from the WGS84 geodesic), the same plane as :class:`debrief.geodesy.LocalPlane`.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [CumminsMurphy2009] Detection efficiency and location error (from memory).
.. [Karney2013] Geodesics on the WGS84 ellipsoid.
.. [BarShalom2001] Combining the strokes of one contact into one fix (via debrief.contacts).
.. [Garwood1936] Exact Poisson limits: the upper bound of the unrecorded-flash chance.
.. [Hanley1983] The rule of three: with nothing recorded, about 3 events bound the mean at 95 %.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numba import njit
from scipy.spatial import cKDTree

from .errors import InputError
from .geodesy import MEAN_EARTH_RADIUS_KM, LocalPlane, haversine_km, inverse_km
from .timeutil import iso_utc, zone
from .uncertainty import ellipse_outline_xy, p_within_circle, p_within_polygon, reach_km, stroke_covariance

#: Probability left out by the candidate search (per stroke).
SEARCH_TAIL = 1e-6
#: Outer radius of the annulus whose recorded ground-flash density sets the residual chance, km.
DENSITY_RING_KM = 10.0
#: Radius of the neighbourhood whose nearest ground stroke and largest |peak current| every
#: answer states, even when nothing falls within the site's radius, km (a setting of ours).
CONTEXT_KM = 10.0
#: One-sided confidence of the stated upper bound of the unrecorded-flash chance.
RESIDUAL_UPPER_CONFIDENCE = 0.95

CAUTIONS = [
    "Lightning location networks miss some strokes and mislocate others; the network's detection "
    "efficiency and location error apply to every figure here.",
    "The probabilities model the network's reported location error as a bivariate normal "
    "distribution; they are a model of that error, not proof that lightning did or did not strike.",
    "The absence of a recorded stroke does not prove that none struck.",
    "Surges can reach a building through connected power, telephone and data lines from strokes "
    "well beyond the radius.",
    "Damage needs inspection by qualified people; local codes and licensed practice govern any "
    "conclusion drawn from this record.",
]

_NEEDED = ("time", "latitude", "longitude", "peak_current_ka", "type", "flash_id", "ground_contact", "likely_ic")
_COMPASS = ("N", "NE", "E", "SE", "S", "SW", "W", "NW")


@dataclass
class SiteResult:
    """The check of one site.

    Attributes
    ----------
    name : str
    candidates : DataFrame
        One row per candidate stroke (see :func:`check_site`), each with its own ``p_within``.
    summary : dict
        ``n_candidates``, ``n_ground_within``, ``nearest_km``, ``max_p_within``, ``p_any_within``,
        ``n_contacts``, the site, radius and window, and parcel figures when a parcel was given.
    sentence : str
        Plain text for a claim letter.
    residual : dict or None
        Inputs and result of the unrecorded-flash chance, None without a detection efficiency.
    contacts : DataFrame
        One row per candidate ground contact: the combined fix of its strokes and its
        ``p_within`` (what ``p_any_within`` and ``max_p_within`` are made of).
    cautions : list of str
    """

    name: str
    candidates: pd.DataFrame
    summary: dict
    sentence: str
    residual: dict | None
    contacts: pd.DataFrame | None = None
    cautions: list = field(default_factory=lambda: list(CAUTIONS))

    def to_dict(self) -> dict:
        """Summary, sentence, residual and cautions as JSON-ready values."""
        return {**_jsonable(self.summary), "sentence": self.sentence,
                "residual": _jsonable(self.residual) if self.residual else None, "cautions": list(self.cautions)}


def _jsonable(d: dict) -> dict:
    out = {}
    for k, v in d.items():
        if v is pd.NaT:
            out[k] = None
        elif isinstance(v, pd.Timestamp):
            out[k] = iso_utc(v) if v is not pd.NaT else None
        elif isinstance(v, (np.floating, float)):
            out[k] = None if not math.isfinite(float(v)) else float(v)
        elif isinstance(v, np.integer):
            out[k] = int(v)
        elif isinstance(v, np.bool_):
            out[k] = bool(v)
        else:
            out[k] = v
    return out


def _unit_vectors(lat_deg, lon_deg):
    lat = np.radians(np.asarray(lat_deg, dtype=float))
    lon = np.radians(np.asarray(lon_deg, dtype=float))
    c = np.cos(lat)
    return np.column_stack([c * np.cos(lon), c * np.sin(lon), np.sin(lat)])


def _chord(search_km):
    # Geodesic vs great-circle on the mean sphere differ by < 0.6 %; 1 % + 50 m keeps the
    # sphere search a superset of the exact geodesic test that follows.
    ang = np.minimum((np.asarray(search_km, dtype=float) * 1.01 + 0.05) / MEAN_EARTH_RADIUS_KM, math.pi)
    return 2.0 * np.sin(ang / 2.0)


class StrokeIndex:
    """A grouped stroke table prepared for repeated site queries (a k-d tree on unit vectors).

    Unit vectors on the sphere make the search indifferent to the antimeridian and the poles.
    Build once, query many sites; the build is the costly part.

    Parameters
    ----------
    strokes : DataFrame
        Grouped stroke table (DEVELOPERS.md: with ``flash_id``, ``ground_contact``,
        ``likely_ic``).
    config : EventConfig, optional
        ``ellipse_confidence`` and ``default_uncertainty_km``.
    """

    def __init__(self, strokes: pd.DataFrame, config=None):
        missing = [c for c in _NEEDED if c not in strokes.columns]
        if missing:
            raise InputError(
                f"the stroke table lacks {', '.join(missing)}: group the strokes into flashes first "
                "(debrief.flashes.group_flashes)")
        self.strokes = strokes
        self.config = config
        self.confidence = config.get("ellipse_confidence") if config is not None else 0.5
        self.default_km = config.get("default_uncertainty_km") if config is not None else None
        self.lat = strokes["latitude"].to_numpy(dtype=float)
        self.lon = strokes["longitude"].to_numpy(dtype=float)
        self.t_ns = _time_ns(strokes["time"])
        self.t_min_ns = int(self.t_ns.min()) if self.t_ns.size else 0
        self.t_max_ns = int(self.t_ns.max()) if self.t_ns.size else 0
        self.is_cg = (strokes["type"] == "CG").to_numpy(dtype=bool)
        self.peak_ka = strokes["peak_current_ka"].to_numpy(dtype=float)
        self.likely_ic = strokes["likely_ic"].to_numpy(dtype=bool)
        self.flash_id = strokes["flash_id"].to_numpy(dtype=np.int64)
        self.contact = strokes["ground_contact"].to_numpy(dtype=np.int64)
        axes = np.column_stack([strokes[c].to_numpy(dtype=float) if c in strokes else np.full(len(strokes), np.nan)
                                for c in ("semi_major_km", "semi_minor_km")])
        with np.errstate(invalid="ignore"):
            a_max = np.fmax(axes[:, 0], axes[:, 1]) if len(strokes) else np.empty(0)
        fill = float(self.default_km) if self.default_km is not None else 0.0  # none: raises later if needed
        a_max = np.where(np.isfinite(a_max), a_max, fill)
        # Each stroke's own reach (largest sd x sqrt(-2 ln tail)): the search radius beyond the circle.
        k = math.sqrt(-2.0 * math.log(1.0 - self.confidence))
        reach = a_max / k * math.sqrt(-2.0 * math.log(SEARCH_TAIL))
        self.reach_km = reach
        self.max_reach_km = float(reach.max()) if reach.size else 0.0
        # Strokes are split by reach into tiers (quantiles 50/90/99/99.9 %), one k-d tree each,
        # searched with the tier's largest reach; the 0.1 % with the widest ellipses are scanned
        # apart, so a few huge ellipses cannot widen every query.
        self.tree_reach_km = float(np.quantile(reach, 0.999)) if reach.size else 0.0
        self.wide = np.flatnonzero(reach > self.tree_reach_km)
        self.wide_reach_km = reach[self.wide]
        self.tiers = []
        if reach.size:
            edges = np.unique(np.quantile(reach, [0.5, 0.9, 0.99, 0.999]))
            tier = np.searchsorted(edges, reach, side="left")  # tier k: reach <= edges[k]
            xyz = _unit_vectors(self.lat, self.lon)
            for k, top in enumerate(edges):
                members = np.flatnonzero(tier == k)
                if members.size:
                    self.tiers.append((members, cKDTree(xyz[members]), float(top)))
        self.tree = bool(self.tiers)
        self._cache = {}  # first ground strokes, the neighbourhood grid

    def pairs(self, lat_deg, lon_deg, base_km):
        """(site index, stroke index) of strokes whose reported position is within about
        `base_km` plus their own reach of each site (a superset; exact tests follow)."""
        lat = np.atleast_1d(np.asarray(lat_deg, dtype=float))
        lon = np.atleast_1d(np.asarray(lon_deg, dtype=float))
        if lat.size == 0 or (not self.tiers and not self.wide.size):
            return np.empty(0, np.int64), np.empty(0, np.int64)
        base = np.broadcast_to(np.asarray(base_km, dtype=float), lat.shape)
        xyz = _unit_vectors(lat, lon)
        site_tree = cKDTree(xyz) if lat.size > 1 else None
        site, stroke = [], []
        for members, tree, top in self.tiers:
            r = _chord(base + top)
            if site_tree is None:
                hits = np.asarray(tree.query_ball_point(xyz[0], r=float(r[0]), return_sorted=False), dtype=np.int64)
                site.append(np.zeros(hits.size, dtype=np.int64))
                stroke.append(members[hits])
            else:
                # Many sites: one tree-to-tree pass in C (no Python lists), then each site's own radius.
                got = site_tree.sparse_distance_matrix(tree, float(r.max()), output_type="ndarray")
                keep = got["v"] <= r[got["i"]]
                site.append(got["i"][keep].astype(np.int64))
                stroke.append(members[got["j"][keep]])
        if self.wide.size:
            step = max(1, 2_000_000 // self.wide.size)
            for i0 in range(0, lat.size, step):
                sl = slice(i0, i0 + step)
                d = haversine_km(lat[sl, None], lon[sl, None], self.lat[self.wide][None, :], self.lon[self.wide][None, :])
                si, wj = np.nonzero(d <= (base[sl, None] + self.wide_reach_km[None, :]) * 1.01 + 0.05)
                site.append(si + i0)
                stroke.append(self.wide[wj])
        if not site:
            return np.empty(0, np.int64), np.empty(0, np.int64)
        return np.concatenate(site), np.concatenate(stroke)

    def first_ground(self, include_likely_ic: bool):
        """Indices of the first eligible ground stroke of every flash (for flash densities)."""
        key = bool(include_likely_ic)
        if key not in self._cache:
            ok = self.is_cg & (key | ~self.likely_ic)
            idx = np.flatnonzero(ok)
            _, first = np.unique(self.flash_id[idx], return_index=True)
            sel = idx[first]
            tree = cKDTree(_unit_vectors(self.lat[sel], self.lon[sel])) if sel.size else None
            self._cache[key] = (sel, tree)
        return self._cache[key]

    def ground_grid(self, include_likely_ic: bool):
        """Eligible ground strokes on a latitude/longitude grid (for the neighbourhood search).

        Cells are at least CONTEXT_KM (+1 %) tall and wide at every latitude of the data (the
        longitude width set at the most poleward stroke), so a circle of CONTEXT_KM about any site
        lies in the 3 x 3 cells about its own. Strokes are sorted by (cell, time). Returns
        ``(stroke rows, cell ids, cell starts, cell ends, cell height deg, rows, columns, latitude,
        longitude, time ns, |Ip|, cos latitude)`` (the stroke arrays in grid order) or None.
        """
        key = ("grid", bool(include_likely_ic))
        if key not in self._cache:
            sel = np.flatnonzero(self.is_cg & (bool(include_likely_ic) | ~self.likely_ic))
            if not sel.size:
                self._cache[key] = None
                return None
            km = CONTEXT_KM * 1.01 + 0.05
            dlat = km / 110.5
            top = min(float(np.max(np.abs(self.lat[sel]))) + 2.0 * dlat, 89.9)
            n_lon = int(360.0 // (km / (111.0 * math.cos(math.radians(top)))))
            if n_lon < 3:  # near a pole one column would wrap onto itself: one cell per row
                n_lon = 1
            n_lat = int(math.ceil(180.0 / dlat)) + 1
            rows = ((self.lat[sel] + 90.0) / dlat).astype(np.int64)
            cols = ((self.lon[sel] + 180.0) / (360.0 / n_lon)).astype(np.int64) % n_lon
            cid = rows * n_lon + cols
            order = np.lexsort((self.t_ns[sel], cid))
            sel, cid = sel[order], cid[order]
            ids, start, counts = np.unique(cid, return_index=True, return_counts=True)
            s_lat, s_lon = self.lat[sel], self.lon[sel]
            self._cache[key] = (sel, ids, start.astype(np.int64), (start + counts).astype(np.int64), dlat,
                                       n_lat, n_lon, s_lat, s_lon, self.t_ns[sel], np.abs(self.peak_ka[sel]),
                                       np.cos(np.radians(s_lat)))
        return self._cache[key]


def _time_ns(s: pd.Series) -> np.ndarray:
    return pd.DatetimeIndex(pd.to_datetime(s, utc=True)).as_unit("ns").asi8.copy()


def _validate_site(lat, lon, radius_km, where="site"):
    lat, lon, radius_km = (np.asarray(v, dtype=float) for v in (lat, lon, radius_km))
    if np.any(~np.isfinite(lat)) or np.any(np.abs(lat) > 90.0):
        raise InputError(f"{where}: latitude must be within [-90, 90]")
    if np.any(~np.isfinite(lon)) or np.any(np.abs(lon) > 180.0):
        raise InputError(f"{where}: longitude must be within [-180, 180]")
    if np.any(~np.isfinite(radius_km)) or np.any(radius_km <= 0.0):
        raise InputError(f"{where}: the radius must be a positive number of km")
    if np.any(radius_km > 1000.0):
        raise InputError(f"{where}: a radius over 1000 km is not a site check")


def _to_utc(t, tz, what):
    from .timeutil import parse_user_time

    if t is None or t is pd.NaT:
        return None
    if isinstance(t, str):
        return parse_user_time(t, tz, what=what)
    ts = pd.Timestamp(t)
    if ts.tzinfo is None:
        raise InputError(f"{what}: {t!r} has no UTC offset")
    return ts.tz_convert("UTC").as_unit("ns")


def _candidates(index: StrokeIndex, lat, lon, radius, t0, t1, extra_search_km=None, parcels=None):
    """Candidate (site, stroke) pairs with distance, bearing, offsets, covariance and p_within.

    `lat`, `lon`, `radius`, `t0`, `t1` (int64 ns) are per-site arrays. `parcels` maps a site
    index to ``(plane_polygons, extent_km)`` in the site's plane.
    """
    base = radius if extra_search_km is None else np.maximum(radius, extra_search_km)
    si, sj = index.pairs(lat, lon, base)
    keep = (index.t_ns[sj] >= t0[si]) & (index.t_ns[sj] <= t1[si])
    si, sj = si[keep], sj[keep]
    # A cheap sphere test with each stroke's own reach (1 % + 50 m margin) before the geodesics.
    hav = haversine_km(lat[si], lon[si], index.lat[sj], index.lon[sj])
    keep = hav <= (base[si] + index.reach_km[sj]) * 1.01 + 0.05
    si, sj = si[keep], sj[keep]
    d_km, b_deg = inverse_km(lat[si], lon[si], index.lat[sj], index.lon[sj])
    uniq, inv = np.unique(sj, return_inverse=True)
    if "sxx_km2" in index.strokes.columns:  # a contact table carries its combined covariance
        sub = index.strokes.iloc[uniq]
        sxx_u, syy_u, sxy_u = (sub[c].to_numpy(dtype=float) for c in ("sxx_km2", "syy_km2", "sxy_km2"))
        filled_u = sub["ellipse_from_default"].to_numpy(dtype=bool)
        if np.any(~np.isfinite(sxx_u)):
            stroke_covariance(sub[~np.isfinite(sxx_u)], index.config)  # raises: no ellipse and no default
    else:
        sxx_u, syy_u, sxy_u, filled_u = stroke_covariance(index.strokes.iloc[uniq], index.config)
    sxx, syy, sxy, filled = sxx_u[inv], syy_u[inv], sxy_u[inv], filled_u[inv]
    reach = reach_km(sxx, syy, sxy, SEARCH_TAIL)
    br = np.radians(b_deg)
    dx, dy = d_km * np.sin(br), d_km * np.cos(br)
    near = d_km <= radius[si] + reach
    p_parcel = np.full(si.shape, np.nan)
    if parcels:
        import shapely

        for s, (polys, _extent) in parcels.items():
            m = si == s
            if not np.any(m):
                continue
            dist = shapely.distance(shapely.points(dx[m], dy[m]), shapely.MultiPolygon(polys) if len(polys) > 1 else polys[0])
            close = dist <= reach[m]
            near[np.flatnonzero(m)[close]] = True
    si, sj, d_km, b_deg, dx, dy = si[near], sj[near], d_km[near], b_deg[near], dx[near], dy[near]
    sxx, syy, sxy, filled, p_parcel = sxx[near], syy[near], sxy[near], filled[near], p_parcel[near]
    p = p_within_circle(dx, dy, sxx, syy, sxy, radius[si]) if si.size else np.empty(0)
    if parcels:
        for s, (polys, _extent) in parcels.items():
            m = si == s
            if np.any(m):
                acc = np.zeros(int(m.sum()))
                for poly in polys:
                    ext = np.asarray(poly.exterior.coords)
                    holes = [(np.asarray(h.coords)[:, 0], np.asarray(h.coords)[:, 1]) for h in poly.interiors]
                    acc += p_within_polygon(dx[m], dy[m], sxx[m], syy[m], sxy[m], ext[:, 0], ext[:, 1], holes=holes)
                p_parcel[m] = np.clip(acc, 0.0, 1.0)
    st = index.strokes
    cols = {
        "site_index": si, "stroke_row": sj,
        "time": pd.to_datetime(index.t_ns[sj], utc=True),
        "latitude": index.lat[sj], "longitude": index.lon[sj],
        "peak_current_ka": index.peak_ka[sj],
        "type": np.where(index.is_cg[sj], "CG", "IC"),
        "flash_id": index.flash_id[sj], "ground_contact": index.contact[sj],
        "likely_ic": index.likely_ic[sj],
        "distance_km": d_km, "bearing_deg": b_deg, "p_within": p,
    }
    if parcels:
        cols["p_within_parcel"] = p_parcel
    for c in ("semi_major_km", "semi_minor_km", "major_bearing_deg", "source_row"):
        if c in st.columns:
            cols[c] = st[c].to_numpy()[sj]
    cols["ellipse_from_default"] = filled
    cols["dx_km"], cols["dy_km"] = dx, dy
    cols["sxx_km2"], cols["syy_km2"], cols["sxy_km2"] = sxx, syy, sxy
    cand = pd.DataFrame(cols)
    cand["time"] = pd.to_datetime(cand["time"], utc=True).astype("datetime64[ns, UTC]")
    return cand.sort_values(["site_index", "time"], kind="stable").reset_index(drop=True)


def _p_any(cand: pd.DataFrame, col: str, eligible: np.ndarray, n_sites: int):
    """Per site: ``1 - prod(1 - p)`` over eligible contact rows, and the number of contacts.

    Each row of `cand` is one ground contact (its strokes already combined into one fix), and
    contacts are taken as independent.
    """
    site = cand["site_index"].to_numpy()[eligible]
    p = np.clip(cand[col].to_numpy(dtype=float)[eligible], 0.0, 1.0)
    if site.size == 0:
        return np.zeros(n_sites), np.zeros(n_sites, dtype=np.int64)
    with np.errstate(divide="ignore"):  # a certain contact gives log(0) = -inf -> p_any = 1
        log_none = np.log1p(-p)
    total = np.zeros(n_sites)
    np.add.at(total, site, log_none)
    return 0.0 - np.expm1(total), np.bincount(site, minlength=n_sites).astype(np.int64)  # 0.0 - : no -0.0


def _residual(index, lat, lon, radius, t0, t1, area_km2, de, de_source, include_likely_ic):
    """Unrecorded-flash chance per site (dict of arrays), with a one-sided upper bound."""
    from scipy.stats import chi2

    sel, tree = index.first_ground(include_likely_ic)
    inner = np.asarray(radius, dtype=float)
    outer = np.maximum(DENSITY_RING_KM, 2.0 * inner)
    count = np.zeros(lat.size, dtype=np.int64)
    if tree is not None:
        lists = tree.query_ball_point(_unit_vectors(lat, lon), r=_chord(outer), return_sorted=False)
        if lat.size == 1 and not isinstance(lists[0], list):
            lists = [lists]
        counts = np.fromiter((len(x) for x in lists), dtype=np.int64, count=len(lists))
        si = np.repeat(np.arange(lat.size), counts)
        sj = sel[np.fromiter((j for x in lists for j in x), dtype=np.int64, count=int(counts.sum()))]
        d, _ = inverse_km(lat[si], lon[si], index.lat[sj], index.lon[sj])
        ok = (d > inner[si]) & (d <= outer[si]) & (index.t_ns[sj] >= t0[si]) & (index.t_ns[sj] <= t1[si])
        count = np.bincount(si[ok], minlength=lat.size)
    ring_area = math.pi * (outer**2 - inner**2)
    density = count / ring_area
    scale = area_km2 * (1.0 - de) / de
    lam = density * scale
    # Exact (Garwood) one-sided upper limit of a Poisson mean after `count` events: with none
    # recorded the density is bounded, not estimated ([Garwood1936]; 3.0 for 95 %, [Hanley1983]).
    upper_count = chi2.ppf(RESIDUAL_UPPER_CONFIDENCE, 2 * count + 2) / 2.0
    lam_up = upper_count / ring_area * scale
    return {
        "ring_inner_km": inner, "ring_outer_km": outer, "n_ground_flashes_in_ring": count,
        "ring_area_km2": ring_area, "density_per_km2": density, "area_km2": area_km2,
        "detection_efficiency": np.full(lat.size, de), "de_source": de_source,
        "expected_unrecorded": lam, "p_unrecorded": -np.expm1(-lam),
        "upper_confidence": np.full(lat.size, RESIDUAL_UPPER_CONFIDENCE),
        "expected_unrecorded_upper": lam_up, "p_unrecorded_upper": -np.expm1(-lam_up),
    }


def _resolve_de(config, detection_efficiency, de_source):
    de = detection_efficiency
    src = de_source
    if de is None and config is not None:
        de = config.get("flash_detection_efficiency")
        src = src or config.get("flash_detection_efficiency_source")
    if de is None:
        return None, None
    if not (isinstance(de, (int, float)) and 0.0 < de <= 1.0):
        raise InputError(f"the flash detection efficiency must be in (0, 1], got {de!r}")
    if not src:
        raise InputError("a detection efficiency needs its source: give --de-source TEXT or "
                         "flash_detection_efficiency_source in event.toml")
    return float(de), str(src)


def _window_bounds(index, start, end, n):
    t0 = np.full(n, np.iinfo(np.int64).min, dtype=np.int64)
    t1 = np.full(n, np.iinfo(np.int64).max, dtype=np.int64)
    if start is not None:
        t0[:] = start if np.ndim(start) == 0 else start
    if end is not None:
        t1[:] = end if np.ndim(end) == 0 else end
    return t0, t1


def _parcel_in_plane(parcel, lat, lon):
    """A lon/lat (Multi)Polygon -> list of shapely Polygons in the site's plane (km), and extent."""
    import shapely

    plane = LocalPlane(lat, lon)
    parts = list(parcel.geoms) if parcel.geom_type == "MultiPolygon" else [parcel]
    polys = []
    for part in parts:
        def proj(ring):
            c = np.asarray(ring.coords)
            x, y = plane.to_xy_km(c[:, 1], c[:, 0])
            return np.column_stack([x, y])
        polys.append(shapely.Polygon(proj(part.exterior), [proj(h) for h in part.interiors]))
    extent = max(float(np.max(np.hypot(*np.asarray(p.exterior.coords).T))) for p in polys)
    return polys, extent


def _eligible(cand: pd.DataFrame, include_likely_ic: bool) -> np.ndarray:
    return (cand["type"].to_numpy() == "CG") & (include_likely_ic | ~cand["likely_ic"].to_numpy(dtype=bool))


def _best_per_site(values: np.ndarray, site: np.ndarray, rows: np.ndarray, n: int):
    """Per site: the row with the largest value (earliest row on ties) and that value."""
    best = np.full(n, -1, dtype=np.int64)
    top = np.zeros(n)
    if rows.size:
        order = np.lexsort((rows, -values[rows], site[rows]))
        srt = site[rows][order]
        first = np.ones(srt.size, dtype=bool)
        first[1:] = srt[1:] != srt[:-1]
        best[srt[first]] = rows[order][first]
        top[srt[first]] = values[rows][order][first]
    return best, top


#: The sphere distance differs from the geodesic by less than this share (plus 1 m): pairs
#: this close to a limit get the exact geodesic.
_SPHERE_SLACK = 0.006


@njit(cache=True)
def _hav_km(lat1, lon1, lat2, lon2):
    p1, p2 = math.radians(lat1), math.radians(lat2)
    dphi = p2 - p1
    dl = math.radians(lon2 - lon1)
    h = math.sin(dphi / 2.0) ** 2 + math.cos(p1) * math.cos(p2) * math.sin(dl / 2.0) ** 2
    return 2.0 * MEAN_EARTH_RADIUS_KM * math.asin(math.sqrt(min(max(h, 0.0), 1.0)))


@njit(cache=True)
def _cell_spans(lat, lon, t0, t1, s_t, cell_ids, cell_start, cell_end, dlat_deg, n_lat, n_lon):
    """Row ranges, in the (cell, time)-sorted strokes, of the 3 x 3 cells about a point and the
    window [t0, t1] (each cell once, also where fewer than 3 columns wrap the globe)."""
    out = np.zeros((9, 2), np.int64)
    m = 0
    lc = int((lat + 90.0) / dlat_deg)
    oc = int((lon + 180.0) / (360.0 / n_lon)) % n_lon
    for a in range(lc - 1, lc + 2):
        if a < 0 or a >= n_lat:
            continue
        for bb in range(3 if n_lon >= 3 else n_lon):
            b = oc - 1 + bb if n_lon >= 3 else bb
            cid = a * n_lon + (b % n_lon)
            pos = np.searchsorted(cell_ids, cid)
            if pos >= cell_ids.size or cell_ids[pos] != cid:
                continue
            lo, hi = cell_start[pos], cell_end[pos]
            out[m, 0] = lo + np.searchsorted(s_t[lo:hi], t0)
            out[m, 1] = lo + np.searchsorted(s_t[lo:hi], t1, side="right")
            m += 1
    return out[:m]


@njit(cache=True)
def _context_kernel(site_lat, site_lon, t0, t1, s_lat, s_lon, s_coslat, s_t, s_abs, cell_ids, cell_start, cell_end,
                    dlat_deg, n_lat, n_lon, limit_km, out_i, out_j):
    """Per site on the mean sphere: the count and largest |Ip| of strokes surely within
    `limit_km`, the nearest and second-nearest distances (and the nearest's row), and the pairs
    near the limit (into `out_i`, `out_j` while they have room; their number is returned).

    Strokes are sorted by (cell, time); a site visits the 3 x 3 cells about its own and, in each,
    only the strokes of its window (binary search on time).
    """
    n = site_lat.size
    count = np.zeros(n, np.int64)
    big = np.full(n, -np.inf)
    dmin = np.full(n, np.inf)
    d2nd = np.full(n, np.inf)
    jmin = np.full(n, -1, np.int64)
    sure = (limit_km - 1e-3) / (1.0 + _SPHERE_SLACK)
    maybe = (limit_km + 1e-3) / (1.0 - _SPHERE_SLACK)
    lat_lim = maybe / 111.19  # one degree of latitude is 111.195 km on the mean sphere
    k = 0
    cap = out_i.size
    for s in range(n):
        la, lo_ = site_lat[s], site_lon[s]
        p1 = math.radians(la)
        c1 = math.cos(p1)
        spans = _cell_spans(la, lo_, t0[s], t1[s], s_t, cell_ids, cell_start, cell_end, dlat_deg, n_lat, n_lon)
        for q in range(spans.shape[0]):
            for j in range(spans[q, 0], spans[q, 1]):
                if abs(s_lat[j] - la) > lat_lim:
                    continue
                sp = math.sin(math.radians(s_lat[j] - la) / 2.0)
                sl = math.sin(math.radians(s_lon[j] - lo_) / 2.0)
                h = sp * sp + c1 * s_coslat[j] * sl * sl
                d = 2.0 * MEAN_EARTH_RADIUS_KM * math.asin(math.sqrt(min(max(h, 0.0), 1.0)))
                if d > maybe:
                    continue
                if d < dmin[s]:
                    d2nd[s] = dmin[s]
                    dmin[s] = d
                    jmin[s] = j
                elif d < d2nd[s]:
                    d2nd[s] = d
                if d <= sure:
                    count[s] += 1
                    if s_abs[j] > big[s]:
                        big[s] = s_abs[j]
                else:
                    if k < cap:
                        out_i[k] = s
                        out_j[k] = j
                    k += 1
    return count, big, dmin, d2nd, jmin, k


@njit(cache=True)
def _rivals_kernel(site_lat, site_lon, t0, t1, top, s_lat, s_lon, s_t, cell_ids, cell_start, cell_end,
                   dlat_deg, n_lat, n_lon, out_i, out_j):
    """Pairs whose sphere distance is at most `top` (per site): the nearest stroke's rivals."""
    k = 0
    cap = out_i.size
    for s in range(site_lat.size):
        spans = _cell_spans(site_lat[s], site_lon[s], t0[s], t1[s], s_t, cell_ids, cell_start, cell_end, dlat_deg,
                            n_lat, n_lon)
        for q in range(spans.shape[0]):
            for j in range(spans[q, 0], spans[q, 1]):
                if _hav_km(site_lat[s], site_lon[s], s_lat[j], s_lon[j]) <= top[s]:
                    if k < cap:
                        out_i[k] = s
                        out_j[k] = j
                    k += 1
    return k


def _collect(kernel, args, cap):
    """Run a collecting kernel, again with room enough when the first guess of pairs was short."""
    out_i, out_j = np.zeros(cap, np.int64), np.zeros(cap, np.int64)
    res = kernel(*args, out_i, out_j)
    k = res[-1] if isinstance(res, tuple) else res
    if k > cap:
        out_i, out_j = np.zeros(k, np.int64), np.zeros(k, np.int64)
        res = kernel(*args, out_i, out_j)
    return res, out_i[:k], out_j[:k]


def _context(index: StrokeIndex, lat, lon, t0, t1, include_likely_ic):
    """Per site: eligible ground strokes within CONTEXT_KM in the window (count, nearest, largest |Ip|).

    A compiled pass over a latitude/longitude grid of the eligible ground strokes (cells at least
    CONTEXT_KM wide, strokes in time order within a cell) decides on the mean sphere; the pairs
    within 0.6 % of the limit, and the nearest stroke's rivals, get the exact geodesic.
    """
    n = lat.size
    out = {"n_ground_within_context": np.zeros(n, np.int64), "nearest_ground_km": np.full(n, np.nan),
           "nearest_ground_bearing_deg": np.full(n, np.nan), "nearest_ground_peak_ka": np.full(n, np.nan),
           "max_abs_peak_ka_context": np.full(n, np.nan)}
    g = index.ground_grid(include_likely_ic)
    if g is None or n == 0:
        return out
    sel, cell_ids, c0, c1, dlat, n_lat, n_lon, s_lat, s_lon, s_t, s_abs, s_cos = g
    args = (lat, lon, t0, t1, s_lat, s_lon, s_cos, s_t, s_abs, cell_ids, c0, c1, dlat, n_lat, n_lon, CONTEXT_KM)
    (count, big, dmin, d2nd, jmin, _k), bi, bj = _collect(_context_kernel, args, 64 * n + 4096)
    if bi.size:  # the pairs near the limit: the geodesic decides
        dg, _ = inverse_km(lat[bi], lon[bi], s_lat[bj], s_lon[bj])
        inside = dg <= CONTEXT_KM
        np.add.at(count, bi[inside], 1)
        np.maximum.at(big, bi[inside], s_abs[bj[inside]])
    out["n_ground_within_context"] = count
    out["max_abs_peak_ka_context"] = np.where(np.isfinite(big), big, np.nan)
    # The nearest: the sphere's nearest, unless a rival lies within the slack of it.
    has = jmin >= 0
    close = has & (d2nd <= dmin * (1.0 + _SPHERE_SLACK) / (1.0 - _SPHERE_SLACK) + 2e-3)
    ni, nj = np.flatnonzero(has & ~close), jmin[has & ~close]
    if np.any(close):
        sub = np.flatnonzero(close)
        top = dmin[sub] * (1.0 + _SPHERE_SLACK) / (1.0 - _SPHERE_SLACK) + 2e-3
        _k, ri, rj = _collect(_rivals_kernel, (lat[sub], lon[sub], t0[sub], t1[sub], top, s_lat, s_lon, s_t, cell_ids,
                                               c0, c1, dlat, n_lat, n_lon), 8 * sub.size + 64)
        ni, nj = np.concatenate([ni, sub[ri]]), np.concatenate([nj, rj])
    if ni.size:
        dg, bg = inverse_km(lat[ni], lon[ni], s_lat[nj], s_lon[nj])
        ok = dg <= CONTEXT_KM
        ni, nj, dg, bg = ni[ok], nj[ok], dg[ok], bg[ok]
        order = np.lexsort((nj, dg, ni))
        first = np.ones(order.size, dtype=bool)
        first[1:] = ni[order][1:] != ni[order][:-1]
        pick = order[first]
        out["nearest_ground_km"][ni[pick]] = dg[pick]
        out["nearest_ground_bearing_deg"][ni[pick]] = bg[pick]
        out["nearest_ground_peak_ka"][ni[pick]] = index.peak_ka[sel[nj[pick]]]
    return out


def _summaries(index, cand, ccand, lat, lon, radius, t0, t1, include_likely_ic, de, de_source, parcels=None):
    """Per-site figures: stroke counts from `cand` (strokes), probabilities from `ccand` (contacts)."""
    n = lat.size
    eligible = _eligible(cand, include_likely_ic)
    si = cand["site_index"].to_numpy()
    dist = cand["distance_km"].to_numpy()
    within = eligible & (dist <= radius[si])
    out = pd.DataFrame({
        "n_candidates": np.bincount(si, minlength=n),
        "n_ground_candidates": np.bincount(si[eligible], minlength=n),
        "n_ground_within": np.bincount(si[within], minlength=n),
    })
    nearest = np.full(n, np.inf)
    np.minimum.at(nearest, si[eligible], dist[eligible])
    out["nearest_km"] = np.where(np.isfinite(nearest), nearest, np.nan)
    _, out["max_p_within_stroke"] = _best_per_site(cand["p_within"].to_numpy(), si, np.flatnonzero(eligible), n)
    # Set aside: low-amplitude positive ground reports within the radius, left out as likely cloud pulses.
    aside = (cand["type"].to_numpy() == "CG") & cand["likely_ic"].to_numpy(dtype=bool) & (dist <= radius[si])
    if include_likely_ic:
        aside[:] = False
    out["n_set_aside_within"] = np.bincount(si[aside], minlength=n)
    near_aside, _ = _best_per_site(-dist, si, np.flatnonzero(aside), n)
    has = near_aside >= 0
    for col, src in (("set_aside_nearest_km", "distance_km"), ("set_aside_peak_ka", "peak_current_ka"),
                     ("set_aside_p_within", "p_within")):
        v = np.full(n, np.nan)
        v[has] = cand[src].to_numpy(dtype=float)[near_aside[has]]
        out[col] = v
    # Probabilities per ground contact (combined fix), contacts independent.
    celig = _eligible(ccand, include_likely_ic)
    csi = ccand["site_index"].to_numpy()
    p_any, n_contacts = _p_any(ccand, "p_within", celig, n)
    out["n_contacts"] = n_contacts
    best, maxp = _best_per_site(ccand["p_within"].to_numpy(), csi, np.flatnonzero(celig), n)
    out["max_p_within"] = maxp
    out["p_any_within"] = p_any
    out["best_row"] = best
    area = math.pi * radius**2
    if parcels is not None:
        pa, _ = _p_any(ccand, "p_within_parcel", celig & ccand["p_within_parcel"].notna().to_numpy(), n)
        mp = np.full(n, np.nan)
        parea = np.full(n, np.nan)
        for s, (polys, _extent) in parcels.items():
            parea[s] = sum(p.area for p in polys)
            m = celig & (csi == s)
            mp[s] = float(ccand.loc[m, "p_within_parcel"].max()) if np.any(m) else 0.0
        out["parcel_area_km2"] = parea
        out["max_p_within_parcel"] = mp
        out["p_any_within_parcel"] = np.where(np.isfinite(parea), pa, np.nan)
    for k, v in _context(index, lat, lon, t0, t1, include_likely_ic).items():
        out[k] = v
    resid = None
    if de is not None:
        resid = _residual(index, lat, lon, radius, t0, t1, area, de, de_source, include_likely_ic)
        if parcels is not None:
            parea = out["parcel_area_km2"].to_numpy()
            lam_p = resid["density_per_km2"] * np.nan_to_num(parea) * (1.0 - de) / de
            resid["p_unrecorded_parcel"] = np.where(np.isfinite(parea), -np.expm1(-lam_p), np.nan)
    return out, resid


# --- sentences --------------------------------------------------------------------------------

def compass_point(bearing_deg: float) -> str:
    """8-point compass word for a bearing (degrees clockwise from north)."""
    return _COMPASS[int(((float(bearing_deg) % 360.0) + 22.5) // 45.0) % 8]


def percent(p: float) -> str:
    """A probability as plain-language percent text."""
    p = float(p)
    if p >= 0.9995:
        return "more than 99.9%"
    if p < 0.0005:
        return "less than 0.1%"
    if p >= 0.99:
        return f"{100 * p:.1f}%"
    if p >= 0.1:
        return f"{100 * p:.0f}%"
    if p >= 0.01:
        return f"{100 * p:.1f}%"
    return f"{100 * p:.2f}%"


def _km(x: float) -> str:
    return f"{x:.2f} km" if x < 10 else f"{x:.1f} km"


def _clock(ts: pd.Timestamp, tz) -> str:
    t = pd.Timestamp(ts).tz_convert("UTC")
    z = zone(tz)
    if z is None or tz == "UTC":
        return t.strftime("%H:%M:%S UTC")
    return t.tz_convert(z).strftime("%H:%M:%S %Z") + t.strftime(" (%H:%M:%S UTC)")


def _when(t0: pd.Timestamp, t1: pd.Timestamp, tz) -> str:
    if t0 == t1:
        z = zone(tz)
        t = pd.Timestamp(t0).tz_convert("UTC")
        if z is None or tz == "UTC":
            return f"at {t:%Y-%m-%d %H:%M:%S} UTC"
        return f"at {t.tz_convert(z):%Y-%m-%d %H:%M:%S %Z} ({t:%Y-%m-%d %H:%M:%S} UTC)"
    z = zone(tz)
    a, b = t0.tz_convert("UTC"), t1.tz_convert("UTC")
    utc = f"{a:%Y-%m-%d %H:%M} and {b:%H:%M} UTC" if a.date() == b.date() else f"{a:%Y-%m-%d %H:%M} and {b:%Y-%m-%d %H:%M} UTC"
    if z is None or tz == "UTC":
        return f"between {utc}"
    la, lb = a.tz_convert(z), b.tz_convert(z)
    second = f"{lb:%H:%M}" if la.date() == lb.date() else f"{lb:%Y-%m-%d %H:%M}"
    return f"between {la:%Y-%m-%d %H:%M} and {second} {lb:%Z} ({utc})"


def _signed_ka(ka: float) -> str:
    sign = "\u2212" if ka < 0 else "+"
    return f"{sign}{abs(ka):.1f} kA"


def _sentence(name, radius, summ: dict, best: dict | None, resid: dict | None, t0, t1, tz, include_likely_ic,
              parcel=None) -> str:
    """The quotable paragraph of one site check.

    It says what was found, what was set aside and what was assumed (ellipse confidence, the
    independence of contacts, the coverage); outside the data's coverage it says only that no
    conclusion is possible, and why.
    """
    r = f"{radius:g} km"
    when = _when(t0, t1, tz)
    cov = summ.get("coverage", "inside")
    cov_note = summ.get("coverage_note", "")
    by_window = summ.get("coverage_limit") == "window"
    if cov == "outside" and by_window:
        text = (f"No conclusion for {name} within {r} {when} in this analysis: the period lies outside the analysis "
                f"window; {cov_note}. Analyse a window that holds it (the stroke data may cover it).")
        return text + (f" Note: {summ['coverage_warning']}" if summ.get("coverage_warning") else "")
    if cov == "outside":
        text = (f"No conclusion for {name} within {r} {when}: the place or period lies outside the data's coverage; "
                f"{cov_note}. The stroke data cannot show whether lightning struck there or not.")
        return text + (f" Note: {summ['coverage_warning']}" if summ.get("coverage_warning") else "")
    extra = " (low-amplitude positive reports included)" if include_likely_ic else ""
    part = ((" in the part of it inside the analysis window" if by_window else " in the part of it the data cover")
            if cov == "partial" else "")
    n = int(summ["n_ground_within"])
    if n:
        lead = f"{n} ground stroke{'s were' if n > 1 else ' was'}{extra} located within {r} of {name} {when}{part}"
    else:
        lead = f"No ground stroke{extra} was located within {r} of {name} {when}{part}"
    parts = [lead]
    if best is not None:
        k_str = int(best["n_strokes"])
        how = (f"{k_str} strokes combined into one position fix" if k_str > 1 else "a single stroke")
        desc = (f"a ground contact of {_signed_ka(best['peak_current_ka'])} at {_clock(best['time'], tz)} "
                f"({how}), {_km(best['distance_km'])} to the {compass_point(best['bearing_deg'])}")
        phrase = "the most likely" if n else "the likeliest nearby"
        parts.append(f"; {phrase}, {desc}, has an estimated probability of {percent(best['p_within'])} of having "
                     "terminated within the radius, given the network's reported location error")
        k = int(summ["n_contacts"])
        if k > 1:
            parts.append(f". Taking the {k} ground contacts that could have reached the circle as independent, the "
                         f"probability that at least one terminated within {r} is {percent(summ['p_any_within'])}")
    elif not n:
        parts.append(", and no ground stroke was close enough for its location error to reach the circle")
    text = "".join(parts) + "."
    m = int(summ.get("n_set_aside_within", 0) or 0)
    if m:
        text += (f" {m} ground report{'s' if m > 1 else ''} within {r} {'were' if m > 1 else 'was'} set aside as "
                 f"likely cloud pulse{'s' if m > 1 else ''} (positive, low peak current): the nearest, "
                 f"{_signed_ka(summ['set_aside_peak_ka'])} at {_km(summ['set_aside_nearest_km'])}, would on its own "
                 f"lie within the radius with a probability of {percent(summ['set_aside_p_within'])}.")
    if summ.get("n_ground_within_context", 0):
        near = summ["nearest_ground_km"]
        text += (f" The nearest single reported ground stroke position in the period was {_km(near)} to the "
                 f"{compass_point(summ['nearest_ground_bearing_deg'])} ({_signed_ka(summ['nearest_ground_peak_ka'])}); "
                 f"the largest |peak current| within {CONTEXT_KM:g} km was {summ['max_abs_peak_ka_context']:.0f} kA.")
    else:
        text += f" No ground stroke was recorded within {CONTEXT_KM:g} km in the period."
    if parcel is not None and math.isfinite(summ.get("parcel_area_km2", float("nan"))):
        text += (f" For the parcel ({summ['parcel_area_km2']:.3g} km\u00b2) the probability that at least one "
                 f"ground contact terminated on it is {percent(summ['p_any_within_parcel'])}.")
    if cov == "partial" and by_window:
        text += (f" Part of the period is outside the analysis window ({cov_note}); this analysis draws no conclusion "
                 "for that part, and the chance of an unrecorded flash is not stated.")
    elif cov == "partial":
        text += (f" Part of the question is outside the data's coverage ({cov_note}); for that part there is no "
                 "conclusion, and the chance of an unrecorded flash is not stated.")
    elif resid is not None:
        base = (f" With a flash detection efficiency of {100 * resid['detection_efficiency']:.0f}% "
                f"({resid['de_source']}) and {resid['n_ground_flashes_in_ring']} recorded ground flashes "
                f"between {resid['ring_inner_km']:g} and {resid['ring_outer_km']:g} km of the site in the period, ")
        conf = f"{100 * resid['upper_confidence']:.0f}%"
        if resid["n_ground_flashes_in_ring"] == 0:
            text += base + (f"the chance that an unrecorded flash struck within {r} is at most "
                            f"{percent(resid['p_unrecorded_upper'])} ({conf} upper bound; with no flash recorded "
                            "nearby the local density cannot be estimated, only bounded).")
        else:
            text += base + (f"the chance that an unrecorded flash struck within {r} is {percent(resid['p_unrecorded'])} "
                            f"({conf} upper bound {percent(resid['p_unrecorded_upper'])}).")
    else:
        text += " The network's detection efficiency was not given, so the chance of an unrecorded flash is not stated."
    level = ("the network's stated level, from ellipse_confidence" if summ.get("ellipse_confidence_stated") else
             "debrief's default, not a level the network stated: set ellipse_confidence")
    text += (f" Assumed: error ellipses at {100 * summ['ellipse_confidence']:.0f}% confidence ({level}); the strokes "
             "of one ground contact combined into one fix with errors independent between strokes; different "
             "contacts independent.")
    words = {"declared": "declared in event.toml", "data_extent": "taken from the data's own extent"}
    ts, as_ = summ.get("coverage_time_source"), summ.get("coverage_area_source")
    if cov == "inside" and ts in words and as_ in words:
        how = (words[ts] if ts == as_ else f"time {words[ts]}, area {words[as_]}")
        text += f" The data cover the whole period and circle (coverage {how})."
    elif ts not in words:
        text += " Whether the data cover this place and period was not checked."
    if summ.get("coverage_warning"):
        text += f" Note: {summ['coverage_warning']}"
    return text


# --- public API -------------------------------------------------------------------------------

def build_contact_index(strokes, config=None, include_likely_ic=False, contacts=None) -> StrokeIndex:
    """A :class:`StrokeIndex` over the ground contacts (:func:`debrief.contacts.contact_fixes`) of
    a grouped stroke table: build it once beside the stroke index for repeated checks."""
    from .contacts import contact_fixes

    if contacts is None:
        contacts = contact_fixes(strokes, config, include_likely_ic=include_likely_ic)
    return StrokeIndex(contacts, config)


def check_site(strokes, lat_deg, lon_deg, radius_km, *, start=None, end=None, config=None, parcel=None,
               include_likely_ic=False, detection_efficiency=None, de_source=None, name="site",
               index: StrokeIndex | None = None, contact_index: StrokeIndex | None = None,
               coverage=None) -> SiteResult:
    """Check one site: candidate strokes, per-contact probabilities, a sentence and the residual chance.

    Parameters
    ----------
    strokes : DataFrame
        Grouped stroke table (``flash_id``, ``ground_contact``, ``likely_ic``); may be None when
        `index` and `contact_index` are given.
    lat_deg, lon_deg : float
        Site, WGS84 degrees.
    radius_km : float
        Circle radius, km.
    start, end : Timestamp or ISO text, optional
        Inclusive time window (text without an offset is read in the event's ``time_zone``).
    config : EventConfig, optional
        ``ellipse_confidence``, ``default_uncertainty_km``, ``time_zone`` and the detection
        efficiency with its source.
    parcel : shapely Polygon or MultiPolygon, optional
        Parcel outline in lon/lat (:func:`debrief.io.sites.read_parcel`).
    include_likely_ic : bool
        Count low-amplitude positive ground reports (flagged ``likely_ic``).
    detection_efficiency, de_source : float, str, optional
        Flash detection efficiency (0, 1] and where it comes from; override event.toml.
    name : str
        Site name for the sentence.
    index, contact_index : StrokeIndex, optional
        Prebuilt indexes of the strokes and of the ground contacts
        (:func:`debrief.contacts.contact_fixes`), for repeated queries.
    coverage : debrief.coverage.Coverage, optional
        The data's coverage (with the analysis window); outside it the answer is "no conclusion".

    Returns
    -------
    SiteResult
        ``candidates``: one row per candidate stroke with its own ``p_within``; ``contacts``: one
        row per candidate ground contact with the probability of its combined fix; the summary
        (``p_any_within``, ``max_p_within`` from contacts, ``max_p_within_stroke``, coverage,
        set-aside and context figures) and the sentence.

    References
    ----------
    Bivariate-normal location error: :mod:`debrief.uncertainty`; combined fixes:
    :mod:`debrief.contacts` [BarShalom2001]_; detection efficiency: Cummins and Murphy (2009)
    [CumminsMurphy2009]_; the upper bound of the unrecorded-flash chance [Garwood1936]_.
    """
    _validate_site(lat_deg, lon_deg, radius_km)
    if index is None:
        index = StrokeIndex(strokes, config)
    if contact_index is None:
        contact_index = build_contact_index(index.strokes, config, include_likely_ic)
    tz = config.time_zone if config is not None else None
    t_start = _to_utc(start, tz, "start")
    t_end = _to_utc(end, tz, "end")
    if t_start is not None and t_end is not None and t_end <= t_start:
        raise InputError("the window's end is not after its start")
    sites = pd.DataFrame({"name": [name], "latitude": [float(lat_deg)], "longitude": [float(lon_deg)],
                          "radius_km": [float(radius_km)], "start": [t_start if t_start is not None else pd.NaT],
                          "end": [t_end if t_end is not None else pd.NaT]})
    run = _run(index, contact_index, sites, config, include_likely_ic, detection_efficiency, de_source, coverage,
               parcels_given={0: parcel} if parcel is not None else None)
    return run.result(0, with_tables=True)


#: Summary columns of :func:`check_sites`, in order.
SITES_COLUMNS = (
    "name", "latitude", "longitude", "radius_km", "start", "end", "searched_start", "searched_end", "coverage",
    "coverage_source", "coverage_time_source", "coverage_area_source", "coverage_limit", "coverage_note",
    "coverage_warning", "n_candidates", "n_ground_candidates", "n_ground_within", "n_contacts", "nearest_km",
    "max_p_within", "max_p_within_stroke", "p_any_within", "p_unrecorded", "p_unrecorded_upper",
    "n_set_aside_within", "set_aside_nearest_km", "set_aside_peak_ka", "nearest_ground_km",
    "max_abs_peak_ka_context", "sentence",
)


_COVERAGE_FIELDS = ("coverage", "coverage_source", "coverage_time_source", "coverage_area_source", "coverage_limit",
                    "coverage_note", "coverage_warning")
_SUMMARY_COUNTS = ("n_candidates", "n_ground_candidates", "n_ground_within", "n_contacts", "n_set_aside_within",
                   "n_ground_within_context")
_SUMMARY_FIGURES = ("nearest_km", "set_aside_nearest_km", "set_aside_peak_ka", "set_aside_p_within", "nearest_ground_km",
                    "nearest_ground_bearing_deg", "nearest_ground_peak_ka", "max_abs_peak_ka_context")


@dataclass
class _Run:
    """One pass of the site check over many sites; :meth:`result` gives one site's SiteResult."""

    index: StrokeIndex
    cand: pd.DataFrame
    ccand: pd.DataFrame
    summ: pd.DataFrame
    resid: dict | None
    sites: pd.DataFrame
    lat: np.ndarray
    lon: np.ndarray
    radius: np.ndarray
    t0: np.ndarray
    t1: np.ndarray
    s0: np.ndarray
    s1: np.ndarray
    tz: str | None
    include_likely_ic: bool
    shapes: dict
    confidence: float
    confidence_stated: bool = False

    def _window(self, s):
        lo, hi = np.iinfo(np.int64).min, np.iinfo(np.int64).max
        a = pd.Timestamp(int(self.t0[s]), tz="UTC") if self.t0[s] != lo else _extent(self.index, "min")
        b = pd.Timestamp(int(self.t1[s]), tz="UTC") if self.t1[s] != hi else _extent(self.index, "max")
        return a, b

    def _searched(self, s) -> dict:
        """The part of the period that was searched (NaT when none was: outside the coverage)."""
        lo, hi = np.iinfo(np.int64).min, np.iinfo(np.int64).max
        if self.s1[s] < self.s0[s]:
            return {"searched_start": pd.NaT, "searched_end": pd.NaT}
        a = pd.Timestamp(int(self.s0[s]), tz="UTC") if self.s0[s] != lo else _extent(self.index, "min")
        b = pd.Timestamp(int(self.s1[s]), tz="UTC") if self.s1[s] != hi else _extent(self.index, "max")
        return {"searched_start": a, "searched_end": b}

    def _columns(self):
        """The summary and contact-candidate columns as arrays, once (sentences for many sites)."""
        if not hasattr(self, "_cols"):
            self._cols = ({c: self.summ[c].to_numpy() for c in self.summ.columns},
                          {c: self.ccand[c].to_numpy() for c in ("peak_current_ka", "distance_km", "bearing_deg",
                                                                 "p_within", "n_strokes", "time")})
        return self._cols

    def result(self, s: int, *, with_tables: bool = False) -> SiteResult:
        cols, ccols = self._columns()
        row = {c: v[s] for c, v in cols.items()}
        w0, w1 = self._window(s)
        name = str(self.sites["name"].iat[s])
        best = None
        if row["best_row"] >= 0:
            b = int(row["best_row"])
            best = {c: v[b] for c, v in ccols.items()}
            best["time"] = pd.Timestamp(best["time"]).tz_localize("UTC") if pd.Timestamp(best["time"]).tzinfo is None \
                else pd.Timestamp(best["time"])
        r_s = None
        if self.resid:
            r_s = {k: (v[s] if isinstance(v, np.ndarray) else v) for k, v in self.resid.items()}
            r_s = {k: (float(v) if isinstance(v, (np.floating, float)) else int(v) if isinstance(v, np.integer) else v)
                   for k, v in r_s.items()}
        outside = row["coverage"] == "outside"
        summary = {
            "name": name, "latitude": float(self.lat[s]), "longitude": float(self.lon[s]),
            "radius_km": float(self.radius[s]), "start": w0, "end": w1, **self._searched(s),
            "ellipse_confidence": self.confidence,
            **{c: row[c] for c in _COVERAGE_FIELDS},
            "ellipse_confidence_stated": self.confidence_stated,
            **{k: None if outside else int(row[k]) for k in _SUMMARY_COUNTS},
            **{k: float(row[k]) for k in _SUMMARY_FIGURES},
            # outside the coverage a probability would be a false answer: none is given
            **{k: np.nan if outside else float(row[k]) for k in ("max_p_within", "max_p_within_stroke", "p_any_within")},
            "include_likely_ic": bool(self.include_likely_ic), "contacts_independent": True,
            "strokes_of_a_contact_combined": True, "n_ellipse_from_default": int(row["n_default"]),
            "context_km": CONTEXT_KM,
        }
        shape = self.shapes.get(s)
        if shape is not None:
            for k in ("parcel_area_km2", "max_p_within_parcel", "p_any_within_parcel"):
                summary[k] = np.nan if outside and k != "parcel_area_km2" else float(row[k])
        if r_s is not None and row["coverage"] == "inside":
            summary["p_unrecorded"] = r_s["p_unrecorded"]
            summary["p_unrecorded_upper"] = r_s["p_unrecorded_upper"]
        else:
            r_s = None  # outside or partly outside the coverage: the residual is not stated
        sentence = _sentence(name, float(self.radius[s]), summary, best, r_s, w0, w1, self.tz,
                             self.include_likely_ic, shape)
        if with_tables:
            mine = self.cand[self.cand["site_index"].to_numpy() == s].drop(columns=["site_index"]).reset_index(drop=True)
            cmine = self.ccand[self.ccand["site_index"].to_numpy() == s].drop(columns=["site_index"]).reset_index(drop=True)
        else:
            mine, cmine = self.cand.iloc[:0], self.ccand.iloc[:0]
        return SiteResult(name=name, candidates=mine, summary=summary, sentence=sentence, residual=r_s, contacts=cmine)


def _run(index, cindex, sites, config, include_likely_ic, detection_efficiency, de_source, coverage,
         parcels_given=None) -> _Run:
    """The site check of every row of `sites` (``name, latitude, longitude, radius_km``, optional
    ``start``, ``end``, ``parcel_file``)."""
    from .io.sites import read_parcel

    lat = sites["latitude"].to_numpy(dtype=float)
    lon = sites["longitude"].to_numpy(dtype=float)
    radius = sites["radius_km"].to_numpy(dtype=float)
    _validate_site(lat, lon, radius, where="sites table" if len(sites) > 1 else "site")
    n = len(sites)
    t0, t1 = _window_bounds(index, None, None, n)
    for col, arr in (("start", t0), ("end", t1)):
        if col in sites.columns:
            t = pd.to_datetime(sites[col], utc=True)
            ok = t.notna().to_numpy()
            arr[ok] = _time_ns(t[ok])
    de, src = _resolve_de(config, detection_efficiency, de_source)
    shapes = dict(parcels_given or {})
    if not parcels_given and "parcel_file" in sites.columns:
        for i, pf in enumerate(sites["parcel_file"].fillna("").astype(str)):
            if pf:
                shapes[i] = read_parcel(pf)
    parcels = {i: _parcel_in_plane(shp, lat[i], lon[i]) for i, shp in shapes.items()}
    extra = None
    if parcels:
        extra = np.zeros(n)
        for i, (_p, ext) in parcels.items():
            extra[i] = ext
    lo, hi = np.iinfo(np.int64).min, np.iinfo(np.int64).max
    cov = None
    asked = (t0, t1)  # the period as asked (shown and stated); t0, t1 become the part searched
    if coverage is not None:
        from .coverage import check_places

        a0 = np.where(t0 == lo, coverage.t0.value, t0)
        a1 = np.maximum(np.where(t1 == hi, coverage.t1.value, t1), a0)  # an open end before a late start: an instant
        asked = (a0, a1)
        cov = check_places(coverage, lat, lon, radius, a0, a1)
        # The search keeps to what can be answered: the period met with the window and coverage;
        # nothing is searched outside.
        out_ = cov["coverage"].to_numpy() == "outside"
        t0 = np.maximum(a0, coverage.t0.value)
        t1 = np.where(out_, t0 - 1, np.minimum(a1, coverage.t1.value))
    cand = _candidates(index, lat, lon, radius, t0, t1, extra, parcels or None)
    ccand = _candidates(cindex, lat, lon, radius, t0, t1, extra, parcels or None)
    ccand["n_strokes"] = cindex.strokes["n_strokes"].to_numpy()[ccand["stroke_row"].to_numpy()]
    summ, resid = _summaries(index, cand, ccand, lat, lon, radius, t0, t1, include_likely_ic, de, src,
                             parcels or None)
    summ["n_default"] = np.bincount(cand["site_index"].to_numpy(), weights=cand["ellipse_from_default"].to_numpy(dtype=float),
                                    minlength=n)
    for c in _COVERAGE_FIELDS:
        summ[c] = cov[c].to_numpy() if cov is not None else {"coverage": "inside"}.get(c, "not_checked" if "source" in c else "")
    if parcels:  # a site point off its own parcel is a likely mistake in one of the two
        import shapely

        warn = summ["coverage_warning"].to_numpy().astype(object)
        for i, (polys, _extent) in parcels.items():
            off_km = float(shapely.distance(shapely.Point(0.0, 0.0), shapely.MultiPolygon(polys)))
            if off_km > 0.005:
                w = (f"the site point lies {1000.0 * off_km:.0f} m outside its parcel: check the site's coordinates "
                     "or the parcel file")
                warn[i] = f"{warn[i]} {w[0].upper()}{w[1:]}" if warn[i] else w
        summ["coverage_warning"] = warn
    tz = config.time_zone if config is not None else None
    return _Run(index=index, cand=cand, ccand=ccand, summ=summ, resid=resid, sites=sites, lat=lat, lon=lon,
                radius=radius, t0=asked[0], t1=asked[1], s0=t0, s1=t1,
                confidence_stated=bool(config is not None and config.is_given("", "ellipse_confidence")), tz=tz, include_likely_ic=include_likely_ic, shapes=shapes,
                confidence=index.confidence)


def _extent(index, how):
    if index.t_ns.size == 0:
        return pd.NaT
    return pd.Timestamp(int(index.t_min_ns if how == "min" else index.t_max_ns), tz="UTC")


def check_sites(strokes, sites: pd.DataFrame, config=None, *, include_likely_ic=False, detection_efficiency=None,
                de_source=None, index: StrokeIndex | None = None, contact_index: StrokeIndex | None = None,
                sentences: bool = True, return_candidates: bool = False, coverage=None):
    """Check many sites in one pass over k-d trees of the strokes and of the ground contacts.

    Parameters
    ----------
    strokes : DataFrame
        Grouped stroke table (may be None when the indexes are given).
    sites : DataFrame
        ``name, latitude, longitude, radius_km`` and optional ``start, end`` (UTC timestamps,
        NaT = open), ``parcel_file`` (:func:`debrief.io.sites.read_sites` gives this form).
        Rows without ``radius_km`` (crew-only sites) are left out.
    config, include_likely_ic, detection_efficiency, de_source, index, contact_index, coverage :
        As for :func:`check_site`.
    sentences : bool
        Also write each site's sentence (slower for very many sites).
    return_candidates : bool
        Also return the candidate strokes with a ``site`` column.

    Returns
    -------
    DataFrame
        One row per site with :data:`SITES_COLUMNS` (+ parcel figures where a parcel is given);
        with `return_candidates`, ``(summary, candidates)``.
    """
    for c in ("name", "latitude", "longitude", "radius_km"):
        if c not in sites.columns:
            raise InputError(f"the sites table lacks the column {c!r}")
    s = sites[np.isfinite(sites["radius_km"].to_numpy(dtype=float))].reset_index(drop=True)
    if index is None:
        index = StrokeIndex(strokes, config)
    if contact_index is None:
        contact_index = build_contact_index(index.strokes, config, include_likely_ic)
    run = _run(index, contact_index, s, config, include_likely_ic, detection_efficiency, de_source, coverage)
    n = len(s)
    summ = run.summ
    out = pd.DataFrame({"name": s["name"].to_numpy(), "latitude": run.lat, "longitude": run.lon, "radius_km": run.radius})
    lo, hi = np.iinfo(np.int64).min, np.iinfo(np.int64).max
    out["start"] = pd.to_datetime(np.where(run.t0 == lo, np.datetime64("NaT"), run.t0.astype("datetime64[ns]")), utc=True)
    out["end"] = pd.to_datetime(np.where(run.t1 == hi, np.datetime64("NaT"), run.t1.astype("datetime64[ns]")), utc=True)
    none = (run.s1 < run.s0) | (run.s0 == lo) | (run.s1 == hi)
    out["searched_start"] = pd.to_datetime(np.where(none, np.datetime64("NaT"), run.s0.astype("datetime64[ns]")), utc=True)
    out["searched_end"] = pd.to_datetime(np.where(none, np.datetime64("NaT"), run.s1.astype("datetime64[ns]")), utc=True)
    outside = summ["coverage"].to_numpy() == "outside"
    inside = summ["coverage"].to_numpy() == "inside"
    for c in _COVERAGE_FIELDS + ("n_candidates", "n_ground_candidates",
              "n_ground_within", "n_contacts", "nearest_km", "max_p_within", "max_p_within_stroke", "p_any_within",
              "n_set_aside_within", "set_aside_nearest_km", "set_aside_peak_ka", "nearest_ground_km",
              "max_abs_peak_ka_context"):
        out[c] = summ[c].to_numpy()
    # Outside the coverage nothing was searched: no counts, no figures, no probabilities (never "0").
    for c in ("max_p_within", "max_p_within_stroke", "p_any_within", "nearest_km", "set_aside_nearest_km",
              "set_aside_peak_ka", "nearest_ground_km", "max_abs_peak_ka_context"):
        out[c] = np.where(outside, np.nan, out[c].to_numpy(dtype=float))
    for c in ("n_candidates", "n_ground_candidates", "n_ground_within", "n_contacts", "n_set_aside_within"):
        out[c] = pd.array(np.where(outside, 0, out[c].to_numpy()), dtype="Int64")
        out.loc[outside, c] = pd.NA
    for c in ("p_unrecorded", "p_unrecorded_upper"):
        out[c] = np.where(inside, run.resid[c], np.nan) if run.resid is not None else np.nan
    if run.shapes:
        for c in ("parcel_area_km2", "max_p_within_parcel", "p_any_within_parcel"):
            out[c] = summ[c].to_numpy()
    out["sentence"] = [run.result(i).sentence for i in range(n)] if sentences else ""
    cols = [c for c in SITES_COLUMNS if c in out.columns] + [c for c in out.columns if c not in SITES_COLUMNS]
    out = out[cols]
    if return_candidates:
        c = run.cand.copy()
        c.insert(0, "site", out["name"].to_numpy()[c["site_index"].to_numpy()])
        return out, c.drop(columns=["site_index"])
    return out


def candidates_geojson(result: SiteResult, parcel=None, n_outline: int = 36) -> dict:
    """GeoJSON (RFC 7946) FeatureCollection: the site circle, candidates, their ellipses, parcel.

    Ellipses are drawn at their reported confidence, in the site's azimuthal equidistant plane.
    """
    s = result.summary
    plane = LocalPlane(s["latitude"], s["longitude"])
    t = np.linspace(0, 2 * np.pi, 73)
    # RFC 7946 right-hand rule: exterior rings counter-clockwise (x = r cos t, y = r sin t)
    cy, cx = plane.to_latlon(s["radius_km"] * np.cos(t), s["radius_km"] * np.sin(t))
    feats = [{"type": "Feature", "properties": {"kind": "site_circle", "name": result.name, "radius_km": s["radius_km"]},
              "geometry": {"type": "Polygon", "coordinates": [np.column_stack([cx, cy]).round(7).tolist()]}},
             {"type": "Feature", "properties": {"kind": "site", "name": result.name},
              "geometry": {"type": "Point", "coordinates": [s["longitude"], s["latitude"]]}}]
    if parcel is not None:
        import shapely

        feats.append({"type": "Feature", "properties": {"kind": "parcel", "name": result.name},
                      "geometry": shapely.geometry.mapping(shapely.orient_polygons(parcel, exterior_cw=False))})
    c = result.candidates
    for row in c.itertuples(index=False):
        props = {"kind": "stroke", "time": iso_utc(row.time), "peak_current_ka": float(row.peak_current_ka),
                 "type": row.type, "flash_id": int(row.flash_id), "ground_contact": int(row.ground_contact),
                 "distance_km": round(float(row.distance_km), 4), "bearing_deg": round(float(row.bearing_deg), 2),
                 "p_within": float(row.p_within)}
        feats.append({"type": "Feature", "properties": props,
                      "geometry": {"type": "Point", "coordinates": [float(row.longitude), float(row.latitude)]}})
        a = row.semi_major_km if np.isfinite(getattr(row, "semi_major_km", np.nan)) else None
        if row.ellipse_from_default or a is None:
            k = math.sqrt(-2.0 * math.log(1.0 - result.summary["ellipse_confidence"]))
            a = b = math.sqrt(row.sxx_km2) * k
            br = 0.0
        else:
            b, br = row.semi_minor_km, row.major_bearing_deg
        ex, ey = ellipse_outline_xy(a, b, br, n_outline)
        ly, lx = plane.to_latlon(row.dx_km + ex, row.dy_km + ey)
        ring = np.column_stack([lx, ly])[::-1]  # the outline runs clockwise; RFC 7946 wants counter-clockwise
        ring = np.vstack([ring, ring[:1]]).round(7).tolist()
        feats.append({"type": "Feature", "properties": {"kind": "error_ellipse", "time": props["time"],
                                                         "confidence": result.summary["ellipse_confidence"]},
                      "geometry": {"type": "Polygon", "coordinates": [ring]}})
    return {"type": "FeatureCollection", "features": feats}

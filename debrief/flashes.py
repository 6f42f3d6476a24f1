"""Stroke-to-flash grouping: ground strokes (and, apart, cloud pulses) grouped into flashes.

A lightning location network reports strokes; a flash is the set of strokes that came down the
same or nearby channels within about a second. Networks group them with a time-and-distance rule
(Cummins et al. 1998): a stroke joins a flash when it comes at most ``max_interval_ms`` after the
flash's previous stroke, at most ``max_duration_ms`` after its first stroke, lies at most
``max_distance_km`` from its first stroke, and the flash has fewer than ``max_strokes`` strokes.
Every criterion is a ``[grouping]`` setting of event.toml (``debrief.config``).

In a busy storm several flashes are open at once in different cells. A stroke joins the open
flash, of its own type, whose first stroke is nearest among those that satisfy every criterion
(ties: the flash that started first); otherwise it starts a new flash. Distance is always to the
flash's FIRST stroke, so a chain of strokes can never walk a flash from one cell into another.

Distance method: great-circle distance on the mean Earth sphere (R = 6371.0088 km) between the
stroke and the flash's first stroke, the same distance as the haversine formula. It needs no
projection centre, so it is the same over a county or a continent. Against the WGS84 geodesic
(Karney 2013) it is off by -0.45 % to +0.57 % depending on latitude and direction (the sphere's
radius lies between the ellipsoid's meridional and prime-vertical radii), i.e. under 60 m at
10 km, well inside the network's own location error of a few hundred metres. It is computed as
the chord between unit vectors, which grows with the arc, against the chord of each limit
(2 R sin(s / 2R)), so the loop needs no trigonometry. Distances equal within ``TIE_KM``
(1e-9 km) are ties, so that mirror-image positions tie despite rounding.

Cloud pulses (type ``IC``) are grouped by the same kernel with the same criteria, but only with
each other: a cloud pulse never joins a ground flash or the reverse. Both kinds share one flash
table, ``flash_id`` from 1 in first-stroke time order.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [Cummins1998] Grouping criteria 1 s / 0.5 s / 10 km (the 15-stroke cap is from memory).
.. [Thottappillil1992] Multiple ground terminations of one flash.
.. [Poelman2021] Ground strike points of negative flashes.
.. [CumminsMurphy2009] Low-amplitude positive reports are often cloud pulses (from memory).
.. [Biagi2007] Low-amplitude positive reports (from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pyarrow as pa
from numba import njit

from .config import EventConfig, load_event_config, with_overrides
from .errors import InputError
from .geodesy import MEAN_EARTH_RADIUS_KM

#: Columns `group_flashes` adds to the stroke table.
STROKE_COLUMNS = ("flash_id", "stroke_order", "ground_contact", "likely_ic")

#: Columns of the flash table, in order.
FLASH_COLUMNS = (
    "flash_id", "type", "time", "latitude", "longitude", "polarity", "mixed_polarity",
    "multiplicity", "interstroke_ms", "duration_ms", "ground_contacts", "max_abs_peak_ka",
    "likely_ic", "cc_suspect", "cc_reasons",
)

#: What a reader of grouped flashes should keep in mind (for reports and command help).
CAUTIONS = (
    "Flashes are built from the network's strokes with a time-and-distance convention "
    "(Cummins et al. 1998); they are a record of what the network reported, not a certainty.",
    "The network misses some strokes (stroke detection efficiency well below 100 %), so "
    "multiplicities and interstroke intervals from network data run low against video studies.",
    "Location error (typically a few hundred metres) can split one channel into two ground "
    "contacts or merge nearby contacts; ground-contact counts are estimates.",
    "Positive ground reports below likely_ic_below_ka are often cloud pulses misclassified "
    "(Cummins & Murphy 2009, from memory); they are kept and flagged likely_ic.",
)

_REQUIRED = ("time", "latitude", "longitude", "peak_current_ka", "type")
_TYPES = ("CG", "IC")  # kind code 0 = ground stroke, 1 = cloud pulse


# --------------------------------------------------------------------------------------------
# Settings and input
# --------------------------------------------------------------------------------------------

def grouping_criteria(config: EventConfig | None = None, **criteria) -> dict:
    """The ``[grouping]`` settings of `config` (defaults when None) with keyword overrides.

    Parameters
    ----------
    config : EventConfig, optional
        Event settings; only its ``["grouping"]`` section is used.
    **criteria
        ``max_interval_ms``, ``max_duration_ms``, ``max_distance_km``, ``max_strokes``,
        ``same_polarity``, ``ground_contact_km``, ``likely_ic_below_ka``; they win over `config`.
        An unknown name or a value out of range is an :class:`InputError`.

    Returns
    -------
    dict
        The whole ``[grouping]`` section, validated.
    """
    cfg = config if config is not None else load_event_config(None)
    if criteria:
        cfg = with_overrides(cfg, {f"grouping.{k}": v for k, v in criteria.items()})
    return dict(cfg["grouping"])


def _prepare(strokes: pd.DataFrame):
    """Check the stroke table and return it sorted, with the arrays the grouping needs."""
    if not isinstance(strokes, pd.DataFrame):
        raise InputError("strokes must be a table (pandas DataFrame) as read_strokes returns it")
    missing = [c for c in _REQUIRED if c not in strokes.columns]
    if missing:
        raise InputError(f"stroke table lacks column(s) {', '.join(missing)}; read it with debrief.io.strokes.read_strokes")
    time = pd.Series(strokes["time"])
    if not isinstance(time.dtype, pd.DatetimeTZDtype) and not pd.api.types.is_datetime64_dtype(time.dtype):
        raise InputError("stroke column 'time' must hold date-times (datetime64, UTC)")
    if time.dt.tz is None:  # stroke times without an offset are UTC (project convention)
        time = time.dt.tz_localize("UTC")
    time = time.dt.tz_convert("UTC").dt.as_unit("ns")
    if time.isna().any():
        raise InputError(f"stroke table has {int(time.isna().sum())} row(s) without a time")
    t_ns = time.array.asi8.copy()
    lat = strokes["latitude"].to_numpy(dtype=float)
    lon = strokes["longitude"].to_numpy(dtype=float)
    ip = strokes["peak_current_ka"].to_numpy(dtype=float)
    for name, v in (("latitude", lat), ("longitude", lon), ("peak_current_ka", ip)):
        bad = ~np.isfinite(v)
        if bad.any():
            raise InputError(f"stroke column '{name}' has {int(bad.sum())} missing or non-finite value(s)")
    kind = _kind_codes(strokes["type"])
    src = strokes["source_row"].to_numpy(dtype=np.int64) if "source_row" in strokes.columns else None
    order = _stable_order(t_ns, src, lat, lon, ip)
    out = strokes.drop(columns=[c for c in STROKE_COLUMNS if c in strokes.columns])
    if order is not None:
        out = out.take(order)
        t_ns, lat, lon, ip, kind = t_ns[order], lat[order], lon[order], ip[order], kind[order]
    out = out.reset_index(drop=True)
    if order is not None or out["time"].dtype != time.dtype:
        out["time"] = pd.DatetimeIndex(t_ns.view("datetime64[ns]"), tz="UTC")
    return out, t_ns, lat, lon, ip, kind


def _kind_codes(types: pd.Series) -> np.ndarray:
    """0 for CG, 1 for IC; anything else is an InputError."""
    if isinstance(types.dtype, pd.CategoricalDtype):
        cats = [str(c) for c in types.cat.categories]
        lookup = np.array([_TYPES.index(c) if c in _TYPES else -1 for c in cats] + [-1], dtype=np.int8)
        kind = lookup[types.cat.codes.to_numpy()]  # code -1 (missing) picks the last entry, -1
        if (kind < 0).any():
            other = sorted({str(v) for v in types[kind < 0]})[:3]
            raise InputError(f"stroke column 'type' must be CG or IC, found {', '.join(map(repr, other))}")
        return kind
    text = types.astype(str).to_numpy()
    kind = np.full(len(text), -1, dtype=np.int8)
    for code, name in enumerate(_TYPES):
        kind[text == name] = code
    if (kind < 0).any():
        other = sorted(set(text[kind < 0]))[:3]
        raise InputError(f"stroke column 'type' must be CG or IC, found {', '.join(map(repr, other))}")
    return kind


def _stable_order(t_ns, src, lat, lon, ip):
    """Row order by time, then source_row, latitude, longitude, peak current; None if already so.

    A full five-key lexsort is costly at a million rows, so sort by time alone and re-sort only
    the rows whose time is tied with another's.
    """
    n = len(t_ns)
    if n < 2:
        return None
    dt = np.diff(t_ns)
    if (dt > 0).all():
        return None
    if (dt >= 0).all() and src is not None and (np.diff(src)[dt == 0] > 0).all():
        return None  # as read_strokes delivers it: time order, ties by source_row
    order = np.argsort(t_ns)  # not stable: tied rows are re-sorted on every key below
    ts = t_ns[order]
    tie = np.zeros(n, dtype=bool)
    eq = ts[1:] == ts[:-1]
    tie[1:] |= eq
    tie[:-1] |= eq
    if tie.any():
        pos = np.flatnonzero(tie)
        sub = order[pos]
        keys = [ip[sub], lon[sub], lat[sub]]
        if src is not None:
            keys.append(src[sub])
        keys.append(t_ns[sub])
        order[pos] = sub[np.lexsort(keys)]
    return order


# --------------------------------------------------------------------------------------------
# The fast kernel
# --------------------------------------------------------------------------------------------

#: Two distances that differ by no more than this (km) are a tie: positions that are mirror
#: images give chords that differ only by rounding, about 1e-12 km.
TIE_KM = 1e-9


def _unit_vectors(lat_deg: np.ndarray, lon_deg: np.ndarray):
    """Unit vectors (x, y, z) on the sphere of WGS84 latitudes/longitudes, degrees."""
    phi, lam = np.radians(lat_deg), np.radians(lon_deg)
    c = np.cos(phi)
    return c * np.cos(lam), c * np.sin(lam), np.sin(phi)


def _unit_chord2(arc_km: float) -> float:
    """Squared chord, on the unit sphere, of a great-circle arc of `arc_km` on the mean sphere.

    Chord = 2 sin(s / 2R): a stroke is within `arc_km` of another exactly when the squared
    chord between their unit vectors is at most this.
    """
    c = 2.0 * math.sin(0.5 * arc_km / MEAN_EARTH_RADIUS_KM)
    return c * c


@njit(cache=True)
def _group_kernel(t, ux, uy, uz, kind, pos, absip,
                  max_iv, max_dur, c2_max, max_n, same_pol, gc2, r_km, tie_km):  # pragma: no cover - compiled
    """Sequential grouping over time-sorted strokes; criteria arrays are indexed by kind.

    The open flashes of each kind are packed in small arrays (slot j of row kind) holding what
    the scan needs, so that it stays in cache; a slot is refilled from the end when its flash
    closes. A stroke scans only the open flashes of its own kind. Distances are chords between
    unit vectors (no trigonometry in the loop), compared as squares until a candidate passes.
    """
    n = t.shape[0]
    flash = np.empty(n, np.int64)
    order = np.empty(n, np.int64)
    contact = np.empty(n, np.int64)
    f_first = np.empty(n, np.int64)
    f_last_t = np.empty(n, np.int64)
    f_count = np.empty(n, np.int64)
    f_contacts = np.empty(n, np.int64)
    f_mixed = np.empty(n, np.bool_)
    f_maxabs = np.empty(n, np.float64)
    f_head = np.empty(n, np.int64)     # newest contact-founding stroke of the flash
    c_prev = np.empty(n, np.int64)     # founder -> the flash's previous founder (-1: none)
    a_f = np.empty((2, n), np.int64)   # flash number
    a_t0 = np.empty((2, n), np.int64)  # first stroke time
    a_tl = np.empty((2, n), np.int64)  # last stroke time
    a_n = np.empty((2, n), np.int64)   # strokes so far
    a_x = np.empty((2, n), np.float64)  # first stroke's unit vector
    a_y = np.empty((2, n), np.float64)
    a_z = np.empty((2, n), np.float64)
    a_pos = np.empty((2, n), np.bool_)
    n_active = np.zeros(2, np.int64)
    n_flash = 0
    for i in range(n):
        ti = t[i]
        k = kind[i]
        dur, iv, cap, c2k, sp = max_dur[k], max_iv[k], max_n[k], c2_max[k], same_pol[k]
        xi, yi, zi, pos_i = ux[i], uy[i], uz[i], pos[i]
        best = -1
        best_slot = -1
        best_d = np.inf
        m = n_active[k]
        j = 0
        while j < m:
            if ti - a_t0[k, j] > dur or ti - a_tl[k, j] > iv or a_n[k, j] >= cap:
                # closed for good (strokes only come later): refill the slot from the end
                m -= 1
                a_f[k, j] = a_f[k, m]
                a_t0[k, j] = a_t0[k, m]
                a_tl[k, j] = a_tl[k, m]
                a_n[k, j] = a_n[k, m]
                a_x[k, j] = a_x[k, m]
                a_y[k, j] = a_y[k, m]
                a_z[k, j] = a_z[k, m]
                a_pos[k, j] = a_pos[k, m]
                if best_slot == m:
                    best_slot = j
                continue
            dx = a_x[k, j] - xi
            dy = a_y[k, j] - yi
            dz = a_z[k, j] - zi
            c2 = dx * dx + dy * dy + dz * dz
            if c2 <= c2k and (not sp or a_pos[k, j] == pos_i):
                d = r_km * math.sqrt(c2)
                f = a_f[k, j]
                if d < best_d - tie_km or (d <= best_d + tie_km and f < best):
                    best = f
                    best_slot = j
                    best_d = d
            j += 1
        if best < 0:
            f = n_flash
            n_flash += 1
            f_first[f] = i
            f_count[f] = 1
            f_maxabs[f] = absip[i]
            f_last_t[f] = ti
            f_mixed[f] = False
            a_f[k, m] = f
            a_t0[k, m] = ti
            a_tl[k, m] = ti
            a_n[k, m] = 1
            a_x[k, m] = xi
            a_y[k, m] = yi
            a_z[k, m] = zi
            a_pos[k, m] = pos_i
            n_active[k] = m + 1
            flash[i] = f
            order[i] = 1
            if k == 0:
                f_contacts[f] = 1
                contact[i] = 1
                f_head[f] = i
                c_prev[i] = -1
            else:
                f_contacts[f] = 0
                contact[i] = 0
            continue
        n_active[k] = m
        f = best
        a_tl[k, best_slot] = ti
        a_n[k, best_slot] += 1
        f_count[f] += 1
        flash[i] = f
        order[i] = f_count[f]
        f_last_t[f] = ti
        if absip[i] > f_maxabs[f]:
            f_maxabs[f] = absip[i]
        if pos_i != pos[f_first[f]]:
            f_mixed[f] = True
        if k != 0:
            contact[i] = 0
            continue
        # nearest earlier contact within reach (ties: the older contact), else a new one;
        # founders are walked newest first, so a tie moves the choice to the older
        c_best = 0
        c_d = np.inf
        c = f_head[f]
        while c >= 0:
            dx = ux[c] - xi
            dy = uy[c] - yi
            dz = uz[c] - zi
            c2 = dx * dx + dy * dy + dz * dz
            if c2 <= gc2:
                d = r_km * math.sqrt(c2)
                if d <= c_d + tie_km:
                    c_d = d
                    c_best = contact[c]
            c = c_prev[c]
        if c_best == 0:
            f_contacts[f] += 1
            contact[i] = f_contacts[f]
            c_prev[i] = f_head[f]
            f_head[f] = i
        else:
            contact[i] = c_best
    return (flash, order, contact, f_first[:n_flash].copy(), f_last_t[:n_flash].copy(),
            f_count[:n_flash].copy(), f_contacts[:n_flash].copy(), f_mixed[:n_flash].copy(),
            f_maxabs[:n_flash].copy())


@njit(cache=True)
def _interval_text(t, flash, order, f_count):  # pragma: no cover - compiled
    """Each flash's intervals as ASCII ms text joined by ';' (see :func:`_ms_text`).

    Returns the bytes and the offsets (n_flash + 1) of an Arrow string array.
    """
    n = t.shape[0]
    nf = f_count.shape[0]
    start = np.empty(nf, np.int64)
    acc = 0
    for f in range(nf):
        start[f] = acc
        acc += f_count[f]
    by_flash = np.empty(n, np.int64)
    for i in range(n):
        by_flash[start[flash[i]] + order[i] - 1] = t[i]
    buf = np.empty(max(n, 1) * 28, np.uint8)  # int64 ns as ms: <= 13 + 1 + 6 digits, + ';'
    offsets = np.empty(nf + 1, np.int64)
    digits = np.empty(20, np.uint8)
    p = 0
    for f in range(nf):
        offsets[f] = p
        for k in range(start[f] + 1, start[f] + f_count[f]):
            if k > start[f] + 1:
                buf[p] = 59  # ';'
                p += 1
            v = by_flash[k] - by_flash[k - 1]
            whole = v // 1000000
            frac = v % 1000000
            m = 0
            while True:
                digits[m] = 48 + whole % 10
                m += 1
                whole //= 10
                if whole == 0:
                    break
            for q in range(m - 1, -1, -1):
                buf[p] = digits[q]
                p += 1
            buf[p] = 46  # '.'
            p += 1
            keep = 6
            while keep > 1 and frac % 10 == 0:  # drop trailing zeros, keep one digit
                frac //= 10
                keep -= 1
            for q in range(keep - 1, -1, -1):
                buf[p + q] = 48 + frac % 10
                frac //= 10
            p += keep
    offsets[nf] = p
    return buf[:p].copy(), offsets


def _ms_text(interval_ns: int) -> str:
    """An interval in ns as ms text: ``55000000`` -> ``"55.0"``, ``123456789`` -> ``"123.456789"``."""
    text = f"{interval_ns // 1_000_000}.{interval_ns % 1_000_000:06d}".rstrip("0")
    return text + "0" if text.endswith(".") else text


def _arrow_text(data: np.ndarray, offsets: np.ndarray):
    """A pandas "str" array over the given UTF-8 bytes and int64 offsets, without copying."""
    arr = pa.LargeStringArray.from_buffers(len(offsets) - 1, pa.py_buffer(offsets), pa.py_buffer(data))
    return pd.array(arr, dtype="str")


def _labels(labels: list[str], codes: np.ndarray):
    """A pandas "str" array of ``labels[codes]``."""
    return pd.array(pa.array(labels).take(pa.array(np.asarray(codes, dtype=np.int8))), dtype="str")


# --------------------------------------------------------------------------------------------
# Public functions
# --------------------------------------------------------------------------------------------

def group_flashes(strokes: pd.DataFrame, config: EventConfig | None = None, **criteria):
    """Group strokes into flashes (ground strokes and cloud pulses apart, one flash table).

    Parameters
    ----------
    strokes : DataFrame
        The stroke table of DEVELOPERS.md (``time`` datetime64[ns, UTC], ``latitude``,
        ``longitude`` degrees, ``peak_current_ka`` signed kA, ``type`` CG/IC; ``source_row``
        when present breaks time ties). Times without a zone are taken as UTC.
    config : EventConfig, optional
        Event settings; its ``[grouping]`` section gives the criteria (defaults when None).
    **criteria
        Overrides of ``[grouping]`` keys, e.g. ``max_distance_km=5``; they win over `config`.

    Returns
    -------
    strokes_out : DataFrame
        Every input column, rows in time order (ties by ``source_row``, then latitude,
        longitude, peak current), index 0..n-1, plus ``flash_id`` (int64), ``stroke_order``
        (int64, 1 = first), ``ground_contact`` (int64, 1 = the first stroke's contact; 0 for
        cloud pulses) and ``likely_ic`` (bool: a ground stroke with positive peak current below
        ``likely_ic_below_ka``; still grouped as a ground stroke).
    flashes : DataFrame
        One row per flash, columns :data:`FLASH_COLUMNS`, ``flash_id`` from 1 in first-stroke
        time order. ``time``, ``latitude``, ``longitude``, ``polarity`` and ``likely_ic`` are
        the first stroke's; ``interstroke_ms`` lists the intervals in ms separated by ``;``
        (exact decimals of the ns times, trailing zeros dropped: ``"55.0;123.456789"``; empty
        for one stroke); ``duration_ms`` is last minus first stroke time;
        ``ground_contacts`` counts contacts (0 for cloud flashes); ``max_abs_peak_ka`` is the
        largest \\|Ip\\|; ``cc_suspect`` is False and ``cc_reasons`` empty until
        :func:`debrief.continuing_current.flag_continuing_current` fills them.

    Notes
    -----
    The rule is sequential, so it runs as one compiled pass over time-sorted strokes keeping the
    open flashes in a small list; a flash leaves the list once its first stroke is more than
    ``max_duration_ms`` old, its last stroke more than ``max_interval_ms`` old, or it is full.
    The cost is O(n x open flashes). Every criterion is inclusive (``<=``). Among the open
    flashes that satisfy every criterion the stroke joins the one whose first stroke is nearest;
    distances equal within :data:`TIE_KM` are a tie, won by the flash that started first.
    :func:`group_flashes_reference` is the same rule as a plain Python loop.

    A stroke opens a new ground contact when it is farther than ``ground_contact_km`` from the
    first stroke of every earlier contact of its flash, and otherwise belongs to the nearest one
    (ties: the older). The 1 km default sits below the observed separations of multiple
    terminations (geometric mean 1.7 km, Thottappillil et al. 1992; median first-stroke to new
    strike point 1.3-2.75 km, Poelman et al. 2021) and above typical location errors.

    References
    ----------
    Cummins et al. (1998) [Cummins1998]_ for the grouping criteria (15-stroke cap from memory);
    Thottappillil et al. (1992) [Thottappillil1992]_ and Poelman et al. (2021) [Poelman2021]_ for
    ground contacts; Cummins & Murphy (2009) [CumminsMurphy2009]_ and Biagi et al. (2007)
    [Biagi2007]_ for low-amplitude positive reports (from memory). See the module docstring.
    """
    crit = grouping_criteria(config, **criteria)
    out, t_ns, lat, lon, ip, kind = _prepare(strokes)
    n = len(out)
    if n == 0:
        return _empty_outputs(out)
    pos = ip > 0
    c = _kernel_criteria(crit)
    (flash, order, contact, f_first, f_last_t, f_count, f_contacts, f_mixed, f_maxabs) = _group_kernel(
        t_ns, *_unit_vectors(lat, lon), kind, pos, np.abs(ip), *c, MEAN_EARTH_RADIUS_KM, TIE_KM)
    likely = (kind == 0) & pos & (ip < crit["likely_ic_below_ka"])
    flashes = _flash_frame(
        t_ns=t_ns[f_first], lat=lat[f_first], lon=lon[f_first], kind=kind[f_first],
        positive=pos[f_first], mixed=f_mixed, multiplicity=f_count,
        interstroke=_arrow_text(*_interval_text(t_ns, flash, order, f_count)),
        duration_ms=(f_last_t - t_ns[f_first]) / 1e6, contacts=f_contacts, max_abs=f_maxabs,
        likely=likely[f_first])
    out["flash_id"] = flash + 1
    out["stroke_order"] = order
    out["ground_contact"] = contact
    out["likely_ic"] = likely
    return out, flashes


def _kernel_criteria(crit: dict):
    """Criteria as per-kind arrays (ground, cloud) in the kernel's units (ns, km)."""
    def pair(v, dtype):
        return np.array([v, v], dtype=dtype)
    return (
        pair(round(crit["max_interval_ms"] * 1e6), np.int64),
        pair(round(crit["max_duration_ms"] * 1e6), np.int64),
        pair(_unit_chord2(crit["max_distance_km"]), np.float64),
        pair(crit["max_strokes"], np.int64),
        pair(bool(crit["same_polarity"]), np.bool_),
        _unit_chord2(crit["ground_contact_km"]),
    )


def _flash_frame(*, t_ns, lat, lon, kind, positive, mixed, multiplicity, interstroke,
                 duration_ms, contacts, max_abs, likely) -> pd.DataFrame:
    n = len(t_ns)
    return pd.DataFrame({
        "flash_id": np.arange(1, n + 1, dtype=np.int64),
        "type": pd.Categorical.from_codes(np.asarray(kind, dtype=np.int8), categories=list(_TYPES)),
        "time": pd.DatetimeIndex(np.asarray(t_ns, dtype=np.int64).view("datetime64[ns]"), tz="UTC"),
        "latitude": np.asarray(lat, dtype=float),
        "longitude": np.asarray(lon, dtype=float),
        "polarity": _labels(["negative", "positive"], np.asarray(positive, dtype=bool)),
        "mixed_polarity": np.asarray(mixed, dtype=bool),
        "multiplicity": np.asarray(multiplicity, dtype=np.int64),
        "interstroke_ms": pd.array(interstroke, dtype="str"),
        "duration_ms": np.asarray(duration_ms, dtype=float),
        "ground_contacts": np.asarray(contacts, dtype=np.int64),
        "max_abs_peak_ka": np.asarray(max_abs, dtype=float),
        "likely_ic": np.asarray(likely, dtype=bool),
        "cc_suspect": np.zeros(n, dtype=bool),
        "cc_reasons": _labels([""], np.zeros(n, dtype=np.int8)),
    }, columns=list(FLASH_COLUMNS))


def _empty_outputs(out: pd.DataFrame):
    out = out.copy()
    out["flash_id"] = np.zeros(0, np.int64)
    out["stroke_order"] = np.zeros(0, np.int64)
    out["ground_contact"] = np.zeros(0, np.int64)
    out["likely_ic"] = np.zeros(0, bool)
    z = np.zeros(0)
    flashes = _flash_frame(t_ns=z.astype(np.int64), lat=z, lon=z, kind=z.astype(np.int8), positive=z.astype(bool),
                           mixed=z.astype(bool), multiplicity=z.astype(np.int64), interstroke=[],
                           duration_ms=z, contacts=z.astype(np.int64), max_abs=z, likely=z.astype(bool))
    return out, flashes


def group_flashes_reference(strokes: pd.DataFrame, config: EventConfig | None = None, **criteria):
    """The same rule as :func:`group_flashes`, as a plain per-stroke Python loop.

    Slow (use it on thousands of strokes, not millions); it exists so that tests can compare the
    compiled kernel against a version of the rule that reads like its description. Same
    parameters, returns and references as :func:`group_flashes`.
    """
    crit = grouping_criteria(config, **criteria)
    out, t_ns, lat, lon, ip, kind = _prepare(strokes)
    if len(out) == 0:
        return _empty_outputs(out)
    max_iv_ns = round(crit["max_interval_ms"] * 1e6)
    max_dur_ns = round(crit["max_duration_ms"] * 1e6)
    max_c2 = _unit_chord2(crit["max_distance_km"])
    contact_c2 = _unit_chord2(crit["ground_contact_km"])
    ux, uy, uz = _unit_vectors(lat, lon)

    def chord2(a, b):
        """Squared straight-line distance between strokes a and b through the unit sphere.

        It grows with the great-circle distance, so comparing it with the squared chord of a
        limit is the same as comparing the distance with the limit (same arithmetic as the kernel).
        """
        dx, dy, dz = ux[a] - ux[b], uy[a] - uy[b], uz[a] - uz[b]
        return dx * dx + dy * dy + dz * dz

    flashes = []  # each: {"strokes": [...], "contacts": [founder stroke, ...]}
    open_flashes = []  # numbers of the flashes still open, oldest first
    flash_of, order_of, contact_of = [], [], []
    for i in range(len(out)):
        best, best_d = None, math.inf
        for number in list(open_flashes):
            f = flashes[number]
            first, last = f["strokes"][0], f["strokes"][-1]
            if (t_ns[i] - t_ns[first] > max_dur_ns or t_ns[i] - t_ns[last] > max_iv_ns
                    or len(f["strokes"]) >= crit["max_strokes"]):
                open_flashes.remove(number)  # closed for good: strokes only come later
                continue
            if kind[first] != kind[i]:
                continue
            if crit["same_polarity"] and (ip[first] > 0) != (ip[i] > 0):
                continue
            c2 = chord2(first, i)
            if c2 > max_c2:
                continue
            d = MEAN_EARTH_RADIUS_KM * math.sqrt(c2)
            if d < best_d - TIE_KM:  # oldest first, so a tie keeps the earlier flash
                best, best_d = number, d
        if best is None:
            flashes.append({"strokes": [i], "contacts": [i] if kind[i] == 0 else []})
            open_flashes.append(len(flashes) - 1)
            flash_of.append(len(flashes) - 1)
            order_of.append(1)
            contact_of.append(1 if kind[i] == 0 else 0)
            continue
        f = flashes[best]
        f["strokes"].append(i)
        flash_of.append(best)
        order_of.append(len(f["strokes"]))
        if kind[i] != 0:
            contact_of.append(0)
            continue
        near, near_d = 0, math.inf
        for number, founder in enumerate(f["contacts"], start=1):
            c2 = chord2(founder, i)
            if c2 > contact_c2:
                continue
            d = MEAN_EARTH_RADIUS_KM * math.sqrt(c2)
            if d < near_d - TIE_KM:  # oldest first, so a tie keeps the older contact
                near, near_d = number, d
        if near == 0:
            f["contacts"].append(i)
            near = len(f["contacts"])
        contact_of.append(near)

    likely = [bool(kind[i] == 0 and ip[i] > 0 and ip[i] < crit["likely_ic_below_ka"]) for i in range(len(out))]
    rows = []
    for f in flashes:
        s = f["strokes"]
        first = s[0]
        rows.append(dict(
            t_ns=t_ns[first], lat=lat[first], lon=lon[first], kind=kind[first], positive=ip[first] > 0,
            mixed=any((ip[k] > 0) != (ip[first] > 0) for k in s), multiplicity=len(s),
            interstroke=";".join(_ms_text(int(t_ns[b] - t_ns[a])) for a, b in zip(s[:-1], s[1:])),
            duration_ms=(t_ns[s[-1]] - t_ns[first]) / 1e6, contacts=len(f["contacts"]),
            max_abs=max(abs(ip[k]) for k in s), likely=likely[first]))
    table = _flash_frame(**{k: [row[k] for row in rows] for k in rows[0]})
    out["flash_id"] = np.asarray(flash_of, dtype=np.int64) + 1
    out["stroke_order"] = np.asarray(order_of, dtype=np.int64)
    out["ground_contact"] = np.asarray(contact_of, dtype=np.int64)
    out["likely_ic"] = np.asarray(likely, dtype=bool)
    return out, table


def select_window(strokes: pd.DataFrame, flashes: pd.DataFrame, start=None, end=None):
    """Flashes whose first stroke is in [start, end], and the strokes of those flashes.

    The whole file is grouped first, so a flash that starts inside the window keeps all its
    strokes (also those after `end`) and one that starts before `start` is left out whole;
    ``flash_id`` values are kept as numbered over the whole file.

    Parameters
    ----------
    strokes, flashes : DataFrame
        As :func:`group_flashes` returns them.
    start, end : Timestamp or ISO 8601 text with a UTC offset, optional
        Inclusive bounds on the first-stroke time; None leaves that side open.

    Returns
    -------
    (strokes, flashes) : DataFrames, index 0..n-1, in the input's row order.
    """
    if "flash_id" not in strokes.columns or "time" not in flashes.columns:
        raise InputError("select_window needs the strokes and flashes that group_flashes returns")
    t = flashes["time"]
    keep = np.ones(len(flashes), dtype=bool)
    if start is not None:
        keep &= (t >= _utc(start, "start")).to_numpy()
    if end is not None:
        keep &= (t <= _utc(end, "end")).to_numpy()
    sel = flashes[keep].reset_index(drop=True)
    ids = sel["flash_id"].to_numpy()
    fid = strokes["flash_id"].to_numpy()
    if len(ids) and ids[-1] - ids[0] == len(ids) - 1 and (np.diff(ids) == 1).all():
        in_window = (fid >= ids[0]) & (fid <= ids[-1])  # the usual case: a run of ids, no hashing
    else:
        in_window = np.isin(fid, ids)
    return strokes[in_window].reset_index(drop=True), sel


def _utc(ts, what: str) -> pd.Timestamp:
    try:
        t = pd.Timestamp(ts)
    except (ValueError, TypeError):
        raise InputError(f"window {what}: cannot read {ts!r} as a time") from None
    if t.tzinfo is None:
        raise InputError(f"window {what}: {ts!r} has no UTC offset; give a time zone-aware time")
    return t.tz_convert("UTC")

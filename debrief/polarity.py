"""Polarity and multiplicity statistics, and peak-current distributions beside the IEEE reference.

Every function takes the stroke and/or flash tables of :func:`debrief.flashes.group_flashes`
(DEVELOPERS.md) for whatever window the caller selected, and returns a small table. Nothing is
printed. The CLI (``debrief summary``), the report and the widgets call these same functions.

What is counted where:

- Flash statistics default to ground flashes (``type="CG"``); ``type=None`` takes every flash.
- ``likely_ic`` flashes (a positive ground report below the low-amplitude threshold, probably a
  cloud pulse) are *kept* in tables (multiplicity, interstroke, histograms, medians) and *left
  out* of the positive share unless asked (``include_likely_ic=True``), as in DESIGN.md.
- Peak currents are compared as magnitudes |Ip| in kA; polarity is the sign.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [IEEE1410] First negative stroke P(I >= i) = 1 / (1 + (i/31)^2.6); subsequent
       1 / (1 + (i/12)^2.7) (equations from memory; check values computed from them in
       tests/test_polarity.py).
.. [IEEE1243] The same distributions for transmission lines (from memory).
.. [Rakov2003] Multiplicity of negative flashes (from memory).
.. [Saba2010] Interstroke intervals, positive flashes.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import InputError

POLARITIES = ("negative", "positive")

#: Default |Ip| histogram bin edges, kA: 0-200 kA in 5 kA bins (an overflow bin is added).
DEFAULT_EDGES_KA = np.arange(0.0, 200.0 + 5.0, 5.0)


def _need(frame: pd.DataFrame, columns, what: str):
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise InputError(f"{what} needs the column(s) {', '.join(missing)} of the grouped tables (group_flashes)")


def _of_type(frame: pd.DataFrame, type, columns=None):
    """Rows of `type` (None: all), only `columns` (all when None) to keep the copy small."""
    if type is not None and type not in ("CG", "IC"):
        raise InputError(f"type must be 'CG', 'IC' or None, got {type!r}")
    cols = [c for c in (columns or frame.columns) if c in frame.columns]
    sub = frame[cols]
    if type is None:
        return sub
    return sub[(frame["type"] == type).to_numpy()]


def _bin_labels(max_bin: int):
    return [str(k) for k in range(1, max_bin)] + [f"{max_bin}+"]


def multiplicity_table(flashes: pd.DataFrame, type: str | None = "CG", max_bin: int = 10,
                       include_likely_ic: bool = True) -> pd.DataFrame:
    """Flash counts by multiplicity (strokes per flash) and polarity.

    Parameters
    ----------
    flashes : DataFrame
        Flash table (``type``, ``polarity``, ``multiplicity``, ``likely_ic``).
    type : {"CG", "IC", None}
        Which flashes (default ground flashes; None: all).
    max_bin : int
        The last row collects every flash of this many strokes or more (``"10+"``).
    include_likely_ic : bool
        Keep likely-cloud positive reports (default True: tables keep them).

    Returns
    -------
    DataFrame
        Index ``multiplicity`` with labels ``"1"``, ``"2"``, ..., ``"10+"``; columns
        ``negative_count``, ``negative_percent``, ``positive_count``, ``positive_percent``,
        ``all_count``, ``all_percent``. Percent is of that polarity's flashes (0 when there are
        none). The means are in :func:`mean_multiplicity`.
    """
    _need(flashes, ("type", "polarity", "multiplicity", "likely_ic"), "multiplicity_table")
    if max_bin < 2:
        raise InputError("max_bin must be at least 2")
    f = _of_type(flashes, type, ("polarity", "multiplicity", "likely_ic"))
    if not include_likely_ic:
        f = f[~f["likely_ic"].to_numpy(dtype=bool)]
    m = np.minimum(f["multiplicity"].to_numpy(dtype=np.int64), max_bin)
    pol = f["polarity"].astype(str).to_numpy()
    out = pd.DataFrame(index=pd.Index(_bin_labels(max_bin), name="multiplicity"))
    for name, sel in (("negative", pol == "negative"), ("positive", pol == "positive"), ("all", np.ones(len(m), bool))):
        counts = np.bincount(m[sel], minlength=max_bin + 1)[1:]
        total = counts.sum()
        out[f"{name}_count"] = counts.astype(np.int64)
        out[f"{name}_percent"] = 100.0 * counts / total if total else np.zeros(max_bin)
    return out


def mean_multiplicity(flashes: pd.DataFrame, type: str | None = "CG", include_likely_ic: bool = True) -> pd.DataFrame:
    """Mean multiplicity and single-stroke share per polarity.

    Returns
    -------
    DataFrame
        Index ``negative``, ``positive``, ``all``; columns ``flashes``, ``mean_multiplicity``
        (NaN without flashes), ``single_stroke_share`` (0-1).
    """
    _need(flashes, ("type", "polarity", "multiplicity", "likely_ic"), "mean_multiplicity")
    f = _of_type(flashes, type, ("polarity", "multiplicity", "likely_ic"))
    if not include_likely_ic:
        f = f[~f["likely_ic"].to_numpy(dtype=bool)]
    m = f["multiplicity"].to_numpy(dtype=float)
    pol = f["polarity"].astype(str).to_numpy()
    rows = {}
    for name, sel in (("negative", pol == "negative"), ("positive", pol == "positive"), ("all", np.ones(len(m), bool))):
        k = int(sel.sum())
        rows[name] = {
            "flashes": k,
            "mean_multiplicity": float(m[sel].mean()) if k else np.nan,
            "single_stroke_share": float((m[sel] == 1).mean()) if k else np.nan,
        }
    return pd.DataFrame.from_dict(rows, orient="index").astype({"flashes": np.int64})


def _intervals(flashes: pd.DataFrame):
    """All interstroke intervals (ms) and the row position of the flash each belongs to."""
    text = flashes["interstroke_ms"].fillna("").astype(str).to_numpy()
    nonempty = text != ""
    if not nonempty.any():
        return np.zeros(0), np.zeros(0, dtype=np.int64)
    parts = np.char.count(text[nonempty].astype(str), ";") + 1
    values = np.array(";".join(text[nonempty].tolist()).split(";"), dtype=float)
    owner = np.repeat(np.flatnonzero(nonempty), parts)
    return values, owner


def interstroke_summary(flashes: pd.DataFrame, type: str | None = "CG") -> pd.DataFrame:
    """Interstroke intervals per polarity: count, geometric mean and median (ms).

    The polarity is the flash's (its first stroke's). Geometric mean because intervals are close
    to lognormal and the published figures are geometric means (about 60 ms for negative
    flashes, Saba et al. 2010; 57 ms, Thottappillil et al. 1992; 94 ms for positive, Saba 2010).

    Returns
    -------
    DataFrame
        Index ``negative``, ``positive``, ``all``; columns ``flashes`` (with two or more
        strokes), ``intervals``, ``zero_intervals`` (two reports at the same instant: counted,
        in the median, but left out of the geometric mean, whose log they would break),
        ``geometric_mean_ms`` and ``median_ms`` (NaN without intervals).

    References
    ----------
    [Saba2010]; [Thottappillil1992].
    """
    _need(flashes, ("type", "polarity", "interstroke_ms"), "interstroke_summary")
    f = _of_type(flashes, type, ("polarity", "interstroke_ms"))
    values, owner = _intervals(f)
    pol = f["polarity"].astype(str).to_numpy()[owner]
    if np.isnan(values).any() or (values < 0).any():
        raise InputError("interstroke_ms holds a missing or negative interval; regroup the strokes")
    rows = {}
    for name, sel in (("negative", pol == "negative"), ("positive", pol == "positive"), ("all", np.ones(len(values), bool))):
        v = values[sel]
        pos = v[v > 0]
        rows[name] = {
            "flashes": int(len(np.unique(owner[sel]))),
            "intervals": int(len(v)),
            "zero_intervals": int(len(v) - len(pos)),
            "geometric_mean_ms": float(np.exp(np.log(pos).mean())) if len(pos) else np.nan,
            "median_ms": float(np.median(v)) if len(v) else np.nan,
        }
    return pd.DataFrame.from_dict(rows, orient="index").astype(
        {"flashes": np.int64, "intervals": np.int64, "zero_intervals": np.int64})


def _ground_strokes(strokes: pd.DataFrame, type, include_likely_ic: bool, what: str):
    _need(strokes, ("type", "peak_current_ka", "stroke_order"), what)
    s = _of_type(strokes, type, ("peak_current_ka", "stroke_order", "likely_ic"))
    if not include_likely_ic and "likely_ic" in s.columns:
        s = s[~s["likely_ic"].to_numpy(dtype=bool)]
    ip = s["peak_current_ka"].to_numpy(dtype=float)
    if np.isnan(ip).any():
        raise InputError(f"{what}: some strokes have no peak current; the stroke reader should have rejected them")
    first = s["stroke_order"].to_numpy() == 1
    return ip, first


def polarity_histogram(strokes: pd.DataFrame, bin_edges_ka=None, type: str | None = "CG",
                       include_likely_ic: bool = True) -> pd.DataFrame:
    """|Ip| counts by stroke polarity and first vs subsequent stroke.

    Nothing is left out silently: strokes at or above the last edge fall in an overflow row
    (``bin_hi_ka`` = inf) and strokes below the first edge in an underflow row (``bin_lo_ka`` = 0)
    when the first edge is above 0. The counts add up to the number of strokes selected.

    Parameters
    ----------
    strokes : DataFrame
        Grouped strokes (``type``, ``peak_current_ka``, ``stroke_order``).
    bin_edges_ka : array_like, optional
        Increasing |Ip| edges, kA (default 0-200 kA in 5 kA bins). Bins are [lo, hi).
    type : {"CG", "IC", None}
        Which strokes (default ground strokes).
    include_likely_ic : bool
        Keep likely-cloud positive reports (default True).

    Returns
    -------
    DataFrame
        Columns ``bin_lo_ka``, ``bin_hi_ka``, ``negative_first``, ``negative_subsequent``,
        ``positive_first``, ``positive_subsequent``; one row per bin.
    """
    edges = DEFAULT_EDGES_KA if bin_edges_ka is None else np.asarray(bin_edges_ka, dtype=float)
    if edges.ndim != 1 or len(edges) < 2 or not np.all(np.diff(edges) > 0) or edges[0] < 0 or not np.isfinite(edges).all():
        raise InputError("bin_edges_ka must be at least two increasing, finite, non-negative values")
    ip, first = _ground_strokes(strokes, type, include_likely_ic, "polarity_histogram")
    full = edges
    if edges[0] > 0:
        full = np.concatenate(([0.0], full))
    full = np.concatenate((full, [np.inf]))
    a = np.abs(ip)
    idx = np.searchsorted(full, a, side="right") - 1  # bin [lo, hi)
    nb = len(full) - 1
    out = pd.DataFrame({"bin_lo_ka": full[:-1], "bin_hi_ka": full[1:]})
    for pol, psel in (("negative", ip < 0), ("positive", ip > 0)):
        for part, fsel in (("first", first), ("subsequent", ~first)):
            out[f"{pol}_{part}"] = np.bincount(idx[psel & fsel], minlength=nb).astype(np.int64)
    return out


def positive_share(flashes: pd.DataFrame, include_likely_ic: bool = False) -> dict:
    """Share of ground flashes that are positive (polarity of the first stroke).

    Parameters
    ----------
    flashes : DataFrame
        Flash table (``type``, ``polarity``, ``likely_ic``).
    include_likely_ic : bool
        Count likely-cloud positive reports as positive ground flashes (default False: they are
        left out of numerator and denominator, and their number is returned).

    Returns
    -------
    dict
        ``ground_flashes``, ``positive``, ``negative``, ``likely_ic`` (how many such flashes
        there were), ``likely_ic_left_out`` (how many were left out), ``share`` (0-1, NaN
        without flashes).
    """
    _need(flashes, ("type", "polarity", "likely_ic"), "positive_share")
    f = _of_type(flashes, "CG", ("polarity", "likely_ic"))
    lic = f["likely_ic"].to_numpy(dtype=bool)
    n_lic = int(lic.sum())
    if not include_likely_ic:
        f = f[~lic]
    pol = f["polarity"].astype(str).to_numpy()
    pos, neg = int((pol == "positive").sum()), int((pol == "negative").sum())
    n = pos + neg
    return {
        "ground_flashes": n, "positive": pos, "negative": neg, "likely_ic": n_lic,
        "likely_ic_left_out": 0 if include_likely_ic else n_lic,
        "share": pos / n if n else float("nan"),
    }


def first_subsequent_medians(strokes: pd.DataFrame, type: str | None = "CG",
                             include_likely_ic: bool = True) -> pd.DataFrame:
    """Median |Ip| of first and subsequent strokes per stroke polarity (kA).

    Returns
    -------
    DataFrame
        Index ``negative``, ``positive``; columns ``first_count``, ``first_median_ka``,
        ``subsequent_count``, ``subsequent_median_ka`` (NaN without strokes).
    """
    ip, first = _ground_strokes(strokes, type, include_likely_ic, "first_subsequent_medians")
    rows = {}
    for pol, psel in (("negative", ip < 0), ("positive", ip > 0)):
        f, s = np.abs(ip[psel & first]), np.abs(ip[psel & ~first])
        rows[pol] = {
            "first_count": len(f), "first_median_ka": float(np.median(f)) if len(f) else np.nan,
            "subsequent_count": len(s), "subsequent_median_ka": float(np.median(s)) if len(s) else np.nan,
        }
    return pd.DataFrame.from_dict(rows, orient="index").astype({"first_count": np.int64, "subsequent_count": np.int64})


# ---- the IEEE reference distributions

#: (median kA, exponent) of the IEEE Std 1410 / 1243 peak-current distributions (from memory).
IEEE_PARAMETERS = {"first": (31.0, 2.6), "subsequent": (12.0, 2.7)}


def ieee_exceedance(i_ka, kind: str = "first"):
    """IEEE probability that a negative stroke's peak current is at least `i_ka`.

    ``P(I >= i) = 1 / (1 + (i / M)^a)`` with M = 31 kA, a = 2.6 for first strokes and M = 12 kA,
    a = 2.7 for subsequent strokes.

    Parameters
    ----------
    i_ka : array_like
        |Ip|, kA (>= 0).
    kind : {"first", "subsequent"}

    Returns
    -------
    ndarray
        Probability (0-1].

    References
    ----------
    [IEEE1410] and [IEEE1243] (equations from memory).
    """
    if kind not in IEEE_PARAMETERS:
        raise InputError(f"kind must be 'first' or 'subsequent', got {kind!r}")
    m, a = IEEE_PARAMETERS[kind]
    i = np.asarray(i_ka, dtype=float)
    return 1.0 / (1.0 + (np.maximum(i, 0.0) / m) ** a)


def ieee_conditional_cdf(i_ka, kind: str = "first", floor_ka: float = 0.0):
    """IEEE CDF of |Ip| given |Ip| >= `floor_ka`: ``1 - P(I >= i) / P(I >= floor)`` (0 below the floor).

    References
    ----------
    [IEEE1410] / [IEEE1243] (from memory), conditioned on the detection floor.
    """
    i = np.asarray(i_ka, dtype=float)
    p_floor = ieee_exceedance(floor_ka, kind)
    return np.where(i < floor_ka, 0.0, 1.0 - ieee_exceedance(i, kind) / p_floor)


def ks_distance(values, cdf) -> tuple[float, float]:
    """Kolmogorov-Smirnov distance sup |F_emp - F_ref| of `values` against the callable `cdf`.

    Returns
    -------
    (distance, at) : the distance and the value where it is reached (NaN, NaN when empty).
    """
    x = np.sort(np.asarray(values, dtype=float))
    n = len(x)
    if n == 0:
        return float("nan"), float("nan")
    f = np.asarray(cdf(x), dtype=float)
    k = np.arange(1, n + 1)
    d_plus = k / n - f
    d_minus = f - (k - 1) / n
    ip, im = int(np.argmax(d_plus)), int(np.argmax(d_minus))
    if d_plus[ip] >= d_minus[im]:
        return float(d_plus[ip]), float(x[ip])
    return float(d_minus[im]), float(x[im])


def compare_reference(strokes: pd.DataFrame, floor_ka: float | None = None, config=None) -> pd.DataFrame:
    """The storm's negative ground-stroke |Ip| beside the IEEE first and subsequent distributions.

    Only negative ground strokes at or above the detection floor are compared, and the
    reference is conditioned on I >= floor (the network samples weak strokes incompletely).
    The measure is the Kolmogorov-Smirnov *distance* sup |F_emp - F_ref|, not a p-value: with
    thousands of strokes every p-value is near zero for any real storm (no storm is a sample
    from a design distribution), whereas the distance says how far apart the curves are.

    Parameters
    ----------
    strokes : DataFrame
        Grouped strokes (``type``, ``peak_current_ka``, ``stroke_order``).
    floor_ka : float, optional
        Detection floor, kA; default ``[statistics] detection_floor_ka`` of `config` (10 kA).
    config : EventConfig, optional

    Returns
    -------
    DataFrame
        Index ``first``, ``subsequent``; columns ``floor_ka``, ``strokes`` (compared),
        ``below_floor`` (left out), ``median_ka`` (of those compared), ``reference_median_ka``
        (of the conditioned reference), ``ks_distance``, ``at_ka`` (where the distance is reached).

    References
    ----------
    [IEEE1410] / [IEEE1243] (from memory); Kolmogorov-Smirnov statistic as in
    ``scipy.stats.kstest``.
    """
    if floor_ka is None:
        from .config import load_event_config

        cfg = config if config is not None else load_event_config(None)
        floor_ka = float(cfg["statistics"]["detection_floor_ka"])
    if not np.isfinite(floor_ka) or floor_ka < 0:
        raise InputError(f"detection floor must be a non-negative number of kA, got {floor_ka!r}")
    ip, first = _ground_strokes(strokes, "CG", True, "compare_reference")
    neg = ip < 0
    rows = {}
    for kind, sel in (("first", neg & first), ("subsequent", neg & ~first)):
        a = np.abs(ip[sel])
        keep = a[a >= floor_ka]
        d, at = ks_distance(keep, lambda x, k=kind: ieee_conditional_cdf(x, k, floor_ka))
        m, e = IEEE_PARAMETERS[kind]
        # conditional median: P(I >= i) = P(I >= floor) / 2
        ref_med = m * (2.0 / ieee_exceedance(floor_ka, kind) - 1.0) ** (1.0 / e)
        rows[kind] = {
            "floor_ka": float(floor_ka), "strokes": int(len(keep)), "below_floor": int(len(a) - len(keep)),
            "median_ka": float(np.median(keep)) if len(keep) else np.nan,
            "reference_median_ka": float(ref_med), "ks_distance": d, "at_ka": at,
        }
    return pd.DataFrame.from_dict(rows, orient="index").astype({"strokes": np.int64, "below_floor": np.int64})


def exceedance_curve(strokes: pd.DataFrame, kind: str = "first", floor_ka: float = 10.0, currents_ka=None) -> pd.DataFrame:
    """Empirical and IEEE P(|Ip| >= i | |Ip| >= floor) at `currents_ka` (for figures).

    Returns
    -------
    DataFrame
        Columns ``current_ka``, ``observed``, ``ieee`` (probabilities 0-1).
    """
    ip, first = _ground_strokes(strokes, "CG", True, "exceedance_curve")
    sel = (ip < 0) & (first if kind == "first" else ~first)
    a = np.sort(np.abs(ip[sel]))
    a = a[a >= floor_ka]
    i = np.asarray(np.arange(floor_ka, 200.0 + 1.0, 1.0) if currents_ka is None else currents_ka, dtype=float)
    obs = (len(a) - np.searchsorted(a, i, side="left")) / len(a) if len(a) else np.full(len(i), np.nan)
    ref = ieee_exceedance(i, kind) / ieee_exceedance(floor_ka, kind)
    return pd.DataFrame({"current_ka": i, "observed": obs, "ieee": np.where(i < floor_ka, 1.0, ref)})

"""Continuing-current *suspicion* flags from stroke data, by explicit and configurable rules.

A lightning location network reports impulsive return strokes; it cannot measure a continuing
current (the tens to hundreds of amperes, or kiloamperes in positive flashes, that can flow for
tens to hundreds of milliseconds after a stroke and that burn through conductors, start fires
and damage equipment). What stroke data can show are the circumstances in which published
observations found long continuing currents. Each rule below is tied to such an observation;
a flag is a suspicion to follow up, never a measurement.

Rules (thresholds are ``[continuing_current]`` keys of event.toml, defaults in ``config.py``):

``single_positive``
    A positive ground flash of one stroke with peak current at or above ``positive_min_ka``
    (20 kA) that is not ``likely_ic``. Saba et al. (2010) found long continuing current in 75%
    of positive flashes, and large-peak positives usually carry one; 81% of positives are
    single-stroke.
``long_gap_after_weak``
    In a negative ground flash, an interval of at least ``min_interval_ms`` (100 ms) after a
    negative stroke with \\|Ip\\| below ``negative_max_abs_ka`` (20 kA), where the next stroke
    continues the same ground contact. Strokes that start continuing current tend to have lower
    peak currents, and strong negatives (Ip <= -20 kA) are rarely followed by long continuing
    current (Rakov & Uman 1990; Saba et al. 2006); a continuing current holds the channel, so
    the next stroke follows it to the same point after a long pause. Long continuing current is
    40 ms or more (Kitagawa et al. 1962; Ballarotti et al. 2005, from memory); 100 ms leaves
    room for ordinary intervals (geometric mean about 60 ms, Saba et al. 2010).

References
----------
Titles and page numbers are from memory; the DOI of [1] is confirmed (REFERENCES.md section 7).

.. [1] Saba, M. M. F., Schulz, W., Warner, T. A., Campos, L. Z. S., Schumann, C., Krider, E. P.,
       Cummins, K. L. and Orville, R. E. (2010). High-speed video observations of positive
       lightning flashes to ground. J. Geophys. Res. 115, D24201, doi:10.1029/2010JD014330.
.. [2] Saba, M. M. F., Pinto Jr., O. and Ballarotti, M. G. (2006). Relation between lightning
       return stroke peak current and following continuing current. Geophys. Res. Lett. 33,
       L23807.
.. [3] Rakov, V. A. and Uman, M. A. (1990). Some properties of negative cloud-to-ground
       lightning flashes versus stroke order. J. Geophys. Res. 95(D5), 5447-5453.
.. [4] Kitagawa, N., Brook, M. and Workman, E. J. (1962). Continuing currents in cloud-to-ground
       lightning discharges. J. Geophys. Res. 67, 637-647 (from memory).
.. [5] Ballarotti, M. G., Saba, M. M. F. and Pinto Jr., O. (2005). High-speed camera
       observations of negative ground flashes on a millisecond-scale. Geophys. Res. Lett. 32,
       L23802 (from memory).
"""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
import pandas as pd

from .errors import InputError

#: code -> (plain explanation, source). Read-only.
REASONS = MappingProxyType({
    "single_positive": MappingProxyType({
        "explanation": "single-stroke positive ground flash with a strong peak current: such flashes "
                       "usually carry a long continuing current",
        "source": "Saba et al. 2010, J. Geophys. Res. 115, D24201, doi:10.1029/2010JD014330 "
                  "(75% of positive flashes had long continuing current)",
    }),
    "long_gap_after_weak": MappingProxyType({
        "explanation": "a long pause after a weak negative stroke, the next stroke at the same ground "
                       "contact: the pattern of a continuing current holding the channel",
        "source": "Rakov & Uman 1990, J. Geophys. Res. 95; Saba et al. 2006, Geophys. Res. Lett. 33 "
                  "(continuing-current strokes have lower peaks); long continuing current >= 40 ms, "
                  "Kitagawa et al. 1962 (from memory)",
    }),
})

#: The blind spots of these flags, for every view that shows them.
CAUTIONS = (
    "A continuing-current flag is a suspicion from stroke data, not a measurement: networks do "
    "not measure continuing current.",
    "A missed stroke (stroke detection efficiency is below 100%) makes an ordinary pair of "
    "intervals look like one long interval.",
    "Location error can make one ground contact look like two (or two like one), and a stroke "
    "reported as a cloud pulse splits its flash: either can hide or fake the same-contact pattern.",
    "A continuing current after a flash's last stroke leaves no trace in stroke data: a negative "
    "flash can carry one and raise no flag.",
    "Rules and thresholds are configurable heuristics tied to published observations; a flag "
    "needs confirmation by qualified people (damage evidence, other records).",
)

RULE_KEYS = ("positive_min_ka", "negative_max_abs_ka", "min_interval_ms")


def rules_from(config=None, **rules) -> dict:
    """The ``[continuing_current]`` thresholds of `config` (defaults when None) with overrides."""
    from .config import load_event_config, with_overrides

    unknown = set(rules) - set(RULE_KEYS)
    if unknown:
        raise InputError(f"unknown continuing-current rule setting(s): {', '.join(sorted(unknown))} "
                         f"(known: {', '.join(RULE_KEYS)})")
    cfg = config if config is not None else load_event_config(None)
    cfg = with_overrides(cfg, {f"continuing_current.{k}": v for k, v in rules.items()})
    return {k: float(cfg["continuing_current"][k]) for k in RULE_KEYS}


def suspect_gaps(strokes: pd.DataFrame, flashes: pd.DataFrame, config=None, **rules) -> pd.DataFrame:
    """The intervals that raise ``long_gap_after_weak``, one row each.

    Parameters
    ----------
    strokes, flashes : DataFrame
        Grouped strokes (``flash_id``, ``stroke_order``, ``time``, ``peak_current_ka``,
        ``ground_contact``) and flashes (``flash_id``, ``type``, ``polarity``).
    config : EventConfig, optional
    **rules
        Overrides of ``positive_min_ka``, ``negative_max_abs_ka``, ``min_interval_ms``.

    Returns
    -------
    DataFrame
        ``flash_id``, ``stroke_order`` (the weak stroke), ``peak_current_ka``, ``interval_ms``
        (to the next stroke), ``ground_contact``, ``time`` (of the weak stroke).

    References
    ----------
    Rakov & Uman (1990); Saba et al. (2006); Kitagawa et al. (1962). See the module docstring.
    """
    r = rules_from(config, **rules)
    for col in ("flash_id", "stroke_order", "time", "peak_current_ka", "ground_contact"):
        if col not in strokes.columns:
            raise InputError(f"continuing-current flags need the grouped stroke table (missing column {col!r})")
    neg_ids = flashes.loc[((flashes["type"] == "CG") & (flashes["polarity"] == "negative")).to_numpy(), "flash_id"]
    s = strokes[np.isin(strokes["flash_id"].to_numpy(), neg_ids.to_numpy())]
    s = s.sort_values(["flash_id", "stroke_order"], kind="stable")
    fid = s["flash_id"].to_numpy()
    t = pd.DatetimeIndex(s["time"]).as_unit("ns").asi8
    ip = s["peak_current_ka"].to_numpy(dtype=float)
    gc = s["ground_contact"].to_numpy()
    same_next = np.zeros(len(s), dtype=bool)
    same_next[:-1] = fid[:-1] == fid[1:]
    interval_ms = np.full(len(s), np.nan)
    interval_ms[:-1] = (t[1:] - t[:-1]) / 1e6
    next_gc = np.empty_like(gc)
    next_gc[:-1] = gc[1:]
    if len(gc):
        next_gc[-1] = -1
    hit = (same_next & (ip < 0) & (np.abs(ip) < r["negative_max_abs_ka"])
           & (interval_ms >= r["min_interval_ms"]) & (next_gc == gc))
    out = pd.DataFrame({
        "flash_id": fid[hit], "stroke_order": s["stroke_order"].to_numpy()[hit],
        "peak_current_ka": ip[hit], "interval_ms": interval_ms[hit], "ground_contact": gc[hit],
        "time": pd.DatetimeIndex(s["time"])[hit],
    })
    return out


def flag_continuing_current(strokes: pd.DataFrame, flashes: pd.DataFrame, config=None, **rules) -> pd.DataFrame:
    """Flag flashes suspected of a long continuing current.

    Parameters
    ----------
    strokes : DataFrame
        Grouped strokes (``group_flashes``); may hold more flashes than `flashes`.
    flashes : DataFrame
        Flash table (``flash_id``, ``type``, ``polarity``, ``multiplicity``,
        ``max_abs_peak_ka``, ``likely_ic``).
    config : EventConfig, optional
        ``[continuing_current]`` thresholds (defaults when None).
    **rules
        Overrides: ``positive_min_ka`` (kA), ``negative_max_abs_ka`` (kA), ``min_interval_ms``.

    Returns
    -------
    DataFrame
        A copy of `flashes` with ``cc_suspect`` (bool) and ``cc_reasons`` (codes of
        :data:`REASONS` joined by ``;`` in rule order, empty when not suspected).

    References
    ----------
    Saba et al. (2010); Saba et al. (2006); Rakov & Uman (1990); Kitagawa et al. (1962). See the
    module docstring for the rules and :data:`CAUTIONS` for their blind spots.
    """
    r = rules_from(config, **rules)
    for col in ("flash_id", "type", "polarity", "multiplicity", "max_abs_peak_ka", "likely_ic"):
        if col not in flashes.columns:
            raise InputError(f"continuing-current flags need the flash table of group_flashes (missing column {col!r})")
    out = flashes.copy()
    single_pos = ((out["type"] == "CG") & (out["polarity"] == "positive") & (out["multiplicity"] == 1)
                  & (out["max_abs_peak_ka"] >= r["positive_min_ka"]) & ~out["likely_ic"].astype(bool)).to_numpy()
    gaps = suspect_gaps(strokes, flashes, config, **rules)
    long_gap = np.isin(out["flash_id"].to_numpy(), gaps["flash_id"].to_numpy())
    codes = np.where(single_pos, "single_positive", "")
    codes = np.where(long_gap, np.where(single_pos, "single_positive;long_gap_after_weak", "long_gap_after_weak"), codes)
    out["cc_suspect"] = single_pos | long_gap
    out["cc_reasons"] = pd.array(codes.astype(object), dtype="str")
    return out

"""Continuing-current *suspicion* flags from stroke data, by explicit and configurable rules.

A lightning location network reports impulsive return strokes; it cannot measure a continuing
current (the tens to hundreds of amperes, or kiloamperes in positive flashes, that can flow for
tens to hundreds of milliseconds after a stroke and that burn through conductors, start fires
and damage equipment). What stroke data can show are the circumstances in which published
observations found long continuing currents. Each rule below is tied to such an observation;
a flag is a suspicion to follow up, never a measurement. A rule is neither necessary nor
sufficient: flashes with a continuing current can raise no flag, and flags fall on flashes
without one.

Rules (thresholds are ``[continuing_current]`` keys of event.toml, defaults in ``config.py``):

``single_positive``
    A positive ground flash of one stroke with peak current at or above ``positive_min_ka``
    (20 kA) that is not ``likely_ic``. Saba et al. (2010) found long continuing current in 75%
    of positive flashes, and large-peak positives usually carry one; 81% of positives are
    single-stroke.
``positive_multi_stroke``
    A positive ground flash (first stroke positive, not ``likely_ic``) of two or more strokes
    with a positive ground stroke at or above ``positive_min_ka``. The 75% of Saba et al.
    (2010) is of all positive flashes, not only single-stroke ones.
``long_gap_after_weak``
    In a negative ground flash, an interval of at least ``min_interval_ms`` (100 ms) after a
    negative stroke with \\|Ip\\| below ``negative_max_abs_ka`` (20 kA), where the next stroke
    continues the same ground contact. Strokes that start continuing current tend to have lower
    peak currents, and strong negatives (Ip <= -20 kA) are rarely followed by long continuing
    current (Rakov & Uman 1990; Saba et al. 2006); a continuing current holds the channel, so
    the next stroke follows it to the same point after a long pause. Long continuing current is
    40 ms or more (Kitagawa et al. 1962; Ballarotti et al. 2005, from memory); 100 ms leaves
    room for ordinary intervals (geometric mean about 60 ms, Saba et al. 2010). Ordinary
    intervals still reach 100 ms often: in synthetic storms without continuing current
    (:data:`NO_CC_FLAG_RATE`, constructed here) the rule flags about a fifth of negative
    ground flashes.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [Saba2010] Long continuing current in 75% of positive flashes; 81% of positives single-stroke;
       interstroke intervals.
.. [Saba2006] Strokes followed by long continuing current have lower peak currents.
.. [Rakov1990] Properties of negative strokes versus stroke order (weak strokes before long
       continuing current).
.. [Kitagawa1962] Long continuing current: 40 ms or more (from memory).
.. [Ballarotti2005] Long continuing current: 40 ms or more (from memory).
"""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
import pandas as pd

from .errors import InputError

#: How often ``long_gap_after_weak`` fires without any continuing current, measured here on
#: constructed storms (not a published figure): the share of the observed negative ground flashes
#: it flags in :func:`debrief.synth.generate_storm` storms with ``negative_cc_share=0`` (default
#: settings otherwise: 2,000 flashes in 4 h), grouped by :func:`debrief.flashes.group_flashes`
#: at the default criteria, for each seed in ``seeds``. The generator's positive flashes still
#: carry continuing current, but after their last stroke, so it leaves no trace in the stroke data
#: and does not touch this negative-flash rule. Measured 19.9-20.6 %; a test re-measures it.
NO_CC_FLAG_RATE = MappingProxyType({
    "code": "long_gap_after_weak", "seeds": (1, 2, 3, 4, 5), "n_flashes": 2000, "duration_h": 4.0,
    "low": 0.19, "high": 0.21,
})

#: code -> (plain explanation, source). Read-only; the order is the order of codes in cc_reasons.
REASONS = MappingProxyType({
    "single_positive": MappingProxyType({
        "explanation": "single-stroke positive ground flash with a strong peak current: such flashes "
                       "usually carry a long continuing current",
        "source": "Saba et al. 2010 [Saba2010] (75% of positive flashes had long continuing current)",
    }),
    "positive_multi_stroke": MappingProxyType({
        "explanation": "positive ground flash of two or more strokes with a strong positive stroke: most "
                       "positive flashes, not only single-stroke ones, carry a long continuing current",
        "source": "Saba et al. 2010 [Saba2010] (75% of positive flashes had long continuing current)",
    }),
    "long_gap_after_weak": MappingProxyType({
        "explanation": "a long pause after a weak negative stroke, the next stroke at the same ground "
                       "contact: the pattern of a continuing current holding the channel. Ordinary "
                       "pauses make the same pattern: in synthetic storms without continuing current "
                       f"(constructed here: debrief.synth seeds {NO_CC_FLAG_RATE['seeds'][0]}-"
                       f"{NO_CC_FLAG_RATE['seeds'][-1]}, {NO_CC_FLAG_RATE['n_flashes']:,} flashes in "
                       f"{NO_CC_FLAG_RATE['duration_h']:g} h) this rule flags "
                       f"{100 * NO_CC_FLAG_RATE['low']:.0f}-{100 * NO_CC_FLAG_RATE['high']:.0f}% of "
                       "negative ground flashes",
        "source": "Rakov & Uman 1990 [Rakov1990]; Saba et al. 2006 [Saba2006] (continuing-current "
                  "strokes have lower peaks); long continuing current >= 40 ms, Kitagawa et al. 1962 "
                  "[Kitagawa1962] (from memory)",
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
    [Rakov1990]; [Saba2006]; [Kitagawa1962]. See the module docstring.
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
        :data:`REASONS` joined by ``;`` in the order of :data:`REASONS`, empty when not
        suspected).

    References
    ----------
    [Saba2010]; [Saba2006]; [Rakov1990]; [Kitagawa1962]. See the module docstring for the rules
    and :data:`CAUTIONS` for their blind spots.
    """
    r = rules_from(config, **rules)
    for col in ("flash_id", "type", "polarity", "multiplicity", "max_abs_peak_ka", "likely_ic"):
        if col not in flashes.columns:
            raise InputError(f"continuing-current flags need the flash table of group_flashes (missing column {col!r})")
    for col in ("flash_id", "type", "peak_current_ka"):
        if col not in strokes.columns:
            raise InputError(f"continuing-current flags need the grouped stroke table (missing column {col!r})")
    out = flashes.copy()
    positive = ((out["type"] == "CG") & (out["polarity"] == "positive") & ~out["likely_ic"].astype(bool)).to_numpy()
    mult = out["multiplicity"].to_numpy()
    single_pos = positive & (mult == 1) & (out["max_abs_peak_ka"] >= r["positive_min_ka"]).to_numpy()
    # multi-stroke: a strong positive ground stroke anywhere in the flash (flashes may mix polarities)
    ip = strokes["peak_current_ka"].to_numpy(dtype=float)
    strong = (strokes["type"] == "CG").to_numpy() & (ip > 0) & (ip >= r["positive_min_ka"])
    if "likely_ic" in strokes.columns:
        strong &= ~strokes["likely_ic"].to_numpy(dtype=bool)
    multi_pos = positive & (mult >= 2) & np.isin(out["flash_id"].to_numpy(), strokes["flash_id"].to_numpy()[strong])
    gaps = suspect_gaps(strokes, flashes, config, **rules)
    long_gap = np.isin(out["flash_id"].to_numpy(), gaps["flash_id"].to_numpy())
    hits = {"single_positive": single_pos, "positive_multi_stroke": multi_pos, "long_gap_after_weak": long_gap}
    codes = np.full(len(out), "", dtype=object)
    for code in REASONS:  # codes in the order of REASONS
        codes = np.where(hits[code], np.where(codes == "", code, codes + ";" + code), codes)
    out["cc_suspect"] = single_pos | multi_pos | long_gap
    out["cc_reasons"] = pd.array(codes.astype(object), dtype="str")
    return out

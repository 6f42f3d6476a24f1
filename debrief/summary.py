"""The storm summary of an analysis window: counts, polarity, multiplicity, currents, flags.

Every number comes from the core functions (:mod:`debrief.polarity`,
:mod:`debrief.continuing_current`) over the flashes of the window (first-stroke time), so the CLI's
``summary``, the report and the widgets show the same numbers.
"""

from __future__ import annotations

import math

import numpy as np

from . import continuing_current as cc
from . import polarity as pol
from .errors import InputError
from .timeutil import format_times, iso_utc

GENERAL_CAUTIONS = (
    "This summary is a record of what a lightning location network reported, not a warning "
    "and not a safety clearance.",
    "Networks miss some strokes and flashes (detection efficiency below 100%) and locate each "
    "stroke only within its error ellipse; counts, multiplicities and intervals carry both.",
    "Multiplicities from network data run below those seen on video because subsequent strokes "
    "are missed more often than first strokes.",
    "Conclusions about damage, outages or safety need qualified people and defer to local codes "
    "and licensed practice.",
)


def summarise(analysis, top: int = 10) -> dict:
    """Every number of the summary, as a JSON-ready dict (NaN as None).

    Parameters
    ----------
    analysis : debrief.analysis.Analysis
        The event and window (flashes by first-stroke time).
    top : int
        How many continuing-current suspects to list (largest peak current first).
    """
    if top < 0:
        raise InputError("--top must be 0 or more")
    event, start, end = analysis.event, analysis.start, analysis.end
    cfg = event.config
    strokes, flashes = analysis.flash_strokes, analysis.flashes
    is_cg_s = (strokes["type"] == "CG").to_numpy()
    is_cg_f = (flashes["type"] == "CG").to_numpy()
    share = pol.positive_share(flashes)
    mult = pol.multiplicity_table(flashes)
    means = pol.mean_multiplicity(flashes)
    inter = pol.interstroke_summary(flashes)
    med = pol.first_subsequent_medians(strokes)
    ref = pol.compare_reference(strokes, config=cfg)
    rules = cc.rules_from(cfg)
    gaps = cc.suspect_gaps(strokes, flashes, cfg)
    sus = flashes[flashes["cc_suspect"].to_numpy(dtype=bool)]
    # the longest suspicious gap of each flash, with the weak stroke's current before it
    longest = gaps.sort_values(["flash_id", "interval_ms"]).groupby("flash_id").tail(1).set_index("flash_id")
    top_rows = sus.sort_values(["max_abs_peak_ka", "flash_id"], ascending=[False, True]).head(top)
    by_reason = {code: int(sus["cc_reasons"].str.split(";").apply(lambda c, k=code: k in c).sum()) for code in cc.REASONS}
    de = cfg.get("flash_detection_efficiency")
    de_src = cfg.get("flash_detection_efficiency_source")
    semi = strokes["semi_major_km"].to_numpy(dtype=float) if "semi_major_km" in strokes else np.zeros(0)
    semi = semi[~np.isnan(semi)]
    out = {
        "event": event.name,
        "window": {"start": iso_utc(start), "end": iso_utc(end), "time_zone": cfg.time_zone,
                   "start_text": format_times(start, cfg.time_zone), "end_text": format_times(end, cfg.time_zone)},
        "coverage": analysis.coverage.to_dict(),
        "ledger": event.ledger.to_dict(),
        "ledger_line": event.ledger.one_line(),
        "counts": {
            "strokes": int(len(strokes)), "ground_strokes": int(is_cg_s.sum()), "cloud_pulses": int((~is_cg_s).sum()),
            "flashes": int(len(flashes)), "ground_flashes": int(is_cg_f.sum()), "cloud_flashes": int((~is_cg_f).sum()),
        },
        "polarity": share,
        "multiplicity": {"table": mult.reset_index().to_dict(orient="records"),
                         "mean": means.reset_index(names="polarity").to_dict(orient="records")},
        "interstroke": inter.reset_index(names="polarity").to_dict(orient="records"),
        "medians": med.reset_index(names="polarity").to_dict(orient="records"),
        "reference": ref.reset_index(names="kind").to_dict(orient="records"),
        "continuing_current": {
            "rules": rules, "suspects": int(len(sus)), "by_reason": by_reason,
            "reasons": {k: dict(v) for k, v in cc.REASONS.items()},
            "top": [{
                "flash_id": int(r.flash_id), "time": iso_utc(r.time), "time_text": format_times(r.time, cfg.time_zone),
                "polarity": str(r.polarity), "multiplicity": int(r.multiplicity),
                "max_abs_peak_ka": float(r.max_abs_peak_ka), "cc_reasons": str(r.cc_reasons),
                "longest_gap_ms": float(longest["interval_ms"].get(r.flash_id, np.nan)),
                "gap_after_ka": float(longest["peak_current_ka"].get(r.flash_id, np.nan)),
            } for r in top_rows.itertuples(index=False)],
        },
        "network": {"flash_detection_efficiency": de, "flash_detection_efficiency_source": de_src,
                    "median_semi_major_km": float(np.median(semi)) if len(semi) else None,
                    "ellipse_confidence": cfg.get("ellipse_confidence")},
        "cautions": list(GENERAL_CAUTIONS) + list(cc.CAUTIONS),
    }
    return _clean(out)


def _clean(v):
    """JSON-ready: numpy scalars to Python, NaN/inf to None."""
    if isinstance(v, dict):
        return {str(k): _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        f = float(v)
        return f if math.isfinite(f) else None
    if isinstance(v, np.bool_):
        return bool(v)
    return v

"""Line physics: striking distance, the direct-strike zone, induced overvoltage, direct-strike rate.

A stroke whose channel comes down within ``y_min(I)`` of a line (horizontally) is taken to hit
the line (electrogeometric model); beyond it, the stroke hits ground and induces an overvoltage
on the line (Rusck's formula). An induced overvoltage flashes the insulation when it exceeds
1.5 times the critical flashover voltage (CFO). Between ``y_min(I)`` and ``y_fo(I, CFO)`` lies
the induced-flashover band; it is empty when ``y_fo <= y_min``.

All functions are vectorised over numpy arrays and broadcast their arguments. Peak currents are
taken as magnitudes (the sign is polarity). Overhead shield wires are not modelled.

References
----------
Full citations in :mod:`debrief.references` (``docs/references.md``).

.. [IEEE1410] Electrogeometric model, induced-voltage method, the 1.5 CFO rule (equations here
       are from memory, not checked against the text).
.. [IEEE1243] Electrogeometric model and its ground factor (from memory).
.. [Rusck1958] Induced voltage of a line near a stroke (from memory).
.. [Eriksson1987] Attractive radius Ra = 0.67 h^0.6 I^0.74 and line incidence
       N = Ng (28 h^0.6 + b)/10 (from memory, low confidence).
"""

from __future__ import annotations

import numpy as np

#: Speed of light used by IEEE Std 1410's form of Rusck's formula, m/s.
C_M_S = 3.0e8
#: Rusck's constant Z0 = (1/4π)·sqrt(μ0/ε0) ≈ 30 Ω.
Z0_OHM = 30.0
#: Default return-stroke speed, m/s (IEEE Std 1410).
RETURN_STROKE_SPEED_M_S = 1.2e8
#: Induced flashover when Umax exceeds this multiple of the CFO (IEEE Std 1410).
INDUCED_CFO_FACTOR = 1.5
#: Ground factor of IEEE Std 1410's indirect-stroke method: rg = 0.9 r.
IEEE1410_GROUND_FACTOR = 0.9

MODELS = ("ieee1410", "ieee1243", "eriksson")


def _f(x):
    return np.asarray(x, dtype=float)


def striking_distance_m(peak_current_ka):
    """Striking distance to a conductor, r = 10 I^0.65 m.

    Parameters
    ----------
    peak_current_ka : array_like
        Peak current, kA (sign ignored).

    Returns
    -------
    ndarray
        Striking distance, m.

    References
    ----------
    [IEEE1410]; [IEEE1243] (electrogeometric model), from memory.
    """
    return 10.0 * np.abs(_f(peak_current_ka)) ** 0.65


def ground_factor(height_m, model: str = "ieee1410"):
    """Ratio of the striking distance to ground to that to the conductor, rg / r.

    ``ieee1410``: 0.9. ``ieee1243``: k_g = 0.36 + 0.17 ln(43 − h) for h < 40 m, 0.55 above
    (IEEE Std 1243-1997, from memory).

    Parameters
    ----------
    height_m : array_like
        Conductor height, m.
    model : {"ieee1410", "ieee1243"}

    Returns
    -------
    ndarray
        Dimensionless factor.

    References
    ----------
    [IEEE1410]; [IEEE1243] (from memory).
    """
    h = _f(height_m)
    if model == "ieee1410":
        return np.full_like(h, IEEE1410_GROUND_FACTOR)
    if model == "ieee1243":
        with np.errstate(invalid="ignore"):
            return np.where(h < 40.0, 0.36 + 0.17 * np.log(np.maximum(43.0 - h, 3.0)), 0.55)
    raise ValueError(f"no ground factor for model {model!r}")


def eriksson_radius_m(peak_current_ka, height_m):
    """Eriksson's attractive radius of a conductor, Ra = 0.67 h^0.6 I^0.74 m.

    Parameters
    ----------
    peak_current_ka : array_like
        Peak current, kA (sign ignored).
    height_m : array_like
        Conductor height, m.

    Returns
    -------
    ndarray
        Attractive radius (horizontal), m.

    References
    ----------
    [Eriksson1987] (from memory, low confidence).
    """
    return 0.67 * _f(height_m) ** 0.6 * np.abs(_f(peak_current_ka)) ** 0.74


def y_min_m(peak_current_ka, height_m, model: str = "ieee1410"):
    """Horizontal distance within which a stroke hits the line rather than ground.

    Electrogeometric models: r = 10 I^0.65, rg = k r (k from :func:`ground_factor`);
    y_min = sqrt(r² − (rg − h)²) when rg ≥ h, else y_min = r (the conductor's arc reaches the
    ground plane's level everywhere). ``eriksson``: y_min = Ra.

    Parameters
    ----------
    peak_current_ka : array_like
        Peak current, kA (sign ignored).
    height_m : array_like
        Conductor height, m.
    model : {"ieee1410", "ieee1243", "eriksson"}

    Returns
    -------
    ndarray
        y_min, m.

    References
    ----------
    [IEEE1410] (indirect-stroke method); [IEEE1243]; [Eriksson1987]. From memory.
    """
    if model not in MODELS:
        raise ValueError(f"unknown striking-distance model {model!r}; use one of {', '.join(MODELS)}")
    h = _f(height_m)
    if model == "eriksson":
        return eriksson_radius_m(peak_current_ka, h)
    r = striking_distance_m(peak_current_ka)
    rg = ground_factor(h, model) * r
    with np.errstate(invalid="ignore"):
        inside = np.sqrt(np.maximum(r**2 - (rg - h) ** 2, 0.0))
    return np.where(rg >= h, inside, r)


def rusck_factor(return_stroke_speed_m_s=RETURN_STROKE_SPEED_M_S, c_m_s: float = C_M_S):
    """Rusck's velocity factor K = 1 + (β/√2) / sqrt(1 − β²/2), β = v / c.

    References
    ----------
    [Rusck1958]; [IEEE1410] (from memory).
    """
    beta = _f(return_stroke_speed_m_s) / c_m_s
    return 1.0 + (beta / np.sqrt(2.0)) / np.sqrt(1.0 - beta**2 / 2.0)


def rusck_induced_kv(peak_current_ka, height_m, distance_m, *,
                     return_stroke_speed_m_s=RETURN_STROKE_SPEED_M_S, c_m_s: float = C_M_S):
    """Rusck's maximum induced overvoltage on an infinite line over perfect ground.

    Umax = Z0 · I0 · h / y · K, Z0 = 30 Ω (kA × Ω = kV). The bare formula: it does not know
    where the stroke would hit the line instead (see :func:`induced_kv`).

    Parameters
    ----------
    peak_current_ka : array_like
        Peak current I0, kA (sign ignored).
    height_m : array_like
        Conductor height h, m.
    distance_m : array_like
        Horizontal distance y from the stroke to the line, m (> 0).
    return_stroke_speed_m_s : array_like
        Return-stroke speed v, m/s.
    c_m_s : float
        Speed of light, m/s (IEEE Std 1410 uses 3e8).

    Returns
    -------
    ndarray
        Umax, kV.

    References
    ----------
    [Rusck1958]; [IEEE1410], induced-voltage formula (from memory).
    """
    k = rusck_factor(return_stroke_speed_m_s, c_m_s)
    with np.errstate(divide="ignore", invalid="ignore"):
        return Z0_OHM * np.abs(_f(peak_current_ka)) * _f(height_m) / _f(distance_m) * k


def induced_kv(peak_current_ka, height_m, distance_m, *, model: str = "ieee1410",
               return_stroke_speed_m_s=RETURN_STROKE_SPEED_M_S):
    """Rusck's induced overvoltage where it applies: NaN inside y_min (a direct strike there).

    Parameters and References as :func:`rusck_induced_kv` and :func:`y_min_m`.
    """
    u = rusck_induced_kv(peak_current_ka, height_m, distance_m, return_stroke_speed_m_s=return_stroke_speed_m_s)
    return np.where(_f(distance_m) <= y_min_m(peak_current_ka, height_m, model), np.nan, u)


def y_flashover_m(peak_current_ka, height_m, cfo_kv, *,
                  return_stroke_speed_m_s=RETURN_STROKE_SPEED_M_S, c_m_s: float = C_M_S):
    """Largest distance at which Rusck's overvoltage exceeds 1.5 CFO.

    y_fo = Z0 · I · h · K / (1.5 · CFO).

    Parameters
    ----------
    peak_current_ka : array_like
        Peak current, kA (sign ignored).
    height_m : array_like
        Conductor height, m.
    cfo_kv : array_like
        Critical flashover voltage of the line's insulation, kV.

    Returns
    -------
    ndarray
        y_fo, m.

    References
    ----------
    [IEEE1410]: induced flashover when Umax > 1.5 CFO; [Rusck1958]. From memory.
    """
    k = rusck_factor(return_stroke_speed_m_s, c_m_s)
    return Z0_OHM * np.abs(_f(peak_current_ka)) * _f(height_m) * k / (INDUCED_CFO_FACTOR * _f(cfo_kv))


def flashover_band_m(peak_current_ka, height_m, cfo_kv, *, model: str = "ieee1410",
                     return_stroke_speed_m_s=RETURN_STROKE_SPEED_M_S):
    """The direct-strike zone and the induced-flashover band: (y_min, y_fo), m.

    A stroke at y < y_min hits the line; at y_min < y < y_fo it induces a flashover (an empty
    band when y_fo <= y_min). See :func:`y_min_m` and :func:`y_flashover_m` for the sources.
    """
    return (y_min_m(peak_current_ka, height_m, model),
            y_flashover_m(peak_current_ka, height_m, cfo_kv, return_stroke_speed_m_s=return_stroke_speed_m_s))


def direct_strikes_per_100km_yr(ground_flash_density, height_m, spacing_m=0.0):
    """Expected direct strikes to a line in open ground, per 100 km per year.

    N = Ng (28 h^0.6 + b) / 10.

    Parameters
    ----------
    ground_flash_density : array_like
        Ng, flashes km⁻² yr⁻¹.
    height_m : array_like
        Height of the top conductor (or shield wire) at the tower, m.
    spacing_m : array_like
        Horizontal spacing b between the outer conductors, m (0 for one conductor).

    Returns
    -------
    ndarray
        N, strikes per 100 km per year.

    References
    ----------
    [Eriksson1987]; [IEEE1410] (from memory).
    """
    return _f(ground_flash_density) * (28.0 * _f(height_m) ** 0.6 + _f(spacing_m)) / 10.0

"""Makeup water for the inputs bill: evaporation net of rain, plus harvested medium that
is not returned to the ponds."""

from __future__ import annotations

import numpy as np


def makeup_water(evaporation_mm, rain_mm, area_m2, harvest_volume_m3=0.0,
                 recycle_fraction=0.0):
    """Fresh water to add to hold the pond level.

    Parameters
    ----------
    evaporation_mm : float, array-like or Series [mm per period]
    rain_mm : float, array-like or Series [mm per period]
        Rain falling on the pond in the same periods.
    area_m2 : float [m2]
        Water surface.
    harvest_volume_m3 : float, array-like or Series, default 0 [m3 per period]
        Culture volume taken out by harvesting.
    recycle_fraction : float, default 0 [-]
        Share of the harvested medium returned to the ponds after separation.

    Returns
    -------
    same type as the inputs [m3 per period]

    Notes
    -----
    .. math:: V = \\max(E - P, 0)\\,A/1000 + V_h (1 - r)

    Net evaporation is floored at zero period by period: rain beyond evaporation
    overflows and cannot be banked against a later dry period (the same rule as the
    hourly balance in :mod:`pondsim.pond.thermal`). Pass daily (or hourly) values: summing
    over a month first lets a wet day offset a dry one and understates makeup.
    Condensation (negative evaporation) counts as gain, like rain. Blowdown to hold
    salinity is not included. NaN inputs give NaN.
    """
    net_mm = np.maximum(evaporation_mm - rain_mm, 0.0)
    return net_mm * 1e-3 * area_m2 + harvest_volume_m3 * (1.0 - recycle_fraction)

"""Heat and cold stress of the culture: hours with the water beyond the strain's cardinal
temperatures.

The cardinal temperatures are those of the strain's growth response (Rosso et al. 1993):
above the optimum growth slows, above the maximum it stops and cultures are at risk of
heat crashes; below the minimum it stops (cold stress).

References
----------
Rosso, L., Lobry, J. R. & Flandrois, J. P. (1993) An unexpected correlation between
cardinal temperatures of microbial growth highlighted by a new model. *J. Theor. Biol.*
162:447-463. doi:10.1006/jtbi.1993.1099
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: Stress columns, in the order of the tables: name -> (meaning, comparison).
STRESS_COLUMNS = {
    "hours_above_t_opt": "hours with the water above the strain's optimum temperature",
    "hours_above_t_max": "hours with the water above the strain's maximum temperature",
    "hours_below_t_min": "hours with the water below the strain's minimum temperature",
}


def stress_flags(water_temperature_c, *, t_min_c, t_opt_c, t_max_c):
    """Per-step stress flags of a water temperature series.

    Parameters
    ----------
    water_temperature_c : array-like [°C]
        Step-mean water temperature.
    t_min_c, t_opt_c, t_max_c : float [°C]
        The strain's cardinal temperatures.

    Returns
    -------
    dict of ndarray [bool]
        Keys of :data:`STRESS_COLUMNS`: T > t_opt, T > t_max and T < t_min (strict).
    """
    t = np.asarray(water_temperature_c, dtype=float)
    return {"hours_above_t_opt": t > float(t_opt_c),
            "hours_above_t_max": t > float(t_max_c),
            "hours_below_t_min": t < float(t_min_c)}


def monthly_stress_hours(water, *, t_min_c, t_opt_c, t_max_c):
    """Hours per month with the water above the optimum and maximum and below the minimum.

    Parameters
    ----------
    water : pandas.DataFrame
        Output of :func:`pondsim.pond.thermal.water_temperature` (``water_temperature``
        [°C] on a uniform DatetimeIndex; ``attrs['step_s']`` [s] if present, else 1 h).
    t_min_c, t_opt_c, t_max_c : float [°C]

    Returns
    -------
    pandas.DataFrame
        Index month number 1-12 (months present), columns of :data:`STRESS_COLUMNS`
        [h per month], integers where the step is a whole hour.
    """
    step_h = float(water.attrs.get("step_s", 3600.0)) / 3600.0
    flags = stress_flags(water["water_temperature"], t_min_c=t_min_c, t_opt_c=t_opt_c,
                         t_max_c=t_max_c)
    frame = pd.DataFrame({k: v.astype(float) * step_h for k, v in flags.items()},
                         index=water.index)
    table = frame.groupby(water.index.month).sum()
    table.index.name = "month"
    if step_h == 1.0:
        table = table.astype(int)
    return table

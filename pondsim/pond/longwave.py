"""Downwelling (sky) longwave irradiance on the pond surface.

The weather file's horizontal infrared field where it is present and plausible; else a
clear-sky emissivity with a cloud correction from the clearness of the day.

References
----------
Brutsaert, W. (1975) On a derivable formula for long-wave radiation from clear skies.
*Water Resour. Res.* 11:742-744. doi:10.1029/WR011i005p00742

Crawford, T. M. & Duchon, C. E. (1999) An improved parameterization for estimating
effective atmospheric emissivity for use in calculating daytime downwelling longwave
radiation. *J. Appl. Meteorol.* 38:474-480.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pondsim.errors import InputError
from pondsim.forcing.psychrometry import saturation_vapour_pressure

#: Stefan-Boltzmann constant [W m-2 K-4] (CODATA 2018).
STEFAN_BOLTZMANN = 5.670374419e-8
#: Plausible range of a measured downwelling longwave value [W m-2]; outside it the
#: sky-emissivity formula is used for that hour.
IR_PLAUSIBLE_W_M2 = (50.0, 600.0)
#: Minimum clear-sky GHI for a usable clearness ratio in the cloud correction [W m-2].
CLOUD_RATIO_MIN_GHI_CLEAR = 50.0

_KELVIN = 273.15


def clear_sky_emissivity_brutsaert(vapour_pressure_kpa, temp_air_c):
    """Clear-sky atmospheric emissivity of Brutsaert (1975).

    Parameters
    ----------
    vapour_pressure_kpa : float, array-like or Series [kPa]
        Actual vapour pressure near the surface.
    temp_air_c : float, array-like or Series [°C]
        Screen-level air temperature.

    Returns
    -------
    same type [-]

    Notes
    -----
    .. math:: ε_{clear} = 1.24\\,(e/T)^{1/7},\\quad e\\ [\\mathrm{hPa}],\\ T\\ [\\mathrm{K}]

    References
    ----------
    Brutsaert, W. (1975) On a derivable formula for long-wave radiation from clear skies.
    *Water Resour. Res.* 11:742-744. doi:10.1029/WR011i005p00742
    """
    e_hpa = np.maximum(10.0 * vapour_pressure_kpa, 0.0)
    return 1.24 * (e_hpa / (temp_air_c + _KELVIN)) ** (1.0 / 7.0)


def clear_sky_emissivity_swinbank(vapour_pressure_kpa, temp_air_c):
    """Clear-sky atmospheric emissivity of Swinbank (1963).

    Parameters
    ----------
    vapour_pressure_kpa : float, array-like or Series [kPa]
        Unused (the formula depends on air temperature only); kept so that every sky
        model has one signature.
    temp_air_c : float, array-like or Series [°C]

    Returns
    -------
    same type [-]

    Notes
    -----
    Swinbank's L↓ = 5.31×10⁻¹³ T⁶ W m-2 (T in K) written as an emissivity,
    ε = 5.31×10⁻¹³ T² / σ = 9.36×10⁻⁶ T² (REFERENCES [M] for the coefficient).

    References
    ----------
    Swinbank, W. C. (1963) Long-wave radiation from clear skies. *Q. J. R. Meteorol.
    Soc.* 89:339-348. doi:10.1002/qj.49708938105
    """
    tk = np.asarray(temp_air_c, dtype=float) + _KELVIN
    return 5.31e-13 * tk ** 2 / STEFAN_BOLTZMANN + 0.0 * np.asarray(vapour_pressure_kpa)


def clear_sky_emissivity_idso_jackson(vapour_pressure_kpa, temp_air_c):
    """Clear-sky atmospheric emissivity of Idso & Jackson (1969).

    Parameters
    ----------
    vapour_pressure_kpa : float, array-like or Series [kPa]
        Unused (air temperature only); same signature as the other sky models.
    temp_air_c : float, array-like or Series [°C]

    Returns
    -------
    same type [-]

    Notes
    -----
    .. math:: ε = 1 − 0.261 \\exp[−7.77×10^{−4} (273 − T)^2],\\quad T\\ [\\mathrm{K}]

    (coefficients from memory; at 0 °C ε = 0.739, rising towards 1 away from 0 °C).

    References
    ----------
    Idso, S. B. & Jackson, R. D. (1969) Thermal radiation from the atmosphere.
    *J. Geophys. Res.* 74:5397-5403. doi:10.1029/JC074i023p05397
    """
    t = np.asarray(temp_air_c, dtype=float)
    return 1.0 - 0.261 * np.exp(-7.77e-4 * t * t) + 0.0 * np.asarray(vapour_pressure_kpa)


#: Clear-sky emissivity models chosen by name (``[pond] sky_emissivity``).
SKY_MODELS = {
    "brutsaert": clear_sky_emissivity_brutsaert,
    "swinbank": clear_sky_emissivity_swinbank,
    "idso_jackson": clear_sky_emissivity_idso_jackson,
}


def cloud_fraction_crawford_duchon(ghi, ghi_clear):
    """Cloud fraction from the clearness ratio, carried through the night.

    Parameters
    ----------
    ghi : pandas.Series [W m-2]
        Measured global horizontal irradiance, time-ordered.
    ghi_clear : pandas.Series [W m-2]
        Clear-sky GHI for the same hours.

    Returns
    -------
    pandas.Series [-]
        clf = 1 − s, s = ghi/ghi_clear clipped to 0-1, in hours with
        ghi_clear ≥ 50 W m-2. Other hours (night, low sun) carry the last daytime value
        forward; hours before the first daytime value take that first value; with no
        daytime hour at all the sky is taken as clear (0).

    References
    ----------
    Crawford, T. M. & Duchon, C. E. (1999) An improved parameterization for estimating
    effective atmospheric emissivity for use in calculating daytime downwelling longwave
    radiation. *J. Appl. Meteorol.* 38:474-480.
    doi:10.1175/1520-0450(1999)038<0474:AIPFEE>2.0.CO;2
    """
    g = ghi.to_numpy(dtype=float)
    gc = ghi_clear.to_numpy(dtype=float)
    day = np.isfinite(g) & np.isfinite(gc) & (gc >= CLOUD_RATIO_MIN_GHI_CLEAR)
    s = np.full(g.shape, np.nan)
    s[day] = np.clip(g[day] / gc[day], 0.0, 1.0)
    clf = pd.Series(1.0 - s, index=ghi.index).ffill().bfill().fillna(0.0)
    clf.name = "cloud_fraction"
    return clf


def sky_longwave(forcing, model="brutsaert"):
    """Downwelling longwave irradiance on the pond surface.

    Parameters
    ----------
    forcing : pandas.DataFrame
        Needs ``temp_air`` [°C] and ``relative_humidity`` [%]; uses ``ir_horizontal``
        [W m-2] where present, finite and within 50-600 W m-2; for the other hours needs
        ``ghi`` and ``ghi_clear`` [W m-2].
    model : str, default ``"brutsaert"``
        Clear-sky emissivity, one of :data:`SKY_MODELS`.

    Returns
    -------
    pandas.Series [W m-2]
        ``longwave_down``.

    Notes
    -----
    Where no usable measurement exists, L↓ = ε σ T_a⁴ with the all-sky emissivity of
    Crawford & Duchon (1999, eq. 4), ε = clf + (1 − clf) ε_clear, and ε_clear from
    the chosen model (Brutsaert 1975, Swinbank 1963 or Idso & Jackson 1969; see
    :func:`cloud_fraction_crawford_duchon`).
    """
    if model not in SKY_MODELS:
        raise InputError(f"unknown sky emissivity model {model!r}; choose from "
                         f"{', '.join(SKY_MODELS)}", field="sky_emissivity")
    t_air = forcing["temp_air"].to_numpy(dtype=float)
    ea = forcing["relative_humidity"].to_numpy(dtype=float) / 100.0 \
        * saturation_vapour_pressure(t_air)
    out = np.full(t_air.shape, np.nan)
    if "ir_horizontal" in forcing.columns:
        ir = forcing["ir_horizontal"].to_numpy(dtype=float)
        lo, hi = IR_PLAUSIBLE_W_M2
        good = np.isfinite(ir) & (ir >= lo) & (ir <= hi)
        out[good] = ir[good]
    need = ~np.isfinite(out)
    if need.any():
        if "ghi_clear" not in forcing.columns:
            raise InputError("forcing lacks column ghi_clear, needed for the sky longwave "
                             "where ir_horizontal is absent or implausible",
                             field="ghi_clear")
        clf = cloud_fraction_crawford_duchon(forcing["ghi"], forcing["ghi_clear"])
        eps = clf.to_numpy() + (1.0 - clf.to_numpy()) \
            * SKY_MODELS[model](ea, t_air)
        formula = eps * STEFAN_BOLTZMANN * (t_air + _KELVIN) ** 4
        out[need] = formula[need]
    return pd.Series(out, index=forcing.index, name="longwave_down")

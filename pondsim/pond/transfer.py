"""Heat and vapour transfer between the pond surface and the air.

Wind at 2 m (FAO-56), the latent heat of vaporisation, and the surface transfer models
(wind functions) that turn a vapour-pressure difference into a latent heat flux.

References
----------
Allen, R. G., Pereira, L. S., Raes, D. & Smith, M. (1998) *Crop evapotranspiration:
guidelines for computing crop water requirements*. FAO Irrigation and Drainage Paper 56.

Shuttleworth, W. J. (1993) Evaporation. In Maidment, D. R. (ed.) *Handbook of
Hydrology*, ch. 4. McGraw-Hill.
"""

from __future__ import annotations

import math

from pondsim.errors import InputError

_MJ_PER_DAY_TO_W = 1e6 / 86400.0


def wind_at_2m(uz, z_m):
    """Wind speed at 2 m from a measurement at height z, FAO-56 eq. 47.

    Parameters
    ----------
    uz : float, array-like or Series [m s-1]
        Wind speed measured at height *z_m*.
    z_m : float [m]
        Measurement height, 0.5-100 m.

    Returns
    -------
    same type as *uz* [m s-1]

    Notes
    -----
    .. math:: u_2 = u_z \\frac{4.87}{\\ln(67.8 z - 5.42)}

    a logarithmic profile over short grass; over open water (smoother) it slightly
    underestimates u_2, which is how the Penman open-water wind function is usually fed.

    References
    ----------
    Allen et al. (1998) FAO-56, eq. 47.
    """
    z = float(z_m)
    if not 0.5 <= z <= 100.0:
        raise InputError(f"wind measurement height must be in 0.5-100 m, got {z_m!r}",
                         field="wind_height_m")
    return uz * (4.87 / math.log(67.8 * z - 5.42))


def latent_heat_vaporisation(t_c):
    """Latent heat of vaporisation of water.

    Parameters
    ----------
    t_c : float, array-like or Series [°C]

    Returns
    -------
    same type [MJ kg-1]

    Notes
    -----
    λ = 2.501 − 0.002361 T (Harrison 1963, as given in FAO-56 Annex 3, eq. 3-1). It is
    used here only to turn the latent heat flux into an evaporated mass; FAO-56's
    constant 2.45 MJ kg-1 corresponds to 20 °C.
    """
    return 2.501 - 0.002361 * t_c


def wind_function(u2):
    """Open-water Penman wind function of Shuttleworth (1993), as an energy flux.

    Parameters
    ----------
    u2 : float, array-like or Series [m s-1]
        Wind speed at 2 m.

    Returns
    -------
    same type [W m-2 kPa-1]
        Latent heat flux per kPa of vapour-pressure deficit at the surface.

    Notes
    -----
    Shuttleworth (1993, eq. 4.2.31 in the Handbook of Hydrology) writes the aerodynamic
    evaporation from open water as

    .. math:: λE = 6.43\\,(1 + 0.536\\,u_2)\\,(e_s - e_a)\\quad[\\mathrm{MJ\\,m^{-2}\\,d^{-1}}]

    which is returned here converted to W m-2 kPa-1 (× 10⁶/86 400).
    """
    return 6.43 * _MJ_PER_DAY_TO_W * (1.0 + 0.536 * u2)

"""Raceway hydraulics and paddlewheel mixing power for the inputs bill.

Manning friction in the channels plus bend losses give the head one circuit loses; the
paddlewheel restores it at its wire-to-water efficiency.

References
----------
Chow, V. T. (1959) *Open-Channel Hydraulics*. McGraw-Hill (Manning's equation, ch. 5;
roughness table 5-6).
"""

from __future__ import annotations

import numpy as np

from pondsim.errors import InputError
from pondsim.pond.thermal import WATER_DENSITY

#: Standard acceleration of gravity [m s-2] (3rd CGPM, 1901; exact by definition).
GRAVITY = 9.80665

#: Manning roughness n [s m-1/3] of pond channel surfaces. Assumptions of the order that
#: Chow (1959) Table 5-6 tabulates for lined channels (the numbers were not re-checked
#: against the table here). A biofilm on the liner raises n over a season, so the
#: default uses the float-finish value.
MANNING_N = {
    "plastic_liner": 0.010,
    "concrete_trowel": 0.013,
    "concrete_float": 0.015,
    "concrete_unfinished": 0.017,
}

#: Default Manning n [s m-1/3]: float-finished concrete, or a fouled plastic liner (see
#: :data:`MANNING_N`).
DEFAULT_MANNING_N = MANNING_N["concrete_float"]

#: Loss coefficient of one 180° bend of a raceway, in units of the velocity head
#: v²/(2g) [-]. Assumption: 2 for an unbaffled hairpin bend (raceway design texts such as
#: Chisti 2016, "Large-scale production of algal biomass: raceway ponds", in Bux &
#: Chisti (eds.) *Algae Biotechnology*, Springer, treat bend losses in velocity heads;
#: the value was not checked against that text). Baffled bends lose less.
BEND_LOSS_K = 2.0

#: Wire-to-water efficiency of a paddlewheel drive [-]. Assumption: 0.17 = paddlewheel
#: 0.2 × drive 0.85 (the scenario's ``inputs.paddlewheel_efficiency`` and
#: ``inputs.drive_efficiency`` defaults).
PADDLEWHEEL_EFFICIENCY = 0.17

#: Design mean channel velocity of a raceway [m s-1]; 0.2-0.3 m s-1 keeps cells in
#: suspension (common practice).
DESIGN_VELOCITY_M_S = 0.25


def hydraulic_radius_rectangular(width_m, depth_m):
    """Hydraulic radius of an open rectangular channel.

    Parameters
    ----------
    width_m, depth_m : float, array-like or Series [m]

    Returns
    -------
    same type [m]
        R = A/P = w·d / (w + 2d): flow area over wetted perimeter (bed and two walls).
    """
    return width_m * depth_m / (width_m + 2.0 * depth_m)


def manning_velocity(hydraulic_radius_m, slope, manning_n=DEFAULT_MANNING_N):
    """Mean velocity of uniform open-channel flow, Manning's equation (SI).

    Parameters
    ----------
    hydraulic_radius_m : float, array-like or Series [m]
    slope : float, array-like or Series [m m-1]
        Energy (friction) slope; equals the bed slope in uniform flow.
    manning_n : float, default 0.015 [s m-1/3]

    Returns
    -------
    same type [m s-1]

    Notes
    -----
    .. math:: v = \\frac{1}{n} R^{2/3} S^{1/2}

    (Chow 1959, ch. 5, SI form.)
    """
    return hydraulic_radius_m ** (2.0 / 3.0) * np.sqrt(slope) / manning_n


def manning_friction_slope(velocity_m_s, hydraulic_radius_m, manning_n=DEFAULT_MANNING_N):
    """Friction slope that sustains a mean velocity, Manning's equation inverted.

    Parameters
    ----------
    velocity_m_s : float, array-like or Series [m s-1]
    hydraulic_radius_m : float, array-like or Series [m]
    manning_n : float, default 0.015 [s m-1/3]

    Returns
    -------
    same type [m m-1]
        Head lost to wall friction per metre of channel, S = (n v / R^(2/3))².
    """
    return (manning_n * velocity_m_s / hydraulic_radius_m ** (2.0 / 3.0)) ** 2


def raceway_head_loss(velocity_m_s, channel_width_m, depth_m, channel_length_m, n_bends=2,
                      manning_n=DEFAULT_MANNING_N, bend_k=BEND_LOSS_K):
    """Head the paddlewheel must restore in one circuit of a raceway.

    Parameters
    ----------
    velocity_m_s : float, array-like or Series [m s-1]
        Mean channel velocity.
    channel_width_m, depth_m : float or array-like [m]
    channel_length_m : float or array-like [m]
        Length of the flow path in one circuit (all channels, bends included).
    n_bends : int, default 2
        180° bends per circuit (2 for a two-channel raceway).
    manning_n : float, default 0.015 [s m-1/3]
        See :data:`MANNING_N`.
    bend_k : float, default 2.0 [-]
        Loss per 180° bend in velocity heads; see :data:`BEND_LOSS_K` (assumption).

    Returns
    -------
    same type as *velocity_m_s* [m of water]

    Notes
    -----
    .. math:: Δh = \\left(\\frac{n v}{R^{2/3}}\\right)^2 L + N_b k \\frac{v^2}{2g},
              \\quad R = \\frac{w d}{w + 2d}

    Manning friction over the whole path plus the bend losses. Friction in the bends is
    counted with the straight channels (their length is in *channel_length_m*), which
    double-counts a little of the bends' loss; the paddlewheel, sump and any baffles are
    not included.
    """
    r = hydraulic_radius_rectangular(channel_width_m, depth_m)
    friction = manning_friction_slope(velocity_m_s, r, manning_n) * channel_length_m
    bends = n_bends * bend_k * velocity_m_s ** 2 / (2.0 * GRAVITY)
    return friction + bends


def paddlewheel_power(head_m, flow_m3_s, efficiency=PADDLEWHEEL_EFFICIENCY):
    """Electric power a paddlewheel draws to circulate a raceway.

    Parameters
    ----------
    head_m : float, array-like or Series [m]
        Head loss per circuit, from :func:`raceway_head_loss`.
    flow_m3_s : float, array-like or Series [m3 s-1]
        Circulating flow, v·w·d.
    efficiency : float, default 0.17 [-]
        Wire-to-water efficiency; see :data:`PADDLEWHEEL_EFFICIENCY` (assumption).

    Returns
    -------
    same type [W]

    Notes
    -----
    .. math:: P = \\frac{ρ g Q Δh}{η}, \\quad ρ = 1000\\ \\mathrm{kg\\,m^{-3}}
    """
    return WATER_DENSITY * GRAVITY * flow_m3_s * head_m / efficiency


def raceway_geometry(area_m2, length_to_width=10.0, n_channels=2):
    """Channel width and flow-path length of a raceway of a given water surface.

    Parameters
    ----------
    area_m2 : float or array-like [m2]
        Water surface of one pond.
    length_to_width : float, default 10 [-]
        Overall pond length over overall width (all channels side by side); about 10 is
        a usual proportion for paddlewheel raceways (common practice).
    n_channels : int, default 2
        Channels side by side, each joined to the next by a 180° bend.

    Returns
    -------
    dict of float or ndarray
        ``channel_width_m`` [m], ``pond_length_m`` [m], ``pond_width_m`` [m],
        ``channel_length_m`` [m, flow path of one circuit], ``n_bends`` [-].

    Notes
    -----
    The footprint is taken as a rectangle of W × L, W = n·w, L = r·W, fully wetted
    (centre walls thin), so w = sqrt(A / (r n²)) and the flow path of one circuit is
    n·L = A/w. For the usual two-channel pond with semicircular ends both the area and
    the centreline path are about (1 − π/4)/r ≈ 2 % smaller at r = 10, well inside the
    uncertainty of n and k.
    """
    if n_channels < 2 or n_channels % 2:
        raise InputError(f"a raceway needs an even number of channels >= 2, got "
                         f"{n_channels!r}", field="n_channels")
    if not np.all(np.asarray(length_to_width) >= 1.0):
        raise InputError(f"length_to_width must be >= 1, got {length_to_width!r}",
                         field="length_to_width")
    w = np.sqrt(area_m2 / (length_to_width * n_channels ** 2))
    length = length_to_width * n_channels * w
    return {
        "channel_width_m": w,
        "pond_length_m": length,
        "pond_width_m": n_channels * w,
        "channel_length_m": n_channels * length,
        "n_bends": n_channels,
    }

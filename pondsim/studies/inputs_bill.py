"""The inputs bill: what the ponds consume.

Carbon dioxide, nitrogen and phosphorus (as elements and as fertiliser products), makeup
water and the electricity of paddlewheel mixing, for the whole farm, month by month.

Every kernel is a pure function over scalars, numpy arrays or pandas Series (pandas
objects come back as pandas objects). :func:`inputs_bill` aggregates them into one table;
:func:`bill_from_results` feeds it from a simulation's results Dataset.

Mass stoichiometry uses the IUPAC standard atomic weights (abridged values, CIAAW 2021);
molar masses and element fractions of fertilisers are computed from their formulas here,
never typed in.

References
----------
Chisti, Y. (2007) Biodiesel from microalgae. *Biotechnol. Adv.* 25:294-306.
doi:10.1016/j.biotechadv.2007.02.001 (about 50 % carbon in dry algal biomass, so
1.83 kg CO2 per kg; from memory).

Redfield, A. C. (1958) The biological control of chemical factors in the environment.
*Am. Sci.* 46:205-221 (C:N:P = 106:16:1 by atoms).

Chow, V. T. (1959) *Open-Channel Hydraulics*. McGraw-Hill (Manning's equation, ch. 5;
roughness table 5-6).
"""

from __future__ import annotations

import re
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from pondsim.errors import InputError, did_you_mean
from pondsim.pond.thermal import WATER_DENSITY

# ---------------------------------------------------------------------------------------
# Constants
# ---------------------------------------------------------------------------------------

#: Standard atomic weights [g mol-1], IUPAC/CIAAW abridged values (2021) for the elements
#: that fertilisers and biomass need.
ATOMIC_WEIGHTS = {
    "H": 1.008,
    "C": 12.011,
    "N": 14.007,
    "O": 15.999,
    "P": 30.974,
    "S": 32.06,
    "K": 39.098,
    "Ca": 40.078,
}

#: Standard acceleration of gravity [m s-2] (3rd CGPM, 1901; exact by definition).
GRAVITY = 9.80665

#: Redfield ratio C:N:P by atoms (Redfield 1958).
REDFIELD_C_N_P = (106.0, 16.0, 1.0)

#: Manning roughness n [s m-1/3] of pond channel surfaces. Values as tabulated for lined
#: channels: Chow (1959) Table 5-6 (from memory: concrete, trowel finish 0.011-0.013-
#: 0.015 min-normal-max; float finish 0.013-0.015-0.016; unfinished 0.014-0.017-0.020);
#: the same trowel/float values (0.013 / 0.015, attributed to the Federal Highway
#: Administration) appear in municipal drainage codes; smooth plastic 0.009-0.011 as
#: listed in common engineering tables. A biofilm on the liner raises n over a season
#: (from memory), so the default uses the float-finish value.
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
#: v²/(2g) [-]. The value 2 is the one used in raceway design texts for unbaffled
#: hairpin bends (Chisti 2016, "Large-scale production of algal biomass: raceway
#: ponds", in Bux & Chisti (eds.) *Algae Biotechnology*, Springer) -- from memory, not
#: verified against the text. Baffled or flow-deflecting bends lose less.
BEND_LOSS_K = 2.0

#: Wire-to-water efficiency of a paddlewheel drive [-]. Paddlewheels are inefficient
#: pumps; 10-20 % is the usual range quoted for raceway paddlewheels and 0.17 is used in
#: raceway design examples (from memory, not verified).
PADDLEWHEEL_EFFICIENCY = 0.17

#: Design mean channel velocity of a raceway [m s-1]; 0.2-0.3 m s-1 keeps cells in
#: suspension (common practice).
DESIGN_VELOCITY_M_S = 0.25

_MONTH_ABBR = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov",
               "Dec")


# ---------------------------------------------------------------------------------------
# Formula stoichiometry
# ---------------------------------------------------------------------------------------

_TOKEN = re.compile(r"[A-Z][a-z]?|\d+|\(|\)")


def _parse_group(tokens: list[str], pos: int) -> tuple[dict[str, int], int]:
    counts: dict[str, int] = {}
    while pos < len(tokens):
        tok = tokens[pos]
        if tok == ")":
            return counts, pos
        if tok == "(":
            inner, pos = _parse_group(tokens, pos + 1)
            if pos >= len(tokens) or tokens[pos] != ")":
                raise ValueError("unbalanced parenthesis")
            pos += 1
            part = inner
        elif tok[0].isalpha():
            part = {tok: 1}
            pos += 1
        else:
            raise ValueError(f"unexpected number {tok!r}")
        mult = 1
        if pos < len(tokens) and tokens[pos].isdigit():
            mult = int(tokens[pos])
            pos += 1
        for el, k in part.items():
            counts[el] = counts.get(el, 0) + k * mult
    return counts, pos


def formula_composition(formula: str) -> dict[str, int]:
    """Atoms of each element in a chemical formula.

    Parameters
    ----------
    formula : str
        Hill-style formula with parentheses and hydrate dots, e.g. ``"CO(NH2)2"``,
        ``"(NH4)2HPO4"``, ``"Ca(H2PO4)2·H2O"`` (``"."`` works as the dot).

    Returns
    -------
    dict
        Element symbol -> number of atoms.

    Raises
    ------
    InputError
        For an element without a weight in :data:`ATOMIC_WEIGHTS` or a malformed formula.
    """
    total: dict[str, int] = {}
    for part in re.split(r"[·.]", formula.replace(" ", "")):
        if not part:
            continue
        lead = re.match(r"\d+", part)
        mult = int(lead.group()) if lead else 1
        body = part[lead.end():] if lead else part
        tokens = _TOKEN.findall(body)
        if "".join(tokens) != body:
            raise InputError(f"cannot read chemical formula {formula!r}", field="formula")
        try:
            counts, pos = _parse_group(tokens, 0)
        except ValueError as exc:
            raise InputError(f"cannot read chemical formula {formula!r}: {exc}",
                             field="formula") from None
        if pos != len(tokens):
            raise InputError(f"cannot read chemical formula {formula!r}: unbalanced "
                             "parenthesis", field="formula")
        for el, k in counts.items():
            total[el] = total.get(el, 0) + k * mult
    unknown = sorted(set(total) - set(ATOMIC_WEIGHTS))
    if unknown:
        raise InputError(f"no atomic weight for {', '.join(unknown)} in {formula!r}; known: "
                         f"{', '.join(ATOMIC_WEIGHTS)}", field="formula")
    return total


def molar_mass(formula: str) -> float:
    """Molar mass of a formula from the standard atomic weights.

    Parameters
    ----------
    formula : str
        See :func:`formula_composition`.

    Returns
    -------
    float [g mol-1]
    """
    return float(sum(ATOMIC_WEIGHTS[el] * k for el, k in formula_composition(formula).items()))


def mass_fraction(formula: str, element: str) -> float:
    """Mass fraction of one element in a compound.

    Parameters
    ----------
    formula : str
        See :func:`formula_composition`.
    element : str
        Element symbol, e.g. ``"N"``.

    Returns
    -------
    float [kg kg-1]
        0 when the element is absent.
    """
    counts = formula_composition(formula)
    return ATOMIC_WEIGHTS[element] * counts.get(element, 0) / molar_mass(formula)


#: kg CO2 per kg carbon, M(CO2)/M(C) = 44.009/12.011 (the rounded 44/12 is 0.07 % higher).
CO2_PER_C = molar_mass("CO2") / ATOMIC_WEIGHTS["C"]

#: kg P per kg P2O5, for fertiliser grades stated as oxide (2 M(P) / M(P2O5) = 0.4364).
P_PER_P2O5 = 2 * ATOMIC_WEIGHTS["P"] / molar_mass("P2O5")


# ---------------------------------------------------------------------------------------
# Fertilisers
# ---------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Fertiliser:
    """A fertiliser product and its element mass fractions.

    Attributes
    ----------
    name : str
    n_fraction, p_fraction : float [kg element per kg product]
    primary : str
        The element the product is bought for (``"N"`` or ``"P"``); the default element
        of :func:`fertiliser_mass`.
    basis : str
        Where the fractions come from (formula or trade grade).
    """

    name: str
    n_fraction: float
    p_fraction: float
    primary: str
    basis: str

    def fraction(self, element: str) -> float:
        """Mass fraction of ``"N"`` or ``"P"`` [kg kg-1]."""
        if element == "N":
            return self.n_fraction
        if element == "P":
            return self.p_fraction
        raise InputError(f"element must be 'N' or 'P', got {element!r}", field="element")


def _from_formula(name, formula, primary, note=""):
    basis = f"pure compound {formula}" + (f"; {note}" if note else "")
    return Fertiliser(name, mass_fraction(formula, "N"), mass_fraction(formula, "P"),
                      primary, basis)


def _from_grade(name, n_pct, p2o5_pct, primary, note):
    # Trade grades give N and P2O5 in percent of product mass (N-P2O5-K2O convention).
    return Fertiliser(name, n_pct / 100.0, p2o5_pct / 100.0 * P_PER_P2O5, primary,
                      f"trade grade {n_pct:g}-{p2o5_pct:g}-0; {note}")


#: Fertilisers by name. Pure compounds carry fractions computed from their formulas;
#: trade grades (``*_18_46_0`` etc.) are the nominal N-P2O5-K2O analyses sold in bulk
#: (common practice), with P from P2O5 by :data:`P_PER_P2O5`.
FERTILISERS = {
    f.name: f
    for f in (
        _from_formula("urea", "CO(NH2)2", "N", "46.6 % N; sold as 46-0-0"),
        _from_formula("ammonium_nitrate", "NH4NO3", "N", "35.0 % N; sold as 33.5-34 % N"),
        _from_formula("dap", "(NH4)2HPO4", "P", "21.2 % N, 23.5 % P"),
        _from_formula("map", "NH4H2PO4", "P", "12.2 % N, 26.9 % P"),
        _from_grade("dap_18_46_0", 18.0, 46.0, "P", "commercial diammonium phosphate"),
        _from_grade("map_11_52_0", 11.0, 52.0, "P", "commercial monoammonium phosphate"),
        _from_grade("tsp", 0.0, 46.0, "P",
                    "triple superphosphate, mainly Ca(H2PO4)2·H2O (24.6 % P when pure)"),
    )
}


def get_fertiliser(fertiliser) -> Fertiliser:
    """Look up a fertiliser by name, or pass a :class:`Fertiliser` through.

    Parameters
    ----------
    fertiliser : str or Fertiliser
        A key of :data:`FERTILISERS`, or a custom product.

    Returns
    -------
    Fertiliser

    Raises
    ------
    InputError
        For an unknown name; the message lists the valid names.
    """
    if isinstance(fertiliser, Fertiliser):
        return fertiliser
    try:
        return FERTILISERS[fertiliser]
    except (KeyError, TypeError):
        hint = did_you_mean(str(fertiliser), FERTILISERS)
        raise InputError(f"unknown fertiliser {fertiliser!r}{hint}; choose one of "
                         f"{', '.join(FERTILISERS)}", field="fertiliser") from None


# ---------------------------------------------------------------------------------------
# Carbon and nutrients
# ---------------------------------------------------------------------------------------

def co2_demand(biomass_kg, carbon_fraction=0.5, utilisation=0.7):
    """CO2 to supply for a mass of biomass.

    Parameters
    ----------
    biomass_kg : float, array-like or Series [kg ash-free dry weight]
    carbon_fraction : float, default 0.5 [kg C kg-1]
        Carbon in the dry biomass; about 50 % (Chisti 2007, from memory; C 49 ± 2 % was
        measured over 175 days in a microalgal-bacterial pond culture by Serejo et al.
        2015, *Environ. Sci. Technol.* 49, abstract).
    utilisation : float, default 0.7 [-]
        Share of the supplied CO2 that the culture fixes; the rest outgasses. 0.7 is an
        assumption (common practice): a carbonation column on a raceway transferred 83 %
        (Putt et al. 2011, *Bioresour. Technol.* 102:3240-3245, abstract); simple
        diffusers in a sump are lower, 30-90 % being the range usually quoted (from
        memory).

    Returns
    -------
    same type as *biomass_kg* [kg CO2]

    Notes
    -----
    .. math:: m_{CO_2} = m_X\\, f_C\\, \\frac{M_{CO_2}}{M_C} \\frac{1}{u}

    with M(CO2)/M(C) = 44.009/12.011 = 3.664 from the standard atomic weights; 0.5 C and
    full utilisation give 1.832 kg kg-1 (Chisti's 1.83).
    """
    return biomass_kg * carbon_fraction * CO2_PER_C / utilisation


def nutrient_demand(biomass_kg, n_fraction=0.07, p_fraction=0.01):
    """Nitrogen and phosphorus taken up into biomass, as elements.

    Parameters
    ----------
    biomass_kg : float, array-like or Series [kg ash-free dry weight]
    n_fraction : float, default 0.07 [kg N kg-1]
        Nitrogen in the dry biomass; 6-8 % is typical of nutrient-replete microalgae
        (from memory; 9 % in Serejo et al. 2015, abstract).
    p_fraction : float, default 0.01 [kg P kg-1]
        Phosphorus; about 1 % (from memory; 1 % in Serejo et al. 2015, abstract).

    Returns
    -------
    n_kg, p_kg : same type as *biomass_kg* [kg N], [kg P]

    Notes
    -----
    Uptake only: nutrients left dissolved in medium that is discharged rather than
    recycled are not counted, so this is a lower bound on what is bought. See
    :func:`redfield_n_p` for a cross-check from the carbon content.
    """
    return biomass_kg * n_fraction, biomass_kg * p_fraction


def redfield_n_p(carbon_kg):
    """Nitrogen and phosphorus that go with a mass of carbon at the Redfield ratio.

    Parameters
    ----------
    carbon_kg : float, array-like or Series [kg C]

    Returns
    -------
    n_kg, p_kg : same type as *carbon_kg* [kg N], [kg P]

    Notes
    -----
    C:N:P = 106:16:1 by atoms (Redfield 1958), so by mass
    N/C = 16·14.007/(106·12.011) = 0.1760 and P/C = 30.974/(106·12.011) = 0.02433. For
    biomass of 50 % C this is 8.8 % N and 1.2 % P, a little above the defaults of
    :func:`nutrient_demand`: phytoplankton grown in culture often carry less N and P per
    C than the ocean average (from memory).
    """
    c, n, p = REDFIELD_C_N_P
    mc = c * ATOMIC_WEIGHTS["C"]
    return (carbon_kg * (n * ATOMIC_WEIGHTS["N"] / mc),
            carbon_kg * (p * ATOMIC_WEIGHTS["P"] / mc))


def fertiliser_mass(element_kg, fertiliser, element=None):
    """Mass of a fertiliser product that supplies a mass of one element.

    Parameters
    ----------
    element_kg : float, array-like or Series [kg N or kg P]
    fertiliser : str or Fertiliser
        A key of :data:`FERTILISERS` or a custom :class:`Fertiliser`.
    element : {"N", "P"}, optional
        Which element *element_kg* is; default the product's primary element.

    Returns
    -------
    same type as *element_kg* [kg product]

    Raises
    ------
    InputError
        When the product holds none of the element.
    """
    fert = get_fertiliser(fertiliser)
    el = fert.primary if element is None else element
    frac = fert.fraction(el)
    if not frac > 0:
        raise InputError(f"fertiliser {fert.name!r} contains no {el}", field="fertiliser")
    return element_kg / frac


def fertiliser_plan(n_kg, p_kg, n_fertiliser="urea", p_fertiliser="dap_18_46_0"):
    """Fertiliser products that supply a nitrogen and phosphorus demand.

    The phosphorus product is dosed for the P demand first; the nitrogen it brings (DAP,
    MAP) is credited, and the nitrogen product covers the rest (never below zero).

    Parameters
    ----------
    n_kg, p_kg : float, array-like or Series [kg N], [kg P]
    n_fertiliser, p_fertiliser : str or Fertiliser
        See :data:`FERTILISERS`.

    Returns
    -------
    dict
        Product name -> mass [kg]; one entry when both products are the same.
    """
    nf, pf = get_fertiliser(n_fertiliser), get_fertiliser(p_fertiliser)
    p_mass = fertiliser_mass(p_kg, pf, "P")
    n_left = np.maximum(n_kg - p_mass * pf.n_fraction, 0.0)  # N brought by the P product
    n_mass = fertiliser_mass(n_left, nf, "N")
    if nf.name == pf.name:
        return {pf.name: p_mass + n_mass}
    return {pf.name: p_mass, nf.name: n_mass}


# ---------------------------------------------------------------------------------------
# Water
# ---------------------------------------------------------------------------------------

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


# ---------------------------------------------------------------------------------------
# Raceway hydraulics and mixing power
# ---------------------------------------------------------------------------------------

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
        Loss per 180° bend in velocity heads; see :data:`BEND_LOSS_K` (from memory).

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
        Wire-to-water efficiency; see :data:`PADDLEWHEEL_EFFICIENCY` (from memory).

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


# ---------------------------------------------------------------------------------------
# Parameters and farm
# ---------------------------------------------------------------------------------------

@dataclass(frozen=True)
class InputsParams:
    """Coefficients of the inputs bill, with documented defaults.

    Attributes
    ----------
    carbon_fraction : float, default 0.5 [kg C kg-1]
        See :func:`co2_demand` (Chisti 2007, from memory).
    co2_utilisation : float, default 0.7 [-]
        See :func:`co2_demand` (common practice).
    n_fraction : float, default 0.07 [kg N kg-1]
        See :func:`nutrient_demand` (from memory).
    p_fraction : float, default 0.01 [kg P kg-1]
        See :func:`nutrient_demand` (from memory).
    n_fertiliser : str, default "urea"
    p_fertiliser : str, default "dap_18_46_0"
        Products; see :data:`FERTILISERS` and :func:`fertiliser_plan`.
    recycle_fraction : float, default 0.9 [-]
        Share of harvested medium returned to the ponds after dewatering. Farm designs
        commonly recycle most of it (common practice; 0.9 from memory of design studies);
        set 0 for the conservative case of no recycling.
    harvest_density_g_m3 : float, default 500 [g m-3]
        Culture density at harvest, used only to turn a harvested mass into a harvested
        volume when no volume is given; raceways are run at about 0.3-1 g L-1
        (common practice).
    manning_n : float, default 0.015 [s m-1/3]
        See :data:`MANNING_N`.
    bend_k : float, default 2.0 [-]
        See :data:`BEND_LOSS_K` (from memory).
    paddlewheel_efficiency : float, default 0.17 [-]
        See :data:`PADDLEWHEEL_EFFICIENCY` (from memory).
    mixing_hours_per_day : float, default 24 [h d-1]
        Paddlewheels usually run around the clock to keep cells suspended (common
        practice); fewer hours scale the energy linearly.
    length_to_width : float, default 10 [-]
        Pond proportion when the channel width is not given; see
        :func:`raceway_geometry` (common practice).
    n_channels : int, default 2
    """

    carbon_fraction: float = 0.5
    co2_utilisation: float = 0.7
    n_fraction: float = 0.07
    p_fraction: float = 0.01
    n_fertiliser: str = "urea"
    p_fertiliser: str = "dap_18_46_0"
    recycle_fraction: float = 0.9
    harvest_density_g_m3: float = 500.0
    manning_n: float = DEFAULT_MANNING_N
    bend_k: float = BEND_LOSS_K
    paddlewheel_efficiency: float = PADDLEWHEEL_EFFICIENCY
    mixing_hours_per_day: float = 24.0
    length_to_width: float = 10.0
    n_channels: int = 2

    def __post_init__(self):
        ranges = {
            "carbon_fraction": (0.0, 1.0, False),
            "co2_utilisation": (0.0, 1.0, False),
            "n_fraction": (0.0, 1.0, True),
            "p_fraction": (0.0, 1.0, True),
            "recycle_fraction": (0.0, 1.0, True),
            "paddlewheel_efficiency": (0.0, 1.0, False),
            "mixing_hours_per_day": (0.0, 24.0, True),
        }
        for name, (lo, hi, lo_ok) in ranges.items():
            v = getattr(self, name)
            ok = (v >= lo if lo_ok else v > lo) and v <= hi
            if not ok:
                bracket = "[" if lo_ok else "("
                raise InputError(f"must be in {bracket}{lo:g}, {hi:g}], got {v!r}",
                                 field=f"inputs.{name}")
        for name in ("harvest_density_g_m3", "manning_n", "length_to_width"):
            if not getattr(self, name) > 0:
                raise InputError(f"must be > 0, got {getattr(self, name)!r}",
                                 field=f"inputs.{name}")
        if not self.bend_k >= 0:
            raise InputError(f"must be >= 0, got {self.bend_k!r}", field="inputs.bend_k")
        get_fertiliser(self.n_fertiliser)
        get_fertiliser(self.p_fertiliser)


@dataclass(frozen=True)
class RacewayFarm:
    """The ponds of a farm, as the inputs bill needs them.

    Any object with ``area_m2``, ``count`` and ``depth_m`` (such as the scenario's pond)
    works in :func:`inputs_bill`; the channel attributes are then optional.

    Attributes
    ----------
    area_m2 : float [m2]
        Water surface of one pond.
    count : int
        Number of ponds.
    depth_m : float [m]
        Culture depth.
    channel_width_m : float, optional [m]
        Default from :func:`raceway_geometry`.
    channel_length_m : float, optional [m]
        Flow path of one circuit; default area / channel width.
    velocity_m_s : float, default 0.25 [m s-1]
        Design mean channel velocity (common practice 0.2-0.3).
    """

    area_m2: float
    count: int = 1
    depth_m: float = 0.25
    channel_width_m: float | None = None
    channel_length_m: float | None = None
    velocity_m_s: float = DESIGN_VELOCITY_M_S


def mixing_power(farm, params: InputsParams | None = None) -> dict:
    """Paddlewheel power of one pond of a farm, from its channel hydraulics.

    Parameters
    ----------
    farm : RacewayFarm or object with ``area_m2``, ``depth_m`` (optional
        ``channel_width_m``, ``channel_length_m``, ``velocity_m_s``)
    params : InputsParams, optional

    Returns
    -------
    dict
        ``power_w`` [W per pond], ``head_m`` [m], ``flow_m3_s`` [m3 s-1],
        ``channel_width_m`` [m], ``channel_length_m`` [m], ``n_bends``,
        ``velocity_m_s`` [m s-1], ``power_w_m2`` [W per m2 of pond].
    """
    params = params or InputsParams()
    area = float(farm.area_m2)
    depth = float(farm.depth_m)
    v = float(getattr(farm, "velocity_m_s", None) or DESIGN_VELOCITY_M_S)
    width = getattr(farm, "channel_width_m", None)
    length = getattr(farm, "channel_length_m", None)
    n_bends = params.n_channels
    if width is None:
        geom = raceway_geometry(area, params.length_to_width, params.n_channels)
        width = float(geom["channel_width_m"])
    if length is None:
        length = area / float(width)
    head = raceway_head_loss(v, width, depth, length, n_bends, params.manning_n,
                             params.bend_k)
    flow = v * width * depth
    power = paddlewheel_power(head, flow, params.paddlewheel_efficiency)
    return {"power_w": float(power), "head_m": float(head), "flow_m3_s": float(flow),
            "channel_width_m": float(width), "channel_length_m": float(length),
            "n_bends": n_bends, "velocity_m_s": v, "power_w_m2": float(power) / area}


# ---------------------------------------------------------------------------------------
# The bill
# ---------------------------------------------------------------------------------------

#: Unit prices understood by :func:`inputs_bill` (any one currency).
PRICE_KEYS = ("co2_per_t", "n_fertiliser_per_t", "p_fertiliser_per_t", "water_per_m3",
              "electricity_per_MWh")


def _month_keys(series: pd.Series, name: str):
    """Month key per row: Period('YYYY-MM') for dated rows, int 1-12 for month numbers."""
    idx = series.index
    if isinstance(idx, pd.DatetimeIndex):
        return idx.tz_localize(None).to_period("M") if idx.tz is not None \
            else idx.to_period("M")
    if isinstance(idx, pd.PeriodIndex):
        return idx.asfreq("M")
    values = np.asarray(idx)
    if values.dtype.kind in "iu" and values.size and values.min() >= 1 and values.max() <= 12:
        return pd.Index(values.astype(int))
    raise InputError("index must be dates (DatetimeIndex or PeriodIndex) or month numbers "
                     f"1-12, got {type(idx).__name__}", field=name)


def _as_series(x, name):
    if not isinstance(x, pd.Series):
        raise InputError(f"must be a pandas Series indexed by date or month, got "
                         f"{type(x).__name__}", field=name)
    return x.astype(float)


def _by_month(series: pd.Series, name: str) -> pd.Series:
    return series.groupby(_month_keys(series, name)).sum()


def _days_in(keys) -> np.ndarray:
    if isinstance(keys, pd.PeriodIndex):
        return keys.days_in_month.to_numpy(dtype=float)
    # month numbers without a year: a non-leap calendar
    return np.array([pd.Period(f"2001-{m:02d}", "M").days_in_month for m in keys], float)


def _operating_days(series: pd.Series, months) -> np.ndarray:
    """Days of operation per month: the distinct dates seen when rows are finer than a
    month (daily, hourly), else the calendar days of the month."""
    idx = series.index
    if isinstance(idx, pd.DatetimeIndex):
        keys = _month_keys(series, "evaporation_mm_by_month")
        if keys.duplicated().any():
            local = idx.tz_localize(None) if idx.tz is not None else idx
            per_month = pd.Series(local.normalize(), index=keys).groupby(level=0).nunique()
            return per_month.reindex(months, fill_value=0).to_numpy(dtype=float)
    return _days_in(months)


def _labels(months) -> list[str]:
    if isinstance(months, pd.PeriodIndex):
        if len(set(months.year)) == 1:
            return [_MONTH_ABBR[m - 1] for m in months.month]
        return [str(p) for p in months]
    return [_MONTH_ABBR[int(m) - 1] for m in months]


def inputs_bill(harvested_kg_by_month, evaporation_mm_by_month, rain_mm_by_month, farm, *,
                params: InputsParams | None = None, prices: dict | None = None,
                harvest_volume_m3_by_month=None) -> pd.DataFrame:
    """Monthly and annual inputs of the whole farm, with costs when prices are given.

    Parameters
    ----------
    harvested_kg_by_month : pandas.Series [kg ash-free dry weight per row, whole farm]
        Indexed by dates (daily or monthly rows; a DatetimeIndex or PeriodIndex) or by
        month numbers 1-12. Rows are summed into calendar months.
    evaporation_mm_by_month : pandas.Series [mm per row]
        Same kind of index. Daily rows are best: see :func:`makeup_water`.
    rain_mm_by_month : pandas.Series or None [mm per row]
        On the same index as evaporation; None means no rain.
    farm : RacewayFarm or an object with ``area_m2``, ``count``, ``depth_m``
        See :class:`RacewayFarm` and :func:`mixing_power`.
    params : InputsParams, optional
    prices : dict, optional
        Unit prices, any keys of :data:`PRICE_KEYS`: ``co2_per_t`` [per t CO2],
        ``n_fertiliser_per_t`` and ``p_fertiliser_per_t`` [per t of product],
        ``water_per_m3`` [per m3], ``electricity_per_MWh`` [per MWh]; one currency.
    harvest_volume_m3_by_month : pandas.Series, optional [m3 per row, whole farm]
        Culture volume harvested; default harvested mass / ``params.harvest_density_g_m3``.

    Returns
    -------
    pandas.DataFrame
        One row per month (``Jan`` … ``Dec``, or ``YYYY-MM`` over several years) and a
        last row ``year`` (``total`` over several years) that is the sum of the months.
        Columns: ``biomass_t``, ``co2_t``, ``n_t``, ``p_t``, one ``<fertiliser>_t`` per
        product, ``makeup_water_m3``, ``mixing_MWh``; with prices a ``*_cost`` column per
        priced line and ``total_cost``. ``attrs`` hold ``units``, the ``params`` used and
        the ``mixing`` hydraulics of one pond.

    Notes
    -----
    CO2, N and P follow the harvested biomass (:func:`co2_demand`,
    :func:`nutrient_demand`, :func:`fertiliser_plan`): carbon fixed into biomass that was
    later lost to crashes, respiration or the harvester is not counted, so these lines
    are lower bounds. Mixing runs on every operating day (the distinct dates of daily
    rows, else the calendar days) for every pond, ``params.mixing_hours_per_day`` hours a
    day, at the power of :func:`mixing_power`.
    """
    params = params or InputsParams()
    harvested = _as_series(harvested_kg_by_month, "harvested_kg_by_month")
    evap = _as_series(evaporation_mm_by_month, "evaporation_mm_by_month")
    if rain_mm_by_month is None:
        rain = pd.Series(0.0, index=evap.index)
    else:
        rain = _as_series(rain_mm_by_month, "rain_mm_by_month")
        if not rain.index.equals(evap.index):
            raise InputError("rain must be on the same index as evaporation (the floor at "
                             "zero net evaporation is applied row by row)",
                             field="rain_mm_by_month")
    if harvest_volume_m3_by_month is None:
        volume = harvested * 1e3 / params.harvest_density_g_m3
    else:
        volume = _as_series(harvest_volume_m3_by_month, "harvest_volume_m3_by_month")
    prices = dict(prices or {})
    for key in prices:
        if key not in PRICE_KEYS:
            raise InputError(f"unknown price {key!r}{did_you_mean(key, PRICE_KEYS)}; "
                             f"choose from {', '.join(PRICE_KEYS)}", field=f"prices.{key}")

    farm_area = float(farm.area_m2) * int(farm.count)
    water_rows = makeup_water(evap, rain, farm_area)  # evaporation part, floored per row
    h_m = _by_month(harvested, "harvested_kg_by_month")
    w_m = _by_month(water_rows, "evaporation_mm_by_month")
    v_m = _by_month(volume, "harvest_volume_m3_by_month")
    kinds = {type(s.index) for s in (h_m, w_m, v_m)}
    if len(kinds) > 1:
        raise InputError("inputs mix dated rows and month numbers; use one kind of index",
                         field="harvested_kg_by_month")
    months = h_m.index.union(w_m.index).union(v_m.index).sort_values()
    h_m, w_m, v_m = (s.reindex(months, fill_value=0.0) for s in (h_m, w_m, v_m))

    biomass_kg = h_m.to_numpy()
    co2_kg = co2_demand(biomass_kg, params.carbon_fraction, params.co2_utilisation)
    n_kg, p_kg = nutrient_demand(biomass_kg, params.n_fraction, params.p_fraction)
    products = fertiliser_plan(n_kg, p_kg, params.n_fertiliser, params.p_fertiliser)
    makeup_m3 = w_m.to_numpy() + v_m.to_numpy() * (1.0 - params.recycle_fraction)
    mixing = mixing_power(farm, params)
    days = _operating_days(evap, months)
    mixing_mwh = mixing["power_w"] * int(farm.count) * params.mixing_hours_per_day \
        * days * 1e-6

    table = pd.DataFrame({
        "biomass_t": biomass_kg * 1e-3,
        "co2_t": co2_kg * 1e-3,
        "n_t": n_kg * 1e-3,
        "p_t": p_kg * 1e-3,
        **{f"{name}_t": mass * 1e-3 for name, mass in products.items()},
        "makeup_water_m3": makeup_m3,
        "mixing_MWh": mixing_mwh,
    }, index=pd.Index(_labels(months), name="month"))

    if prices:
        nf = get_fertiliser(params.n_fertiliser).name
        pf = get_fertiliser(params.p_fertiliser).name
        cost_lines = {"co2_cost": ("co2_t", "co2_per_t"),
                      f"{pf}_cost": (f"{pf}_t", "p_fertiliser_per_t"),
                      "water_cost": ("makeup_water_m3", "water_per_m3"),
                      "mixing_cost": ("mixing_MWh", "electricity_per_MWh")}
        if nf != pf:
            cost_lines[f"{nf}_cost"] = (f"{nf}_t", "n_fertiliser_per_t")
        costs = {col: table[qty] * float(prices[key])
                 for col, (qty, key) in cost_lines.items() if key in prices}
        for col, values in costs.items():
            table[col] = values
        table["total_cost"] = sum(costs.values()) if costs else 0.0

    multi_year = isinstance(months, pd.PeriodIndex) and len(set(months.year)) > 1
    table.loc["total" if multi_year else "year"] = table.sum(axis=0)
    units = {c: ("t" if c.endswith("_t") else "m3" if c.endswith("_m3") else
                 "MWh" if c.endswith("_MWh") else "currency") for c in table.columns}
    table.attrs = {"units": units, "params": asdict(params), "mixing": mixing,
                   "farm_area_m2": farm_area}
    return table


def bill_from_results(ds, *, policy=None, farm=None, rain_mm_daily=None,
                      params: InputsParams | None = None, prices: dict | None = None,
                      statistic: str = "mean") -> pd.DataFrame:
    """The inputs bill of one policy from a simulation's results Dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        The results contract of :mod:`pondsim.results.files`: ``harvested`` [g m-2 d-1] and
        ``harvest_fraction`` [-] over (policy, member, day), ``evaporation`` [mm d-1]
        over day, a ``date`` coordinate and the ``pond_area_m2``, ``pond_count``,
        ``depth_m`` attributes.
    policy : str, optional
        Default the first policy.
    farm : RacewayFarm, optional
        Default built from the Dataset's attributes with the default velocity and
        geometry.
    rain_mm_daily : array-like or Series, optional [mm d-1]
        Rain per simulated day (e.g. the daily sums of :mod:`pondsim.pond.thermal`'s ``rain``);
        without it no rain is counted, which overstates makeup water.
    params : InputsParams, optional
    prices : dict, optional
        See :func:`inputs_bill`.
    statistic : {"mean", "median"}
        Across members, per day.

    Returns
    -------
    pandas.DataFrame
        As :func:`inputs_bill`; the harvested volume is ``harvest_fraction`` × pond
        volume × pond count.
    """
    if statistic not in ("mean", "median"):
        raise InputError(f"statistic must be 'mean' or 'median', got {statistic!r}",
                         field="statistic")
    policies = [str(p) for p in ds["policy"].values]
    policy = policies[0] if policy is None else policy
    if policy not in policies:
        raise InputError(f"unknown policy {policy!r}{did_you_mean(str(policy), policies)}; "
                         f"choose one of {', '.join(policies)}", field="policy")
    if farm is None:
        farm = RacewayFarm(area_m2=float(ds.attrs["pond_area_m2"]),
                           count=int(ds.attrs["pond_count"]),
                           depth_m=float(ds.attrs["depth_m"]))
    farm_area = float(farm.area_m2) * int(farm.count)
    sel = ds.sel(policy=policy)
    reduce = getattr(sel["harvested"], statistic)
    dates = pd.DatetimeIndex(ds["date"].values)
    harvested_kg = pd.Series(reduce("member").values * farm_area * 1e-3, index=dates)
    volume = pd.Series(getattr(sel["harvest_fraction"], statistic)("member").values
                       * float(farm.area_m2) * float(farm.depth_m) * int(farm.count),
                       index=dates)
    evap = pd.Series(ds["evaporation"].values.astype(float), index=dates)
    rain = None
    if rain_mm_daily is not None:
        values = np.asarray(rain_mm_daily, dtype=float)
        if values.shape != evap.shape:
            raise InputError(f"rain needs one value per simulated day ({len(evap)}), got "
                             f"{values.size}", field="rain_mm_daily")
        rain = pd.Series(values, index=dates)
    return inputs_bill(harvested_kg, evap, rain, farm, params=params, prices=prices,
                       harvest_volume_m3_by_month=volume)


__all__ = [
    "ATOMIC_WEIGHTS", "BEND_LOSS_K", "CO2_PER_C", "DEFAULT_MANNING_N", "FERTILISERS",
    "Fertiliser", "GRAVITY", "InputsParams", "MANNING_N", "PADDLEWHEEL_EFFICIENCY",
    "PRICE_KEYS", "P_PER_P2O5", "RacewayFarm", "REDFIELD_C_N_P", "bill_from_results",
    "co2_demand", "fertiliser_mass", "fertiliser_plan", "formula_composition",
    "get_fertiliser", "hydraulic_radius_rectangular", "inputs_bill", "makeup_water",
    "manning_friction_slope", "manning_velocity", "mass_fraction", "mixing_power",
    "molar_mass", "nutrient_demand", "paddlewheel_power", "raceway_geometry",
    "raceway_head_loss", "redfield_n_p",
]

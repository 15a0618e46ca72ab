"""Biomass and fertiliser stoichiometry for the inputs bill.

Element fractions of biomass and fertiliser products, CO2 per unit of carbon, and the
products that supply a nitrogen and phosphorus demand. Mass stoichiometry uses the IUPAC
standard atomic weights (abridged values, CIAAW 2021); molar masses and element fractions
of fertilisers are computed from their formulas here, never typed in.

References
----------
Chisti, Y. (2007) Biodiesel from microalgae. *Biotechnol. Adv.* 25:294-306.
doi:10.1016/j.biotechadv.2007.02.001. Section 3 gives the approximate biomass formula
CO0.48H1.83N0.11P0.01 (after Grobbelaar 2004) used as the default composition; the
formula was taken from secondary citations, the page itself was not re-read here.

Serejo, M. L. et al. (2015) *Environ. Sci. Technol.* 49 (abstract): C 49 ± 2 %, N 9 %,
P 1 % in a pond-grown algal-bacterial biomass over 175 days.

Redfield, A. C. (1958) The biological control of chemical factors in the environment.
*Am. Sci.* 46:205-221 (C:N:P = 106:16:1 by atoms).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from pondsim.errors import InputError, did_you_mean

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

#: Redfield ratio C:N:P by atoms (Redfield 1958).
REDFIELD_C_N_P = (106.0, 16.0, 1.0)


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
# Biomass composition
# ---------------------------------------------------------------------------------------

#: Default biomass formula per carbon atom: Chisti (2007) section 3, after Grobbelaar
#: (2004), as quoted in the scenario schema (``inputs.composition_formula``).
DEFAULT_BIOMASS_FORMULA = "CO0.48H1.83N0.11P0.01"


def biomass_composition(formula: str = DEFAULT_BIOMASS_FORMULA, carbon_fraction=None,
                        n_fraction=None, p_fraction=None) -> dict:
    """Carbon, nitrogen and phosphorus mass fractions of dry biomass.

    Parameters
    ----------
    formula : str
        Elemental formula with decimal counts, e.g. ``"CO0.48H1.83N0.11P0.01"``
        (elements C, H, O, N, P, S).
    carbon_fraction, n_fraction, p_fraction : float, optional [kg kg-1]
        Measured fractions that replace the formula's.

    Returns
    -------
    dict
        ``carbon_fraction``, ``n_fraction``, ``p_fraction`` [kg kg-1],
        ``co2_per_kg`` [kg CO2 per kg biomass at full uptake], ``molar_mass`` [g per
        mol of formula] and ``source`` (text).

    Notes
    -----
    .. math:: w_E = \\frac{a_E\\,M_E}{\\sum_k a_k M_k}

    with the standard atomic weights :data:`ATOMIC_WEIGHTS` (IUPAC/CIAAW 2021, abridged).
    For the default formula: M = 23.386 g mol-1, C 0.5136, N 0.0659, P 0.01324 and
    1.882 kg CO2 per kg.
    """
    from pondsim.scenario.parse import biomass_formula_counts

    counts = biomass_formula_counts(formula)
    if counts is None or not set(counts) <= set(ATOMIC_WEIGHTS) or not counts.get("C"):
        raise InputError(f"cannot read biomass formula {formula!r}; allowed: a formula "
                         "like CO0.48H1.83N0.11P0.01", field="inputs.composition_formula")
    mass = sum(ATOMIC_WEIGHTS[el] * a for el, a in counts.items())
    frac = {el: ATOMIC_WEIGHTS[el] * counts.get(el, 0.0) / mass for el in ("C", "N", "P")}
    given = {"carbon_fraction": carbon_fraction, "n_fraction": n_fraction,
             "p_fraction": p_fraction}
    out = {"carbon_fraction": frac["C"], "n_fraction": frac["N"], "p_fraction": frac["P"]}
    measured = [k for k, v in given.items() if v is not None]
    for k in measured:
        out[k] = float(given[k])
    src = f"composition {formula} (IUPAC 2021 atomic weights)"
    if formula == DEFAULT_BIOMASS_FORMULA:
        src += " as quoted by Chisti (2007) Biotechnol. Adv. 25:294-306, sect. 3"
    if measured:
        src += "; measured " + ", ".join(f"{k} = {given[k]:g}" for k in measured)
    out.update(co2_per_kg=out["carbon_fraction"] * CO2_PER_C, molar_mass=float(mass),
               source=src)
    return out


#: C, N and P fractions of :data:`DEFAULT_BIOMASS_FORMULA` [kg kg-1] (0.5136, 0.0659,
#: 0.01324), the defaults of :func:`co2_demand` and :func:`nutrient_demand`.
DEFAULT_COMPOSITION = biomass_composition()


# ---------------------------------------------------------------------------------------
# Carbon and nutrients
# ---------------------------------------------------------------------------------------

def co2_demand(biomass_kg, carbon_fraction=DEFAULT_COMPOSITION["carbon_fraction"],
               utilisation=0.7):
    """CO2 to supply for a mass of biomass.

    Parameters
    ----------
    biomass_kg : float, array-like or Series [kg ash-free dry weight]
    carbon_fraction : float, default 0.5136 [kg C kg-1]
        Carbon in the dry biomass, from :data:`DEFAULT_BIOMASS_FORMULA` (C 49 ± 2 % was
        measured in a pond-grown algal-bacterial biomass by Serejo et al. 2015).
    utilisation : float, default 0.7 [-]
        Share of the supplied CO2 that the culture fixes; the rest outgasses. 0.7 is an
        assumption: a carbonation column on a raceway transferred 83 % (Putt et al. 2011,
        *Bioresour. Technol.* 102:3240-3245, abstract); simple diffusers do worse.

    Returns
    -------
    same type as *biomass_kg* [kg CO2]

    Notes
    -----
    .. math:: m_{CO_2} = m_X\\, f_C\\, \\frac{M_{CO_2}}{M_C} \\frac{1}{u}

    with M(CO2)/M(C) = 44.009/12.011 = 3.664 from the standard atomic weights; 0.5 C and
    full utilisation give 1.832 kg kg-1, the default composition 1.882 kg kg-1.
    """
    return biomass_kg * carbon_fraction * CO2_PER_C / utilisation


def nutrient_demand(biomass_kg, n_fraction=DEFAULT_COMPOSITION["n_fraction"],
                    p_fraction=DEFAULT_COMPOSITION["p_fraction"]):
    """Nitrogen and phosphorus taken up into biomass, as elements.

    Parameters
    ----------
    biomass_kg : float, array-like or Series [kg ash-free dry weight]
    n_fraction : float, default 0.0659 [kg N kg-1]
        Nitrogen in the dry biomass, from :data:`DEFAULT_BIOMASS_FORMULA` (9 % in Serejo
        et al. 2015).
    p_fraction : float, default 0.01324 [kg P kg-1]
        Phosphorus, from :data:`DEFAULT_BIOMASS_FORMULA` (1 % in Serejo et al. 2015).

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
    biomass of 50 % C this is 8.8 % N and 1.2 % P.
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

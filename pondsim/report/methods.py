"""Method notes and limitations of the report page: the models used with their published
sources, what the model leaves out, and the cautions."""

from __future__ import annotations

from pondsim.glossary import CAUTION
from pondsim.report.html import _table, _text_td, esc

METHODS = (
    ("Sun position", "The NREL solar position algorithm (through pvlib), taken at the "
     "middle of each hour.", "Reda & Andreas (2004) Solar Energy 76:577–589"),
    ("Clear-sky irradiance", "The Ineichen–Perez model with Linke turbidity (pvlib), for "
     "clear-sky site mode and the cloud correction.",
     "Ineichen & Perez (2002) Solar Energy 73:151–157"),
    ("Light entering the culture", "The PAR share of global irradiance and the photon "
     "count per joule, both integrated over 400–700 nm of the ASTM G173 reference "
     "spectrum; surface reflection from Fresnel's equations for water (n = 1.333) for the "
     "beam and a constant 0.066 for sky light.",
     "ASTM G173-03; checked against Szeicz (1974), Thimijan & Heins (1983) and Payne (1972) "
     "J. Atmos. Sci. 29:959–970"),
    ("Water temperature", "An hourly heat balance of one well-mixed layer: absorbed sun, sky "
     "longwave in, longwave out, evaporation, convection, ground conduction and makeup "
     "water.", "Béchet et al. (2011) Environ. Sci. Technol. 45:3702–3709"),
    ("Sky longwave", "The weather file's infrared field where present, else a clear-sky "
     "emissivity chosen by [pond] sky_emissivity (Brutsaert by default, Swinbank or "
     "Idso–Jackson) with a cloud correction.",
     "Brutsaert (1975) Water Resour. Res. 11:742–744; Swinbank (1963); Idso & Jackson "
     "(1969); Crawford & Duchon (1999)"),
    ("Evaporation and sensible heat", "Surface transfer chosen by [pond] "
     "surface_transfer: Ryan–Harleman (default: forced convection by the wind plus free "
     "convection while the water is warmer than the air), Harbeck's area-dependent mass "
     "transfer, or a Penman-type wind function; sensible heat from the same transfer with "
     "the Bowen ratio; FAO-56 saturation vapour pressure. Rain offsets the makeup water "
     "hour by hour; unknown rain counts as none.",
     "Ryan, Harleman & Stolzenbach (1974) Water Resour. Res. 10:930–938; Harbeck (1962) "
     "USGS Prof. Paper 272-E; Shuttleworth (1993); Allen et al. (1998) FAO-56"),
    ("Light response", "Steele, Monod/Tamiya or Jassby–Platt, averaged over the culture "
     "depth under Beer–Lambert attenuation by biomass and medium.",
     "Steele (1962); Jassby & Platt (1976)"),
    ("Temperature response", "The cardinal temperature model with inflexion.",
     "Rosso, Lobry & Flandrois (1993) J. Theor. Biol. 162:447–463"),
    ("Maintenance", "A respiration loss m = m_ref·θ^(T − T_ref), by day and by night.",
     "common practice (θ form)"),
    ("Carrying capacity K", "Per day, the density at which that day's net growth is zero, "
     "capped by a nutrient limit where one is set.", "pondsim's definition"),
    ("Check of the engine", "With constant forcing the best sustained logistic yield is "
     "r·K/4 at K/2.", "Schaefer (1954)"),
    ("Crash hazard", "A discrete-time daily hazard, the sum of four named causes: "
     "background (Q10 in water temperature), starvation (the culture's mean net loss rate "
     "over the last days), heat (hours of water above the strain's maximum) and cold "
     "shock (a fall below the previous days' mean); crash probability 1 − exp(−hazard), "
     "the cause booked as a competing risk from the same seeded draw; salvage booked "
     "apart from the harvest. Parameters fitted to a pond log by maximum likelihood "
     "(pondsim hazardfit) or, until then, ASSUMPTIONS.",
     "Kalbfleisch & Prentice (2002) The Statistical Analysis of Failure Time Data, ch. 1 "
     "and 8; pondsim's causes"),
    ("Weather years", "Synthetic years resampled from the weather record (or the file's "
     "own real years); they spread the weather but hold no year worse than the record.",
     "pondsim.forcing.years"),
    ("Parameter draws", "Latin hypercube sampling of the uncertain strain parameters.",
     "McKay, Beckman & Conover (1979) Technometrics 21:239–245"),
    ("Sensitivity", "First-order and total Sobol indices (Saltelli/Jansen estimators in "
     "scipy.stats.sobol_indices) with bootstrap intervals.",
     "Sobol' (2001); Saltelli et al. (2010) Comput. Phys. Commun. 181:259–270"),
    ("Inputs bill", "Per member and day: CO₂ from the carbon of the biomass taken up "
     "(gross or net growth, inputs.uptake_basis) over the supply share and utilisation; "
     "N and P from the biomass formula's element shares less recycling, bought as the "
     "fertilisers' products (IUPAC atomic weights); makeup water from the thermal stage; "
     "mixing power from Manning friction and bend losses of the raceway channel over the "
     "paddlewheel and drive efficiencies; each line priced with [prices]; cost per tonne "
     "of product per member, P90/P50/P10 with distribution-free intervals.",
     "Chisti (2007) Biotechnol. Adv. 25:294–306; CIAAW/IUPAC (2021) atomic weights; Chow "
     "(1959) Open-Channel Hydraulics"),
    ("P-values", "Exceedance convention: P90 is the annual yield reached or exceeded in 90 % "
     "of members (the 10th percentile), P50 the median.", "common practice in project "
     "finance"),
)


def _methods() -> str:
    rows = [[f'<th scope="row">{esc(stage)}</th>', _text_td(what), _text_td(source)]
            for stage, what, source in METHODS]
    return _table(["stage", "method", "published source"], rows,
                  caption="Models used and where they come from", table_id="methods-table")


def _limitations() -> str:
    items = [
        "The pond is one well-mixed layer: no vertical gradients of temperature or light "
        "history (flashing light), no covered ponds or greenhouses.",
        "Growth responds to light and temperature only; nutrients act only as a cap on K; "
        "pH, dissolved oxygen, salinity and contamination dynamics are not modelled.",
        "A typical-year weather file holds no real year-to-year variation. Synthetic years "
        "spread the weather but hold no year worse than the record, so P90 may be "
        "optimistic.",
        "Crash hazards are assumptions, not measurements: replace them with the site's own "
        "crash history before relying on the risk figures.",
        "The bill leaves out the inoculum's seed train, cleaning chemicals, capital, "
        "maintenance and labour unless priced; prices are the scenario's, not market "
        "data. N and P billed on gross growth overstate the nutrients of biomass that is "
        "respired (its nutrients return to the medium).",
        "Crashes are drawn on the study's weather basis (see the crash section): a "
        "typical-year file has no real year-to-year spread, so rare bad years are "
        "missing from the crash figures.",
        "The best rule per season is picked season by season; the combined plan has not "
        "been simulated as a whole until it is written into the scenario.",
        "A demo or invented site, strain or weather file gives numbers for no real "
        "decision.",
    ]
    safety = [
        "These are estimates, not guarantees of yield, cost or safety.",
        "Deep water: ponds and sumps are a drowning hazard; fence them and keep rescue "
        "equipment at hand.",
        "Paddlewheels and pumps: guard rotating parts and lock out power before work.",
        "CO₂: pressurised gas that can collect in pits and low or enclosed spaces and "
        "suffocate; follow the supplier's handling rules.",
        "Chemicals (cleaning agents such as hypochlorite, acids, fertilisers): store and "
        "handle them as their safety data sheets require.",
        "Defer to local codes and permits and to licensed engineers for design, "
        "construction and operation.",
    ]
    return ("<h3>What the model leaves out</h3><ul>"
            + "".join(f"<li>{esc(t)}</li>" for t in items) + "</ul>"
            + f'<div class="caution" id="caution"><p><strong>Caution.</strong> '
            f"{esc(CAUTION)}</p><ul>" + "".join(f"<li>{esc(t)}</li>" for t in safety)
            + "</ul></div>")


__all__ = ["METHODS", "_limitations", "_methods"]

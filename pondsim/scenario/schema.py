"""The scenario schema: every key of a scenario file declared once, with its type, unit,
default, allowed range and meaning. The README's scenario reference is generated from
these tables (``pondsim keys``)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

MONTHS = 12


@dataclass(frozen=True)
class Key:
    """Declaration of one scenario key."""

    kind: str  # "float", "int", "str", "bool", "date", "floats12", "ints", "path"
    default: Any = None  # None with required=False means "optional, absent"
    doc: str = ""
    unit: str = ""
    low: float | None = None
    high: float | None = None
    choices: tuple[str, ...] | None = None
    required: bool = False
    open_low: bool = False  # low bound excluded


# --------------------------------------------------------------------------------------
# The schema: section -> key -> declaration. Order here is the order of the README table.
# --------------------------------------------------------------------------------------
SCHEMA: dict[str, dict[str, Key]] = {
    "study": {
        "name": Key("str", "pondsim study", "Title used in tables and figures."),
        "year": Key("int", 2025, "Calendar year simulated (leap years have 366 days).",
                    "", 1900, 2100),
    },
    "site": {
        "name": Key("str", "site", "Site name."),
        "latitude": Key("float", None, "Latitude, north positive.", "deg", -66.5, 66.5),
        "longitude": Key("float", None, "Longitude, east positive.", "deg", -180, 180),
        "elevation_m": Key("float", None, "Elevation above sea level.", "m", -430, 5000),
        "utc_offset_h": Key("float", None, "Offset of local standard time from UTC.",
                            "h", -12, 14),
    },
    "weather": {
        "source": Key("str", "file", "Where hourly weather comes from: a weather file or "
                      "clear-sky mode from monthly normals.", choices=("file", "clearsky")),
        "path": Key("path", None, "Weather file, relative to the scenario file "
                    "(source = 'file')."),
        "format": Key("str", "auto", "Weather file format.",
                      choices=("auto", "epw", "tmy3", "tmy2", "pvgis", "csv")),
        "wind_height_m": Key("float", 10.0, "Height of the wind measurement.", "m", 0.5, 100),
        "max_gap_h": Key("int", 3, "Longest gap of missing hours filled by interpolation.",
                         "h", 0, 24),
        "site_check": Key("str", "warn", "What to do when the site disagrees with the "
                          "weather: latitude/longitude beyond 1 deg or another UTC offset "
                          "than the file header, or the data's daily irradiance peak more "
                          "than 0.4 h from the computed solar noon (assumption-based "
                          "tolerances, see pondsim.forcing.sitecheck). 'warn' notes it in "
                          "the summary; 'strict' refuses the run (also: --strict).",
                          choices=("warn", "strict")),
    },
    "weather.normals": {
        "temp_max_c": Key("floats12", None, "Mean daily maximum air temperature per month.",
                          "degC", -60, 60),
        "temp_min_c": Key("floats12", None, "Mean daily minimum air temperature per month.",
                          "degC", -60, 60),
        "wind_speed_m_s": Key("floats12", None, "Mean wind speed per month.", "m s-1", 0, 40),
        "relative_humidity_pct": Key("floats12", None, "Mean relative humidity per month.",
                                     "%", 1, 100),
        "clearness": Key("floats12", None, "Mean daily GHI over clear-sky daily GHI per "
                         "month (give this or ghi_kwh_m2_d).", "1", 0.05, 1.0),
        "ghi_kwh_m2_d": Key("floats12", None, "Mean daily GHI per month.", "kWh m-2 d-1",
                            0.0, 12.0),
    },
    "pond": {
        "area_m2": Key("float", 1000.0, "Water surface of one pond.", "m2", 1.0, 1e6),
        "count": Key("int", 1, "Number of ponds in the farm.", "", 1, 100000),
        "depth_m": Key("float", 0.25, "Culture depth (held constant by makeup water).",
                       "m", 0.05, 1.0),
        "ground_temperature_c": Key("float", None, "Deep-ground temperature under the pond "
                                    "(default: annual mean air temperature).", "degC", -20, 45),
        "ground_conductance_w_m2_k": Key("float", 1.5, "Heat transfer coefficient from the "
                                         "water to the deep ground (assumption: soil ~1 W m-1 "
                                         "K-1 over ~0.7 m, common practice).", "W m-2 K-1",
                                         0.0, 50.0),
        "makeup_temperature_c": Key("float", None, "Temperature of makeup water (default: "
                                    "ground temperature).", "degC", 0, 60),
        "heat_input_w_m2": Key("float", 0.0, "Extra heat input, e.g. waste heat.", "W m-2",
                               0.0, 1000.0),
        "water_emissivity": Key("float", 0.97, "Longwave emissivity of water.", "1", 0.9, 1.0),
        "refractive_index": Key("float", 1.333, "Refractive index of the medium (Fresnel "
                                "reflectance).", "1", 1.3, 1.4),
        "surface_transfer": Key("str", "ryan_harleman", "Heat and vapour transfer at the "
                                "pond surface: Ryan, Harleman & Stolzenbach (1974) cooling-"
                                "pond formula (forced + free convection, the default: the "
                                "one inside the FAO-56 check on most months), Harbeck (1962) "
                                "area-dependent mass transfer + the same free convection, or "
                                "the Penman open-water wind function (Shuttleworth 1993).",
                                choices=("ryan_harleman", "harbeck", "penman_shuttleworth")),
        "ryan_harleman_wind_w_m2_hpa": Key("float", 3.1, "Forced-convection coefficient b0 "
                                           "of Ryan et al. (1974) in SI, per m s-1 of wind "
                                           "at 2 m ([2]: 14 BTU ft-2 d-1 mph-1 mmHg-1).",
                                           "W m-2 hPa-1 (m s-1)-1", 0.5, 10.0),
        "free_convection_w_m2_hpa_k13": Key("float", 2.7, "Free-convection coefficient of "
                                            "Ryan et al. (1974), acting only while the water "
                                            "is warmer (in virtual temperature) than the air; "
                                            "0 switches it off.", "W m-2 hPa-1 K-1/3",
                                            0.0, 10.0),
        "harbeck_prefactor": Key("float", 0.291, "Harbeck (1962) N = prefactor x area^"
                                 "exponent, area of one pond in m2, wind at 2 m (from "
                                 "memory; primary table not seen).",
                                 "mm d-1 (m s-1)-1 hPa-1", 0.01, 2.0),
        "harbeck_area_exponent": Key("float", -0.05, "Exponent of the area in Harbeck's N "
                                     "(from memory).", "1", -0.5, 0.0),
        "sky_emissivity": Key("str", "brutsaert", "Clear-sky emissivity used where the "
                              "weather file has no valid infrared field: Brutsaert (1975), "
                              "Swinbank (1963) or Idso & Jackson (1969), with the cloud "
                              "correction of Crawford & Duchon (1999).",
                              choices=("brutsaert", "swinbank", "idso_jackson")),
    },
    "light": {
        "par_fraction": Key("float", None, "PAR (400-700 nm) share of global irradiance "
                            "(default: integrated from the ASTM G173 spectrum).", "1", 0.3, 0.6),
        "photons_per_joule_umol": Key("float", None, "Photon flux per watt of PAR (default: "
                                      "from ASTM G173).", "umol J-1", 4.0, 5.0),
    },
    "strain": {
        "name": Key("str", "strain", "Strain name."),
        "growth_form": Key("str", "self_shading", "Growth equation.",
                           choices=("self_shading", "logistic")),
        "mu_max_per_d": Key("float", None, "Maximum specific growth rate.", "d-1", 0.05, 5.0,
                            required=True),
        "light_model": Key("str", "steele", "Light response f(I).",
                           choices=("steele", "monod", "jassby_platt")),
        "light_param_umol_m2_s": Key("float", None, "Light parameter: optimum irradiance "
                                     "(steele), half-saturation (monod) or saturation onset "
                                     "Ik (jassby_platt).", "umol m-2 s-1", 5.0, 3000.0,
                                     required=True),
        "t_min_c": Key("float", None, "Minimum temperature for growth (CTMI).", "degC",
                       -10, 40, required=True),
        "t_opt_c": Key("float", None, "Optimum temperature (CTMI).", "degC", 0, 50,
                       required=True),
        "t_max_c": Key("float", None, "Maximum temperature for growth (CTMI).", "degC", 5, 60,
                       required=True),
        "maintenance_per_d": Key("float", 0.05, "Maintenance/respiration rate at "
                                 "maintenance_t_ref_c.", "d-1", 0.0, 1.0),
        "maintenance_theta": Key("float", 1.07, "Temperature coefficient of maintenance "
                                 "(m = m_ref theta^(T - T_ref)).", "1", 1.0, 1.2),
        "maintenance_t_ref_c": Key("float", 20.0, "Reference temperature of maintenance.",
                                   "degC", 0, 40),
        "k_biomass_m2_g": Key("float", 0.2, "Biomass-specific light extinction.", "m2 g-1",
                              0.01, 2.0),
        "k_background_per_m": Key("float", 2.0, "Light extinction of the medium itself.",
                                  "m-1", 0.0, 100.0),
        "nutrient_limit_g_m3": Key("float", None, "Cap on the carrying capacity set by the "
                                   "nutrient supply.", "g m-3", 1.0, 20000.0),
        "capacity_table_g_m3": Key("floats12", None, "Monthly carrying capacity table "
                                   "(logistic form only; default: computed light-limited K).",
                                   "g m-3", 1.0, 20000.0),
    },
    "inoculation": {
        "start_date": Key("date", None, "First day of culture (default: 1 January of the "
                          "study year)."),
        "density_g_m3": Key("float", 50.0, "Inoculum density.", "g m-3", 0.1, 5000.0),
        "restart_days": Key("int", 7, "Days a restarted pond is out of service (drain, "
                            "clean, refill, grow a seed train) before reinoculation.", "d",
                            0, 120),
    },
    "harvest": {
        "hour": Key("int", 9, "Local hour of the day at which harvest decisions are made.",
                    "h", 0, 23),
        "recovery_efficiency": Key("float", 0.95, "Share of removed biomass recovered by "
                                   "dewatering.", "1", 0.0, 1.0, open_low=True),
        "capacity_m3_per_d": Key("float", None, "Most culture volume one pond can send to "
                                 "harvest per day.", "m3 d-1", 0.0, 1e6, open_low=True),
        "min_density_g_m3": Key("float", 0.0, "Below this density nothing is harvested.",
                                "g m-3", 0.0, 20000.0),
        "floor_g_m3": Key("float", None, "Viable-density floor: no harvest leaves the "
                          "culture below it (the harvest is cut back to it). Default: the "
                          "inoculation density, so the culture left after a harvest can "
                          "always restart growth as a fresh pond would (common practice: "
                          "semi-continuous ponds keep a residual culture as their own "
                          "inoculum). 0 lets rules run as written.", "g m-3", 0.0, 20000.0),
        "washout_days": Key("int", 7, "A member whose culture stays at or below the floor "
                            "(below it at the harvest hour, or its harvest cut back to it) "
                            "on more than this many days in a row is flagged as washed "
                            "out: the rule dilutes faster than the culture grows, or "
                            "the culture cannot grow there. ASSUMPTION (a week: one "
                            "operating review).", "d", 1, 365),
        "dewatering_capacity_m3_per_d": Key("float", None, "Culture volume the whole "
                                            "farm's dewatering can process per day (all "
                                            "ponds together); `pondsim tune` keeps the "
                                            "farm's harvest volume within it (highest "
                                            "7-day mean, member mean; ponds staggered). "
                                            "Default: no limit.", "m3 d-1", 0.0, 1e8,
                                            open_low=True),
        "dewatering_cost_kg_per_m3": Key("float", 0.0, "Cost of processing one m3 of "
                                         "harvested culture, as the biomass whose sale "
                                         "pays for it (cost per m3 / price per kg AFDW). "
                                         "Above 0, `pondsim tune` maximises net product "
                                         "= biomass - cost x volume.", "kg m-3", 0.0, 1000.0),
    },
    "crash": {
        "enabled": Key("bool", True, "Draw culture crashes (false: deterministic runs)."),
        "basis": Key("str", "assumption: pondsim defaults, not measured at this site",
                     "Where the hazard values come from (written by `pondsim hazardfit`; "
                     "printed beside every crash figure)."),
        "background_per_d": Key("float", 0.002, "Background hazard (contamination, "
                                "grazers) at background_t_ref_c: 0.002 is 16 % per 90-day "
                                "season. ASSUMPTION: fit it to the site's crash log "
                                "(`pondsim hazardfit`).", "d-1", 0.0, 1.0),
        "background_t_ref_c": Key("float", 20.0, "Water temperature at which the background "
                                  "hazard is background_per_d.", "degC", -5.0, 50.0),
        "background_q10": Key("float", 2.0, "Factor by which the background hazard rises "
                              "per 10 K of day-mean water temperature (1: no temperature "
                              "effect); warm water favours grazers. ASSUMPTION: Q10 ~ 2 is "
                              "common practice for biological rates.", "1", 0.1, 20.0),
        "starvation_hazard_per_d": Key("float", 0.02, "Light/carbon starvation hazard at a "
                                       "mean net loss of 0.1 d-1 over window_days (linear "
                                       "in the loss rate; a culture above what recent days "
                                       "sustain loses biomass). ASSUMPTION.", "d-1", 0.0,
                                       50.0),
        "window_days": Key("int", 3, "Recent days: window of the starvation index (mean "
                           "net growth rate since inoculation) and of the cold-shock "
                           "reference temperature.", "d", 1, 30),
        "heat_hazard_per_d_h": Key("float", 0.02, "Heat hazard per hour of the day with the "
                                   "water above the strain's t_max_c. ASSUMPTION.",
                                   "d-1 h-1", 0.0, 10.0),
        "cold_hazard_per_d_k": Key("float", 0.005, "Cold-shock hazard per kelvin that the "
                                   "day-mean water temperature falls below the previous "
                                   "window_days' mean beyond cold_onset_k. ASSUMPTION.",
                                   "d-1 K-1", 0.0, 10.0),
        "cold_onset_k": Key("float", 3.0, "Fall of the day-mean water temperature that "
                            "counts as no shock. ASSUMPTION.", "K", 0.0, 30.0),
        "loss_fraction": Key("float", 0.8, "Share of standing biomass lost in a crash (the "
                             "rest is salvage, booked apart from harvest).", "1", 0.0, 1.0),
        "salvage_sellable": Key("bool", False, "Count crash salvage (x recovery efficiency) "
                                "as harvested product."),
        "max_season_probability": Key("float", 0.10, "Risk limit: highest acceptable "
                                      "probability of at least one crash in a season when "
                                      "naming the best policy per season.", "1", 0.0, 1.0,
                                      open_low=True),
    },
    "run": {
        "members": Key("int", 1, "Crash replicates per driver set (weather year x "
                       "parameter draw) and policy; the same meaning as --members of every "
                       "command.", "", 1, 1000000),
        "seed": Key("int", 12345, "Seed of the random streams (same seed, same result).",
                    "", 0, 2**63 - 1),
        "progress": Key("bool", True, "Show progress bars on long runs."),
        "engine": Key("str", "numpy", "Integrator: 'numpy' (the reference) or 'compiled' "
                      "(numba; same model and random streams, results within ~1e-6 "
                      "relative, many times faster for small ensembles). Until the "
                      "compiled kernel is ported to the current crash and harvest-floor "
                      "rules, 'compiled' runs the numpy engine.",
                      choices=("numpy", "compiled")),
    },
}

# Array-of-tables sections are declared separately.
POLICY_KEYS: dict[str, Key] = {
    "name": Key("str", None, "Unique policy name.", required=True),
    "type": Key("str", None, "Harvest rule.", required=True,
                choices=("none", "fixed_fraction", "threshold", "fixed_interval")),
    "fraction": Key("float", None, "Share of the culture volume removed per harvest "
                    "(fixed_fraction; fixed_interval without residual).", "1", 0.0, 1.0,
                    open_low=True),
    "every_days": Key("int", 1, "Days between harvests (fixed_fraction, fixed_interval).",
                      "d", 1, 365),
    "trigger_g_m3": Key("float", None, "Density that triggers a harvest (threshold).",
                        "g m-3", 0.0, 20000.0, open_low=True),
    "residual_g_m3": Key("float", None, "Density left after a harvest (threshold, "
                         "fixed_interval).", "g m-3", 0.0, 20000.0, open_low=True),
}


SEASON_KEYS: dict[str, Key] = {
    "name": Key("str", None, "Season name.", required=True),
    "months": Key("ints", None, "Calendar months (1-12) of the season; seasons must cover "
                  "every month once.", "", 1, 12, required=True),
}

PLAN_KEYS: dict[str, Key] = {
    "name": Key("str", None, "Unique plan name (shown beside the policies).", required=True),
    "policy_by_season": Key("table", None, "Inline table: season name -> policy name, "
                            "one entry per season.", required=True),
}

UNCERTAINTY_KEYS: dict[str, Key] = {
    "weather_years": Key("int", 20, "Synthetic weather years for tuning studies and the "
                         "first round of an outlook (a file of real years uses all of "
                         "them).", "", 1, 10000),
    "draws": Key("int", 16, "Parameter draws (Latin hypercube) per weather year for outlook "
                 "studies; every weather year has its own draws.", "", 1, 10000),
    "sobol_samples": Key("int", 64, "Base samples for Sobol sensitivity indices (a power "
                         "of two; cost = samples x (parameters + 2) runs).", "", 8, 8192),
    "p90_target_pct": Key("float", 5.0, "Outlook convergence target: the ensemble grows "
                          "until the 95 % interval half-width of the lead policy's P90 is "
                          "at most this share of its P50 (assumption: 5 % keeps a default "
                          "outlook within minutes; set 2 for a lender's figure).", "%",
                          0.1, 100.0, open_low=True),
    "max_members": Key("int", 2000, "Outlook cap: the ensemble stops growing before it "
                       "would exceed this many members per policy (weather years x draws "
                       "x crash replicates) and reports 'not converged'.", "", 1, 1000000),
    "max_cut_share": Key("float", 0.05, "Largest share of an uncertain parameter's "
                         "distribution that its allowed strain range may cut away "
                         "(truncation); more is refused. Also the largest share of draws "
                         "allowed to break t_min < t_opt < t_max before they are refused "
                         "rather than redrawn (assumption).", "1", 0.0, 0.5),
    "farm_crash_correlation": Key("float", 0.0, "Correlation of crash losses between the "
                                  "farm's ponds in the same weather year and draw (0: each "
                                  "pond crashes independently; 1: all ponds together). "
                                  "Assumption: no published value; ponds sharing inoculum "
                                  "or staff are likely above 0.", "1", 0.0, 1.0),
}

#: [inputs]: what the ponds consume and how their mixing is built (the inputs bill).
#: Declared apart from SCHEMA, like [uncertainty]: only the bill reads it.
INPUTS_KEYS: dict[str, Key] = {
    "composition_formula": Key(
        "str", "CO0.48H1.83N0.11P0.01", "Elemental formula of the ash-free dry biomass "
        "per carbon atom (elements C H O N P S, decimal counts); gives the C, N and P "
        "mass fractions. Default: the microalgal formula quoted by Chisti (2007) "
        "Biotechnol. Adv. 25:294-306 (doi:10.1016/j.biotechadv.2007.02.001), section 3, "
        "after Grobbelaar (2004); with IUPAC 2021 atomic weights it is 51.4 % C, 6.6 % N, "
        "1.3 % P. A measured outdoor composition (C 51.5, N 9.3, P 1.2 % of AFDW) is in "
        "Biotechnol. Biofuels 14 (2021), doi:10.1186/s13068-021-02098-3, Table 2."),
    "carbon_fraction": Key("float", None, "Carbon share of the dry biomass; overrides "
                           "the formula's (e.g. your own CHN analysis).", "kg kg-1", 0.2,
                           0.7),
    "n_fraction": Key("float", None, "Nitrogen share of the dry biomass; overrides the "
                      "formula's.", "kg kg-1", 0.0, 0.15),
    "p_fraction": Key("float", None, "Phosphorus share of the dry biomass; overrides "
                      "the formula's.", "kg kg-1", 0.0, 0.05),
    "carbon_basis": Key("str", "gross_growth", "Biomass the CO2 line is billed on: "
                        "gross_growth (all carbon photosynthesis fixed, including what "
                        "maintenance respiration later releases as CO2) or net_growth "
                        "(gross growth less respiration: respired CO2 taken as fixed "
                        "again). The growth model does not follow dissolved inorganic "
                        "carbon; assumption: gross_growth, respired CO2 counted as lost "
                        "to the air (the larger bill).",
                        choices=("gross_growth", "net_growth")),
    "nutrient_basis": Key("str", "net_growth", "Biomass the N and P lines are billed "
                          "on: net_growth (gross growth less respiration = the biomass "
                          "that is harvested, lost in crashes or left standing) or "
                          "gross_growth. In the growth model respiration is a "
                          "first-order loss of standing biomass (pondsim.pond.kinetics."
                          "maintenance_rate) that takes nothing out of the pond, so the N "
                          "and P of respired biomass stay in the medium and are taken up "
                          "again: net_growth is what the ponds consume (model-based "
                          "default). Purchases follow the running maximum of cumulative "
                          "uptake, so nutrients released on net-loss days offset later "
                          "uptake instead of being bought twice. Assumption: complete re-uptake of "
                          "the released N and P within the pond.",
                          choices=("net_growth", "gross_growth")),
    "co2_supply_fraction": Key("float", 1.0, "Share of the carbon taken up that is "
                               "supplied as bought CO2 (the rest from the air and the "
                               "medium's alkalinity). Assumption: 1, all of it.", "1",
                               0.0, 1.0),
    "co2_utilisation": Key("float", 0.7, "Share of the supplied CO2 that the culture "
                           "takes up; the rest outgasses. Assumption: 0.7 (a "
                           "carbonation column on a raceway transferred 83 %: Putt et "
                           "al. 2011, Bioresour. Technol. 102:3240-3245, abstract).",
                           "1", 0.0, 1.0, open_low=True),
    "n_fertiliser": Key("str", "urea", "Nitrogen product (fractions from its formula or "
                        "trade grade).", choices=(
                            "urea", "ammonium_nitrate", "dap", "map", "dap_18_46_0",
                            "map_11_52_0")),
    "p_fertiliser": Key("str", "dap_18_46_0", "Phosphorus product; the nitrogen it "
                        "brings is credited against the N demand.", choices=(
                            "dap", "map", "dap_18_46_0", "map_11_52_0", "tsp")),
    "n_recycle_fraction": Key("float", 0.0, "Share of the nitrogen taken up that comes "
                              "back to the ponds (recycled medium, digestate) and need "
                              "not be bought. Assumption: 0, none.", "1", 0.0, 0.99),
    "p_recycle_fraction": Key("float", 0.0, "Share of the phosphorus taken up that "
                              "comes back to the ponds. Assumption: 0, none.", "1",
                              0.0, 0.99),
    "water_recycle_fraction": Key("float", 0.9, "Share of the harvested medium returned "
                                  "to the ponds after dewatering. Assumption: 0.9; set 0 "
                                  "for no return.", "1", 0.0, 1.0),
    "blowdown_per_d": Key("float", 0.0, "Culture volume discharged per day to hold "
                          "salinity, as a share of the pond volume; replaced by makeup "
                          "water. Assumption: 0, none.", "d-1", 0.0, 0.5),
    "velocity_m_s": Key("float", 0.25, "Mean channel velocity. Assumption: common "
                        "practice 0.2-0.3 m s-1 keeps cells in suspension.", "m s-1",
                        0.05, 1.0),
    "manning_n": Key("float", 0.015, "Manning roughness of the channel. Assumption: "
                     "float-finished concrete or a fouled liner (Chow 1959, Open-Channel "
                     "Hydraulics, Table 5-6, lists n for lined channels).", "s m-1/3",
                     0.008, 0.05),
    "bends_per_circuit": Key("int", 2, "180 degree bends in one circuit of a pond (an "
                             "even number: one per channel).", "", 2, 20),
    "bend_loss_k": Key("float", 2.0, "Loss of one 180 degree bend in velocity heads "
                       "v^2/(2 g). Assumption: 2 for an unbaffled hairpin bend.", "1",
                       0.0, 10.0),
    "length_to_width": Key("float", 10.0, "Pond length over total width, for the "
                           "channel width when channel_width_m is not given. "
                           "Assumption.", "1", 1.0, 100.0),
    "channel_width_m": Key("float", None, "Channel width (default: from the pond area, "
                           "length_to_width and bends_per_circuit channels).", "m", 0.2,
                           100.0),
    "paddlewheel_efficiency": Key("float", 0.2, "Hydraulic power delivered to the water "
                                  "over shaft power. Assumption.", "1", 0.01, 1.0),
    "drive_efficiency": Key("float", 0.85, "Shaft power over electric power (motor and "
                            "gearbox). Assumption; with the paddlewheel default the "
                            "wire-to-water efficiency is 0.17.", "1", 0.1, 1.0),
    "mixing_hours_per_day": Key("float", 24.0, "Hours of paddlewheel operation per "
                                "day. Assumption: day and night.", "h d-1", 0.0, 24.0),
    "harvest_kwh_per_m3": Key("float", None, "Electricity to harvest and dewater one "
                              "m3 of culture (pumps, settlers, centrifuge). Not set: "
                              "not counted, and the bill says so.", "kWh m-3", 0.0,
                              100.0),
}

#: [prices]: unit prices of the inputs bill, in one currency named once.
PRICES_KEYS: dict[str, Key] = {
    "currency": Key("str", None, "Currency of every price (named once), e.g. 'USD'; "
                    "required when any price is given."),
    "co2_per_t": Key("float", None, "Delivered CO2.", "currency t-1", 0.0, 1e6),
    "n_fertiliser_per_t": Key("float", None, "Nitrogen product (inputs.n_fertiliser).",
                              "currency t-1", 0.0, 1e6),
    "p_fertiliser_per_t": Key("float", None, "Phosphorus product "
                              "(inputs.p_fertiliser).", "currency t-1", 0.0, 1e6),
    "water_per_m3": Key("float", None, "Makeup water.", "currency m-3", 0.0, 1e4),
    "electricity_per_mwh": Key("float", None, "Electricity (mixing, harvest).",
                               "currency MWh-1", 0.0, 1e5),
    "dewatering_per_m3": Key("float", None, "Harvest and dewatering services or "
                             "consumables per m3 of culture harvested (flocculant, "
                             "contract).", "currency m-3", 0.0, 1e4),
    "labour_per_harvest": Key("float", None, "Labour per pond harvest (optional).",
                              "currency", 0.0, 1e6),
}

#: Distributions a strain parameter may take in [uncertainty], and their keys.
DISTRIBUTIONS = {
    "normal": ("sd",),            # mean = the strain's value
    "lognormal": ("sigma",),      # median = the strain's value, sigma of ln
    "uniform": ("low", "high"),
    "triangular": ("low", "high"),  # mode = the strain's value
}

#: Meteorological seasons by month, hemisphere-neutral names; used when none are given.
DEFAULT_SEASONS = (("Dec-Feb", (12, 1, 2)), ("Mar-May", (3, 4, 5)),
                   ("Jun-Aug", (6, 7, 8)), ("Sep-Nov", (9, 10, 11)))



def _allowed(key: Key) -> str:
    if key.choices:
        return "one of " + ", ".join(repr(c) for c in key.choices)
    parts = []
    if key.low is not None and key.high is not None:
        lo = "(" if key.open_low else "["
        parts.append(f"a number in {lo}{key.low:g}, {key.high:g}]")
    elif key.kind in ("float", "floats12"):
        parts.append("a number")
    if key.unit and key.unit != "1":
        parts.append(key.unit)
    return " ".join(parts) if parts else key.kind



def schema_markdown() -> str:
    """The scenario reference as Markdown tables (one per section)."""
    lines = []
    sections = list(SCHEMA.items()) + [
        ("policy (array of tables [[policy]])", POLICY_KEYS),
        ("season (array of tables [[season]]; default: Dec-Feb, Mar-May, Jun-Aug, "
         "Sep-Nov)", SEASON_KEYS),
        ("plan (array of tables [[plan]])", PLAN_KEYS),
        ("uncertainty (plus one inline table per uncertain strain parameter, e.g. "
         "mu_max_per_d = { distribution = \"normal\", sd = 0.2 }; distributions: "
         + ", ".join(f"{d} ({', '.join(k)})" for d, k in DISTRIBUTIONS.items())
         + ")", UNCERTAINTY_KEYS),
        ("inputs", INPUTS_KEYS), ("prices", PRICES_KEYS)]
    for section, keys in sections:
        lines += [f"### `[{section}]`", "", "| key | unit | default | allowed | meaning |",
                  "|---|---|---|---|---|"]
        for name, key in keys.items():
            if key.required:
                default = "required"
            elif key.default is None:
                default = "—"
            else:
                default = f"`{key.default}`"
            allowed = _allowed(key) if (key.choices or key.low is not None) else {
                "floats12": "12 numbers", "ints": "list of whole numbers",
                "table": "inline table", "path": "file path", "date": "date YYYY-MM-DD",
            }.get(key.kind, key.kind)
            unit = key.unit or ""
            lines.append(f"| `{name}` | {unit} | {default} | {allowed} | {key.doc} |")
        lines.append("")
    return "\n".join(lines)



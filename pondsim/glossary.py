"""Names and units of the variables that flow between pondsim's stages.

Forcing names follow pvlib's glossary (``ghi``, ``dni``, ``dhi``, ``temp_air``,
``wind_speed``, ``solar_zenith``); pondsim adds its own in the same style. A column or a
dataset variable with one of these names always carries the unit given here.
"""

#: Hourly forcing table (local standard time, one row per hour, values are hour means
#: centred on the half hour).
FORCING = {
    "ghi": ("global horizontal irradiance", "W m-2"),
    "dni": ("direct normal irradiance", "W m-2"),
    "dhi": ("diffuse horizontal irradiance", "W m-2"),
    "temp_air": ("air temperature", "degC"),
    "wind_speed": ("wind speed at the measurement height", "m s-1"),
    "relative_humidity": ("relative humidity", "%"),
    "pressure": ("air pressure", "Pa"),
    "precipitation": ("precipitation in the hour", "mm"),
    "ir_horizontal": ("downwelling longwave (sky infrared) on a horizontal surface", "W m-2"),
    "solar_zenith": ("apparent solar zenith angle at the middle of the hour", "deg"),
    "ghi_clear": ("clear-sky global horizontal irradiance", "W m-2"),
}

#: Culture-surface light.
LIGHT = {
    "par": ("PAR photon flux entering the culture", "umol m-2 s-1"),
    "par_daily": ("daily PAR photon dose entering the culture", "mol m-2 d-1"),
}

#: Pond thermal stage.
THERMAL = {
    "water_temperature": ("pond water temperature, mean over the hour", "degC"),
    "water_temperature_end": ("pond water temperature at the end of the hour", "degC"),
    "surface_temperature": ("surface temperature (ice surface when frozen)", "degC"),
    "evaporation": ("evaporation in the step (negative: condensation)", "mm"),
    "rain": ("rain falling on the pond in the step", "mm"),
    "makeup": ("makeup water added in the step, max(evaporation - rain, 0)", "mm"),
    "ice": ("latent heat store of ice on the pond", "J m-2"),
    "frozen": ("pond frozen (water held at 0 degC under ice)", "bool"),
    "above_limit": ("water above the strain's upper temperature limit", "bool"),
    "q_shortwave": ("absorbed shortwave", "W m-2"),
    "q_longwave_in": ("absorbed sky longwave", "W m-2"),
    "q_longwave_out": ("emitted longwave (loss, negative)", "W m-2"),
    "q_evaporation": ("latent heat of evaporation (loss, negative)", "W m-2"),
    "q_convection": ("sensible heat exchange with the air", "W m-2"),
    "q_ground": ("conduction from the ground", "W m-2"),
    "q_makeup": ("heat carried by makeup water and rain", "W m-2"),
    "q_input": ("heat input (e.g. waste heat)", "W m-2"),
}

#: Results of a simulation (daily values per policy and member).
RESULTS = {
    "density": ("culture density at the end of the day", "g m-3"),
    "areal_biomass": ("standing biomass per pond area", "g m-2"),
    "harvested": ("biomass harvested in the day (after recovery losses)", "g m-2 d-1"),
    "carrying_capacity": ("carrying capacity K", "g m-3"),
    "growth_rate": ("mean net specific growth rate over the day", "d-1"),
    "water_temperature": ("mean water temperature of the day", "degC"),
    "par_daily": ("daily PAR entering the culture", "mol m-2 d-1"),
    "evaporation": ("evaporation in the day", "mm d-1"),
    "crashed": ("culture crash on this day", "1"),
    "status": ("pond status: 0 growing, 1 out of service (restart)", "1"),
}

#: Areal biomass conversion: 1 g m-2 = 10 kg ha-1 = 0.01 t ha-1.
G_M2_TO_T_HA = 0.01

CAUTION = (
    "Results are estimates from a model, not guarantees of yield or cost. Weather, strain "
    "behaviour, contamination and operations at a real site will differ. Open ponds hold "
    "deep water, rotating paddlewheels, pressurised CO2 and cleaning chemicals: design, "
    "build and operate them to local codes and permits, with licensed engineers."
)

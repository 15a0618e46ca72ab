"""Surface heat and vapour transfer models and sky longwave models, each against its own
source, plus the FAO-56 check that chose the default transfer model."""

import os
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pvlib
import pytest

from pondsim.errors import InputError
from pondsim.forcing.weather import read_weather
from pondsim.pond import longwave, thermal, transfer

PVLIB_DATA = os.path.join(os.path.dirname(pvlib.__file__), "data")
MODELS = transfer.TRANSFER_MODELS

# unit conversions used to turn English-unit coefficients into SI [R]
BTU_FT2_DAY_TO_W_M2 = 1055.056 / 0.09290304 / 86400.0  # 0.13135
MPH_TO_M_S = 0.44704
MMHG_TO_HPA = 1.333224


def _pond(**kw):
    base = dict(depth_m=0.25, area_m2=1000.0, count=1, ground_temperature_c=None,
                ground_conductance_w_m2_k=1.5, makeup_temperature_c=None,
                heat_input_w_m2=0.0, water_emissivity=0.97, refractive_index=1.333)
    base.update(kw)
    return SimpleNamespace(**base)


# --- each formula against its source --------------------------------------------------

def test_ryan_harleman_si_coefficients_from_english_units():
    # Ryan, Harleman & Stolzenbach (1974): b0 = 14 BTU ft-2 d-1 mph-1 mmHg-1 and
    # lambda = 22.4 BTU ft-2 d-1 F-1/3 mmHg-1 (from memory) -> SI 3.1 and 2.7
    # W m-2 hPa-1 as used by lake models citing them (Rasmussen et al. 1995) [2].
    b0 = 14.0 * BTU_FT2_DAY_TO_W_M2 / MPH_TO_M_S / MMHG_TO_HPA
    lam = 22.4 * BTU_FT2_DAY_TO_W_M2 * 1.8 ** (1.0 / 3.0) / MMHG_TO_HPA
    assert b0 == pytest.approx(transfer.RYAN_HARLEMAN_WIND, abs=0.05)
    assert lam == pytest.approx(transfer.RYAN_HARLEMAN_FREE, abs=0.05)
    # the kernels return per kPa: 10 hPa per kPa
    assert transfer.ryan_harleman_wind_function(2.0) == pytest.approx(3.1 * 2.0 * 10.0)
    assert transfer.free_convection(8.0) == pytest.approx(2.7 * 2.0 * 10.0)


def test_free_convection_zero_when_water_colder_than_air():
    # Ryan et al. (1974): free convection only in unstable air (water side lighter)
    assert transfer.free_convection(-3.0) == 0.0
    assert transfer.free_convection(0.0) == 0.0
    # a pond 5 K colder than moist air in calm: no latent or sensible exchange at all
    # under ryan_harleman and harbeck (no forced term at zero wind)
    for model in ("ryan_harleman", "harbeck"):
        forced, free = transfer.surface_transfer(model, np.array([0.0]))
        e_air = 0.6 * thermal.saturation_vapour_pressure(25.0)
        terms = thermal.heat_flux_terms(
            20.0, q_shortwave=0.0, q_longwave_in=300.0, temp_air_c=25.0,
            vapour_pressure_kpa=e_air, wind_function_w_m2_kpa=forced,
            psychrometric_kpa_c=0.067, ground_temperature_c=20.0,
            ground_conductance_w_m2_k=0.0, makeup_temperature_c=20.0, rain_kg_m2_s=0.0,
            free_convection_w_m2_kpa_k13=free,
            virtual_temperature_air_k=transfer.virtual_temperature_k(25.0, e_air, 101.3),
            pressure_kpa=101.3)
        assert terms["q_evaporation"][0] == 0.0 and terms["q_convection"][0] == 0.0
        # warmer water than air: free convection acts
        warm = thermal.heat_flux_terms(
            30.0, q_shortwave=0.0, q_longwave_in=300.0, temp_air_c=25.0,
            vapour_pressure_kpa=e_air, wind_function_w_m2_kpa=forced,
            psychrometric_kpa_c=0.067, ground_temperature_c=20.0,
            ground_conductance_w_m2_k=0.0, makeup_temperature_c=20.0, rain_kg_m2_s=0.0,
            free_convection_w_m2_kpa_k13=free,
            virtual_temperature_air_k=transfer.virtual_temperature_k(25.0, e_air, 101.3),
            pressure_kpa=101.3)
        assert warm["q_evaporation"][0] < 0 and warm["q_convection"][0] < 0
    # Penman's calm-wind term acts whatever the stratification (Shuttleworth 1993)
    forced, free = transfer.surface_transfer("penman_shuttleworth", np.array([0.0]))
    assert free == 0.0 and forced[0] == pytest.approx(6.43 * 1e6 / 86400)


def test_virtual_temperature_difference_drives_free_convection():
    # At equal temperature, saturated air over the water is lighter than drier air:
    # T_v = T/(1 - 0.378 e/p) (ideal-gas moist air, from memory) -> free convection > 0
    es = thermal.saturation_vapour_pressure(25.0)
    dtv = transfer.virtual_temperature_k(25.0, es, 101.3) \
        - transfer.virtual_temperature_k(25.0, 0.3 * es, 101.3)
    # 0.378 * 0.7 * 3.17 kPa / 101.3 kPa * 298 K ~ 2.5 K [R]
    assert dtv == pytest.approx(0.378 * 0.7 * es / 101.3 * 298.15, rel=0.05)


def test_harbeck_coefficient_falls_with_area():
    # Harbeck (1962) abstract [P]: N falls with reservoir area over 1-30,000 acres.
    # N = 0.291 A^-0.05 (A m2, E mm/d, u2 m/s, e hPa) is from memory [M].
    acre = 4046.856
    n = transfer.harbeck_coefficient(np.array([1.0, 30_000.0]) * acre)
    assert n[0] > n[1]
    assert n[0] / n[1] == pytest.approx(30_000.0 ** 0.05, rel=1e-9)
    # Lake Hefner (~9.4 km2): Marciano & Harbeck (1954) found 6.25e-4 cm (3 h)-1 per knot
    # at 8 m per mb (from memory) = 0.097 mm/d per m/s at 8 m, ~0.11 at 2 m over water
    # (log profile, z0 1e-4 m) [R]; the area law gives 0.130: within 25 % [M].
    assert transfer.harbeck_coefficient(9.4e6) == pytest.approx(0.11, rel=0.25)
    # as a heat flux: N u (10 hPa/kPa) 2.45 MJ/kg / 86400 s [R]
    assert transfer.harbeck_wind_function(2.0, 1000.0) == pytest.approx(
        0.291 * 1000.0 ** -0.05 * 2.0 * 10.0 * 2.45e6 / 86400.0)


def test_penman_wind_function_shuttleworth():
    # Shuttleworth (1993) eq. 4.2.31: 6.43 (1 + 0.536 u2) MJ m-2 d-1 kPa-1 [P]
    assert transfer.wind_function(2.0) * 86400 / 1e6 == pytest.approx(6.43 * 2.072)


def test_unknown_transfer_model_lists_choices():
    with pytest.raises(InputError, match="ryan_harleman, harbeck, penman_shuttleworth"):
        transfer.surface_transfer("dalton", np.array([1.0]))


@pytest.mark.parametrize("model", list(longwave.SKY_MODELS))
def test_sky_models_at_20c_50pct(model):
    # REFERENCES.md [R]: at 20 degC and 50 % RH, Brunt, Swinbank and Brutsaert give
    # 311-339 W m-2; agreement within ~10 % is a sanity check.
    ea = 0.5 * thermal.saturation_vapour_pressure(20.0)
    lw = longwave.SKY_MODELS[model](ea, 20.0) * longwave.STEFAN_BOLTZMANN * 293.15 ** 4
    assert 300.0 < lw < 345.0


def test_sky_model_formulas():
    # Swinbank (1963): L = 5.31e-13 T^6 W m-2 [M]
    eps = longwave.clear_sky_emissivity_swinbank(1.0, 15.0)
    assert eps * longwave.STEFAN_BOLTZMANN * 288.15 ** 4 == pytest.approx(
        5.31e-13 * 288.15 ** 6)
    # Idso & Jackson (1969): eps = 1 - 0.261 exp(-7.77e-4 T^2), T in degC [M]
    assert longwave.clear_sky_emissivity_idso_jackson(1.0, 0.0) == pytest.approx(0.739)
    assert longwave.clear_sky_emissivity_idso_jackson(1.0, 20.0) == pytest.approx(
        1 - 0.261 * np.exp(-7.77e-4 * 400.0))
    with pytest.raises(InputError, match="brutsaert, swinbank, idso_jackson"):
        longwave.sky_longwave(pd.DataFrame({"temp_air": [20.0],
                                            "relative_humidity": [50.0]}), "brunt")


# --- energy closes hour by hour for every model -----------------------------------------

def _week():
    f, _ = read_weather(os.path.join(PVLIB_DATA, "723170TYA.CSV"), fmt="tmy3")
    return f.loc["2025-03-01":"2025-03-10"]


@pytest.fixture(scope="module")
def week():
    return _week()


@pytest.mark.parametrize("sky", list(longwave.SKY_MODELS))
@pytest.mark.parametrize("model", MODELS)
def test_energy_closes_hour_by_hour(week, model, sky):
    df = thermal.water_temperature(week, _pond(depth_m=0.1, surface_transfer=model,
                                               sky_emissivity=sky), spinup_years=0)
    c, dt = df.attrs["heat_capacity_j_m2_k"], df.attrs["step_s"]
    flux = df[list(thermal.FLUX_TERMS)].sum(axis=1).to_numpy()
    t_end = df["water_temperature_end"].to_numpy()
    t_prev = np.r_[df.attrs["water_temperature_start_c"], t_end[:-1]]
    ice = df["ice"].to_numpy()
    ice_prev = np.r_[df.attrs["ice_start_j_m2"], ice[:-1]]
    # DESIGN.md: the heat ledger closes; here each hour to 1e-6 K equivalent
    np.testing.assert_allclose(flux * dt, c * (t_end - t_prev) - (ice - ice_prev),
                               atol=1e-6 * c)
    # evaporation is the latent flux over lambda(T) [R]
    lam = transfer.latent_heat_vaporisation(df["surface_temperature"]) * 1e6
    np.testing.assert_allclose(df["evaporation"], -df["q_evaporation"] / lam * dt,
                               rtol=2e-2, atol=1e-4)


# --- the FAO-56 check of the default model ----------------------------------------------

def fao56_reference_et0(forcing, latitude_deg, elevation_m):
    """Daily FAO-56 reference ET0 [mm d-1] from hourly forcing, written here
    independently of pondsim (Allen et al. 1998: eq. 6 with eqs. 7, 8, 11-13, 19, 21-25,
    37-39, 47; G = 0 for days)."""
    day = forcing.index.floor("D")
    grp = forcing.groupby(day)
    tmax, tmin = grp["temp_air"].max(), grp["temp_air"].min()

    def e0(t):  # eq. 11
        return 0.6108 * np.exp(17.27 * t / (t + 237.3))

    es = (e0(tmax) + e0(tmin)) / 2.0  # eq. 12
    ea = (forcing["relative_humidity"] / 100.0 * e0(forcing["temp_air"])).groupby(day).mean()
    tmean = (tmax + tmin) / 2.0  # eq. 9
    delta = 4098.0 * e0(tmean) / (tmean + 237.3) ** 2  # eq. 13
    p = 101.3 * ((293.0 - 0.0065 * elevation_m) / 293.0) ** 5.26  # eq. 7
    gamma = 0.665e-3 * p  # eq. 8
    u2 = grp["wind_speed"].mean() * 4.87 / np.log(67.8 * 10.0 - 5.42)  # eq. 47
    rs = grp["ghi"].sum() * 3600.0 / 1e6  # MJ m-2 d-1
    j = np.array([d.dayofyear for d in rs.index])
    phi = np.radians(latitude_deg)
    dr = 1 + 0.033 * np.cos(2 * np.pi * j / 365)  # eq. 23
    dec = 0.409 * np.sin(2 * np.pi * j / 365 - 1.39)  # eq. 24
    ws = np.arccos(np.clip(-np.tan(phi) * np.tan(dec), -1, 1))  # eq. 25
    ra = 24 * 60 / np.pi * 0.0820 * dr * (ws * np.sin(phi) * np.sin(dec)
                                          + np.cos(phi) * np.cos(dec) * np.sin(ws))  # 21
    rso = (0.75 + 2e-5 * elevation_m) * ra  # eq. 37
    rns = (1 - 0.23) * rs  # eq. 38
    rnl = 4.903e-9 * ((tmax + 273.16) ** 4 + (tmin + 273.16) ** 4) / 2 \
        * (0.34 - 0.14 * np.sqrt(ea)) * (1.35 * np.minimum(rs / rso, 1.0) - 0.35)  # eq. 39
    rn = rns - rnl
    return (0.408 * delta * rn + gamma * 900 / (tmean + 273) * u2 * (es - ea)) \
        / (delta + gamma * (1 + 0.34 * u2))  # eq. 6


def test_fao56_et0_worked_example_consistent():
    # FAO-56 Ex. 18 inputs (Brussels, 6 July, from memory [M]): Tmax 21.5, Tmin 12.3,
    # ea 1.41 kPa (via RH), u2 2.078 m/s, Rs 22.07 MJ m-2 d-1, lat 50.8 N, z 100 m;
    # published ET0 = 3.9 mm/d. Build one synthetic day with those daily values.
    idx = pd.date_range("2025-07-06", periods=24, freq="h", tz="Etc/GMT-1")
    hour = np.arange(24) + 0.5
    t = 16.9 + 4.6 * np.cos(2 * np.pi * (hour - 15.0) / 24.0)
    t = 12.3 + (t - t.min()) / (t.max() - t.min()) * 9.2
    rh = 100.0 * 1.409 / (0.6108 * np.exp(17.27 * t / (t + 237.3)))
    ghi = np.where((hour > 5) & (hour < 21), np.sin(np.pi * (hour - 5) / 16), 0.0)
    ghi = ghi / ghi.sum() * 22.07e6 / 3600.0
    f = pd.DataFrame({"temp_air": t, "relative_humidity": rh,
                      "wind_speed": 2.078 / (4.87 / np.log(67.8 * 10 - 5.42)), "ghi": ghi},
                     index=idx)
    assert fao56_reference_et0(f, 50.8, 100.0).iloc[0] == pytest.approx(3.9, abs=0.15)


def _pond_evaporation_ratio(name, fmt, model):
    forcing, meta = read_weather(os.path.join(PVLIB_DATA, name), fmt=fmt)
    ref = 1.05 * fao56_reference_et0(forcing, meta["latitude"], meta["elevation_m"])
    water = thermal.water_temperature(forcing, _pond(surface_transfer=model))
    evap = water["evaporation"].groupby(water.index.floor("D")).sum()
    month = pd.DatetimeIndex(ref.index).month
    monthly = evap.groupby(month).sum() / ref.groupby(month).sum()
    return evap.sum() / ref.sum(), monthly


@pytest.fixture(scope="module")
def fao_ratios():
    return {site: _pond_evaporation_ratio(*site, thermal.DEFAULT_TRANSFER)
            for site in (("723170TYA.CSV", "tmy3"), ("12839.tm2", "tmy2"))}


@pytest.mark.parametrize("site", [("723170TYA.CSV", "tmy3"), ("12839.tm2", "tmy2")])
def test_default_model_annual_evaporation_in_fao56_band(fao_ratios, site):
    # Kc x ET0 with Kc = 1.05 for open water < 2 m deep (FAO-56 Table 12, from memory of
    # the table: "open water, < 2 m depth or in subhumid climates or tropics" [M]);
    # the acceptance band is +-20 %.
    annual, _ = fao_ratios[site]
    assert 0.8 <= annual <= 1.2


def test_default_model_monthly_evaporation_in_fao56_band(fao_ratios):
    # Miami TMY2: every month within +-20 % of 1.05 ET0 (FAO-56 eq. 6, Table 12)
    _, miami = fao_ratios[("12839.tm2", "tmy2")]
    assert ((miami >= 0.8) & (miami <= 1.2)).all(), miami.round(2).to_dict()
    # Greensboro TMY3: February-October within +-20 %
    _, gso = fao_ratios[("723170TYA.CSV", "tmy3")]
    warm = gso.loc[2:10]
    assert ((warm >= 0.8) & (warm <= 1.2)).all(), gso.round(2).to_dict()


@pytest.mark.xfail(strict=True, reason="known: Ryan-Harleman evaporation is 0.66-0.71 of "
                   "1.05 ET0 in Greensboro's Nov-Jan (pond colder than the air, no free "
                   "convection, little wind term); see pond/transfer.py surface_transfer")
def test_default_model_greensboro_winter_in_fao56_band(fao_ratios):
    _, gso = fao_ratios[("723170TYA.CSV", "tmy3")]
    winter = gso.loc[[1, 11, 12]]
    assert ((winter >= 0.8) & (winter <= 1.2)).all()

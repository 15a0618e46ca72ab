"""The validated scenario: frozen dataclasses, one per section of the file."""

from __future__ import annotations

import dataclasses
import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path

from pondsim.scenario.schema import DEFAULT_SEASONS


# --------------------------------------------------------------------------------------
# Dataclasses
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Site:
    name: str
    latitude: float | None
    longitude: float | None
    elevation_m: float | None
    utc_offset_h: float | None


@dataclass(frozen=True)
class Weather:
    source: str
    path: Path | None
    format: str
    wind_height_m: float
    max_gap_h: int
    normals: dict[str, tuple[float, ...]] | None
    site_check: str = "warn"  # 'warn' or 'strict' (pondsim.forcing.sitecheck)


@dataclass(frozen=True)
class Pond:
    area_m2: float
    count: int
    depth_m: float
    ground_temperature_c: float | None
    ground_conductance_w_m2_k: float
    makeup_temperature_c: float | None
    heat_input_w_m2: float
    water_emissivity: float
    refractive_index: float
    surface_transfer: str = "ryan_harleman"
    ryan_harleman_wind_w_m2_hpa: float = 3.1
    free_convection_w_m2_hpa_k13: float = 2.7
    harbeck_prefactor: float = 0.291
    harbeck_area_exponent: float = -0.05
    sky_emissivity: str = "brutsaert"

    @property
    def farm_area_m2(self) -> float:
        """Water surface of all ponds [m2]."""
        return self.area_m2 * self.count

    @property
    def volume_m3(self) -> float:
        """Culture volume of one pond [m3]."""
        return self.area_m2 * self.depth_m


@dataclass(frozen=True)
class Light:
    par_fraction: float | None
    photons_per_joule_umol: float | None


@dataclass(frozen=True)
class Strain:
    name: str
    growth_form: str
    mu_max_per_d: float
    light_model: str
    light_param_umol_m2_s: float
    t_min_c: float
    t_opt_c: float
    t_max_c: float
    maintenance_per_d: float
    maintenance_theta: float
    maintenance_t_ref_c: float
    k_biomass_m2_g: float
    k_background_per_m: float
    nutrient_limit_g_m3: float | None
    capacity_table_g_m3: tuple[float, ...] | None


@dataclass(frozen=True)
class Inoculation:
    start_date: dt.date | None
    density_g_m3: float
    restart_days: int


@dataclass(frozen=True)
class Harvest:
    hour: int
    recovery_efficiency: float
    capacity_m3_per_d: float | None
    min_density_g_m3: float
    floor_g_m3: float | None = None
    washout_days: int = 7
    dewatering_capacity_m3_per_d: float | None = None
    dewatering_cost_kg_per_m3: float = 0.0


@dataclass(frozen=True)
class Policy:
    name: str
    type: str
    fraction: float | None = None
    every_days: int = 1
    trigger_g_m3: float | None = None
    residual_g_m3: float | None = None


@dataclass(frozen=True)
class Crash:
    enabled: bool
    basis: str
    background_per_d: float
    background_t_ref_c: float
    background_q10: float
    starvation_hazard_per_d: float
    window_days: int
    heat_hazard_per_d_h: float
    cold_hazard_per_d_k: float
    cold_onset_k: float
    loss_fraction: float
    salvage_sellable: bool
    max_season_probability: float


@dataclass(frozen=True)
class Season:
    name: str
    months: tuple[int, ...]


@dataclass(frozen=True)
class Plan:
    """A season plan: one policy name per season."""

    name: str
    policy_by_season: dict[str, str]


@dataclass(frozen=True)
class Uncertain:
    """One uncertain strain parameter: its distribution around the scenario value."""

    parameter: str
    distribution: str
    sd: float | None = None
    sigma: float | None = None
    low: float | None = None
    high: float | None = None


@dataclass(frozen=True)
class Uncertainty:
    weather_years: int
    draws: int
    sobol_samples: int
    parameters: tuple[Uncertain, ...] = ()
    p90_target_pct: float = 5.0
    max_members: int = 2000
    max_cut_share: float = 0.05
    farm_crash_correlation: float = 0.0


@dataclass(frozen=True)
class Run:
    members: int
    seed: int
    progress: bool
    engine: str = "numpy"


@dataclass(frozen=True)
class Inputs:
    """What the ponds consume and how the mixing is built ([inputs]; units in the schema)."""

    composition_formula: str = "CO0.48H1.83N0.11P0.01"
    carbon_fraction: float | None = None
    n_fraction: float | None = None
    p_fraction: float | None = None
    carbon_basis: str = "gross_growth"
    nutrient_basis: str = "net_growth"
    co2_supply_fraction: float = 1.0
    co2_utilisation: float = 0.7
    n_fertiliser: str = "urea"
    p_fertiliser: str = "dap_18_46_0"
    n_recycle_fraction: float = 0.0
    p_recycle_fraction: float = 0.0
    water_recycle_fraction: float = 0.9
    blowdown_per_d: float = 0.0
    velocity_m_s: float = 0.25
    manning_n: float = 0.015
    bends_per_circuit: int = 2
    bend_loss_k: float = 2.0
    length_to_width: float = 10.0
    channel_width_m: float | None = None
    paddlewheel_efficiency: float = 0.2
    drive_efficiency: float = 0.85
    mixing_hours_per_day: float = 24.0
    harvest_kwh_per_m3: float | None = None


@dataclass(frozen=True)
class Prices:
    """Unit prices in one currency ([prices]); None = not priced."""

    currency: str | None = None
    co2_per_t: float | None = None
    n_fertiliser_per_t: float | None = None
    p_fertiliser_per_t: float | None = None
    water_per_m3: float | None = None
    electricity_per_mwh: float | None = None
    dewatering_per_m3: float | None = None
    labour_per_harvest: float | None = None

    @property
    def any(self) -> bool:
        """True when at least one price is given."""
        return any(v is not None for k, v in dataclasses.asdict(self).items()
                   if k != "currency")


@dataclass(frozen=True)
class Scenario:
    """A validated study description. Build it with :func:`load_scenario`."""

    study_name: str
    year: int
    site: Site
    weather: Weather
    pond: Pond
    light: Light
    strain: Strain
    inoculation: Inoculation
    harvest: Harvest
    policies: tuple[Policy, ...]
    run: Run
    crash: Crash = None  # type: ignore[assignment]
    seasons: tuple[Season, ...] = tuple(Season(n, m) for n, m in DEFAULT_SEASONS)
    plans: tuple[Plan, ...] = ()
    uncertainty: Uncertainty = Uncertainty(20, 16, 64)
    inputs: Inputs = Inputs()
    prices: Prices = Prices()
    path: Path | None = None
    extra: dict = field(default_factory=dict, compare=False)

    def replace(self, **changes) -> Scenario:
        """Return a copy with top-level fields replaced."""
        return dataclasses.replace(self, **changes)


NO_HARVEST = Policy(name="no harvest", type="none")



"""The forcing table's contract: its columns, their units and allowed physical ranges,
and the formats that can be read into it."""

import pandas as pd

#: Formats understood by :func:`read_weather` (``fmt=``).
FORMATS = ("auto", "epw", "tmy3", "tmy2", "pvgis", "csv")

#: Columns every forcing table carries (derived columns added after these).
REQUIRED_COLUMNS = (
    "ghi", "dni", "dhi", "temp_air", "wind_speed", "relative_humidity", "pressure",
)
#: Columns kept where the file has them complete and in range.
OPTIONAL_COLUMNS = ("precipitation", "ir_horizontal")
#: Derived columns, computed for the site.
DERIVED_COLUMNS = ("solar_zenith", "ghi_clear")

#: Allowed physical ranges (lower, upper) in pondsim units.
RANGES = {
    "ghi": (0.0, 1500.0),
    "dni": (0.0, 1500.0),
    "dhi": (0.0, 1500.0),
    "temp_air": (-60.0, 60.0),
    "wind_speed": (0.0, 60.0),
    "relative_humidity": (0.0, 100.0),
    "pressure": (30000.0, 110000.0),
    # optional columns: out of range -> column dropped with a note, not an error
    "precipitation": (0.0, 200.0),
    "ir_horizontal": (40.0, 700.0),
}
UNITS = {
    "ghi": "W m-2", "dni": "W m-2", "dhi": "W m-2", "temp_air": "degC",
    "wind_speed": "m s-1", "relative_humidity": "%", "pressure": "Pa",
    "precipitation": "mm h-1", "ir_horizontal": "W m-2",
}
#: Irradiance down to this value [W m-2] is sensor night offset and is clipped to 0.
IRRADIANCE_CLIP_W_M2 = -10.0
#: Relative humidity up to this value [%] is sensor overshoot (fog, dew) and is clipped
#: to 100 %; above it the file is rejected.
RH_CLIP_PCT = 105.0

#: Year that typical-year rows are put into when no ``year`` is given (not a leap year).
DEFAULT_TYPICAL_YEAR = 2025

HOUR = pd.Timedelta(hours=1)
HALF_HOUR = pd.Timedelta(minutes=30)

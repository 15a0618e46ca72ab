"""pondsim: open raceway pond planning for microalgae.

Data flow (one subpackage per stage; each imports only from the stages above it)::

    scenario/     scenario TOML -> Scenario (schema, model, parse)
    forcing/      weather files or clear-sky site -> hourly forcing table
    pond/         PAR, water temperature and evaporation, growth kinetics, K(t)
    operations/   harvest rules, crash draws, the engine, simulate() -> Dataset
    results/      summary tables, figures, netCDF/CSV files
    studies/      compare, tune, outlook, inputs bill, calibration, screening
    report/       the HTML study report
    cli/          the ``pondsim`` command

Importing pondsim defines things and does nothing else.
"""

__version__ = "0.1.0"

from pondsim.errors import InputError
from pondsim.operations.simulate import simulate
from pondsim.results.files import save
from pondsim.scenario import Scenario, load_scenario


def read_weather(path, **options):
    """Read an hourly weather file into the forcing table (pandas.DataFrame).

    Columns and units are listed in :mod:`pondsim.glossary`; the file's metadata (site,
    format, what was filled or moved) is in ``DataFrame.attrs``. Options: see
    :func:`pondsim.forcing.weather.read_weather`.
    """
    from pondsim.forcing.weather import read_weather as _read

    table, meta = _read(path, **options)
    table.attrs.update(meta)
    return table


def water_temperature(forcing, pond, **options):
    """Hourly pond water temperature and energy budget; see :mod:`pondsim.pond.thermal`."""
    from pondsim.pond.thermal import water_temperature as _wt

    return _wt(forcing, pond, **options)


__all__ = ["InputError", "Scenario", "load_scenario", "read_weather", "save", "simulate",
           "water_temperature", "__version__"]

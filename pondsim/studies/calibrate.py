"""Calibration of growth parameters from pilot-pond observations (``pondsim fit``).

The work is split along its seams, one module each:

- :mod:`pondsim.studies.fit_observations`: the observations file, read and checked;
- :mod:`pondsim.studies.fit_growth`: the pilot pond through the engine and the weighted
  least-squares fit (:func:`fit_pilot`);
- :mod:`pondsim.studies.fit_curve`: the closed-form logistic curve of a batch culture;
- :mod:`pondsim.studies.fit_statistics`: covariance, diagnostics and warnings shared by
  both fits;
- :mod:`pondsim.studies.fit_outputs`: the fitted scenario copy, figures and the demo
  pilot record;
- :mod:`pondsim.studies.fit_command`: the command line.

This module gathers their public names in one place. ``python -m
pondsim.studies.calibrate [PATH]`` regenerates the demo pilot file.
"""

from __future__ import annotations

import sys

from pondsim.studies.fit_command import add_fit_parser, cmd_fit
from pondsim.studies.fit_curve import CurveFit, fit_logistic_curve, logistic_curve
from pondsim.studies.fit_growth import (
    GROWTH_FORMS,
    PARAMETERS,
    PilotFit,
    PilotModel,
    default_free,
    fit_pilot,
    pilot_hourly,
)
from pondsim.studies.fit_observations import (
    FIELDS,
    Observations,
    parse_column_map,
    parse_observations,
    read_observations,
)
from pondsim.studies.fit_outputs import (
    DEMO_SEED,
    make_demo_pilot,
    plot_fit,
    write_demo_pilot,
    write_fitted_scenario,
)

__all__ = [
    "DEMO_SEED", "FIELDS", "GROWTH_FORMS", "PARAMETERS", "CurveFit", "Observations",
    "PilotFit", "PilotModel", "add_fit_parser", "cmd_fit", "default_free",
    "fit_logistic_curve", "fit_pilot", "logistic_curve", "make_demo_pilot",
    "parse_column_map", "parse_observations", "pilot_hourly", "plot_fit",
    "read_observations", "write_demo_pilot", "write_fitted_scenario",
]

if __name__ == "__main__":  # pragma: no cover - regenerates the demo pilot file
    target = sys.argv[1] if len(sys.argv) > 1 else "scenarios/kestrel_flats_pilot.csv"
    print(f"written: {write_demo_pilot(target)}")

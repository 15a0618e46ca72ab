"""The ``pondsim`` command line.

User errors (bad scenario, weather file, observations) print one message naming the file,
the field and what is allowed, and exit with status 2 — never a traceback."""

from __future__ import annotations

import argparse
import sys

from pondsim.cli.commands import (
    cmd_compare,
    cmd_fit,
    cmd_hazardfit,
    cmd_keys,
    cmd_report,
    cmd_run,
    cmd_screen,
    cmd_weather,
)
from pondsim.cli.common import (
    EXIT_INPUT,
    MEMBERS_HELP,
    OUTLOOK_REPLICATES,
    YEARS_HELP,
    add_place_options,
    add_strict_option,
    check_arguments,
)
from pondsim.cli.studies import cmd_outlook, cmd_tune
from pondsim.errors import InputError


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="pondsim",
        description="Open raceway pond planning: weather, light, water temperature, "
                    "algal growth and harvest over a year, from one scenario file.",
        epilog="Results are estimates, not guarantees. Defer to local codes, permits and "
               "licensed engineers.")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    w = sub.add_parser("weather", help="monthly weather, PAR and pond water table",
                       description="Print the monthly forcing table of a scenario or a "
                       "weather file: GHI, PAR, air and water temperature, wind, humidity, "
                       "evaporation, rain, makeup water and (with a scenario) the hours "
                       "of heat and cold stress.")
    w.add_argument("source", help="scenario .toml, or a weather file (EPW, TMY3, TMY2, "
                   "PVGIS, CSV)")
    w.add_argument("--plot", metavar="PATH", help="also save a figure (PNG)")
    w.add_argument("--csv", metavar="PATH", help="also write the monthly table (CSV)")
    w.add_argument("--year", type=int, help="calendar year to place a typical year in")
    for name, unit in (("latitude", "deg"), ("longitude", "deg"), ("elevation", "m"),
                       ("utc-offset", "h")):
        w.add_argument(f"--{name}", type=float, help=f"site {name} [{unit}] where the "
                       "file lacks it")
    w.add_argument("--depth", type=float, default=0.25,
                   help="pond depth for the water balance of a bare weather file [m] "
                        "(default 0.25)")

    r = sub.add_parser("run", help="simulate a year and write results",
                       description="Simulate the scenario's year for every policy; write "
                       "results.nc, summary.csv and figures.")
    r.add_argument("scenario", help="scenario .toml")
    r.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>)")
    r.add_argument("--members", type=int, help=MEMBERS_HELP + " (default: run.members)")
    r.add_argument("--seed", type=int, help="seed of the random streams")
    r.add_argument("--no-plots", action="store_true", help="skip the figures")
    for parser in (w, r):
        add_strict_option(parser)

    c = sub.add_parser("compare", help="compare harvest policies and plans by season",
                       description="Run every policy and season plan of the scenario with "
                       "stochastic crash members; print and write the per-season comparison, "
                       "the best policy per season under the risk limit, and figures.")
    c.add_argument("scenario", help="scenario .toml")
    c.add_argument("--members", type=int, default=None,
                   help=MEMBERS_HELP + " (default: run.members, at least 200)")
    c.add_argument("--seed", type=int, help="seed of the random streams")
    c.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>-compare)")
    add_strict_option(c)

    o = sub.add_parser("outlook", help="P50/P90 annual yield over weather years, "
                       "sensitivity and the inputs bill",
                       description="Simulate many weather years (synthetic from the typical "
                       "year, or the file's real years) with their own parameter draws and "
                       "crash replicates; report P50/P75/P90 annual yield (exceedance values:"
                       " P90 is exceeded with probability 0.9) with 95 % Monte Carlo "
                       "intervals, per pond area and for the farm (the sum of its ponds), "
                       "monthly 10th-90th percentile bands, Sobol sensitivity of yield to "
                       "the uncertain parameters and the farm's inputs bill. The ensemble "
                       "grows in rounds until the lead policy's P90 interval meets "
                       "uncertainty.p90_target_pct or uncertainty.max_members is reached.")
    o.add_argument("scenario", help="scenario .toml")
    o.add_argument("--years", type=int, default=None,
                   help=YEARS_HELP + " in the first round (default: "
                   "uncertainty.weather_years; a file of real years uses all of them)")
    o.add_argument("--draws", type=int, default=None,
                   help="parameter draws per weather year (default: uncertainty.draws; 1 "
                        "without uncertain parameters)")
    o.add_argument("--members", type=int, default=None,
                   help=MEMBERS_HELP + " (default: run.members, at least "
                   f"{OUTLOOK_REPLICATES} with crashes on, so that the farm's ponds crash "
                   "apart)")
    o.add_argument("--target", type=float, default=None, metavar="PCT",
                   help="convergence target: 95 %% interval half-width of the lead P90 as "
                        "%% of its P50 (default: uncertainty.p90_target_pct)")
    o.add_argument("--max-members", type=int, default=None,
                   help="cap on members per policy (default: uncertainty.max_members)")
    o.add_argument("--fixed", action="store_true",
                   help="one round of the given size, no growth towards the target")
    o.add_argument("--sobol-samples", type=int, default=None,
                   help="base samples of the Sobol indices (default: "
                        "uncertainty.sobol_samples)")
    o.add_argument("--seed", type=int, help="seed of weather years, draws and crashes")
    o.add_argument("--no-sensitivity", action="store_true", help="skip the Sobol indices")
    o.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>-outlook)")
    add_place_options(o, "blocks of weather years")
    add_strict_option(o)

    t = sub.add_parser("tune", help="tune the harvest rule of each season",
                       description="Search fixed-fraction, threshold and fixed-interval "
                       "rules for each season (many candidates per vectorised pass, then "
                       "Nelder-Mead refinement) for the most biomass within the crash-risk "
                       "limit; write the tuned plan into a copy of the scenario.")
    t.add_argument("scenario", help="scenario .toml")
    t.add_argument("--years", type=int, default=None,
                   help=YEARS_HELP + " (default: uncertainty.weather_years, at most 8)")
    t.add_argument("--members", type=int, default=8,
                   help=MEMBERS_HELP + " (default 8)")
    t.add_argument("--seed", type=int, help="seed of weather years and crashes")
    t.add_argument("--no-refine", action="store_true", help="grid search only")
    t.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>-tune)")
    add_place_options(t, "groups of candidate rules")
    add_strict_option(t)

    from pondsim.report.build import add_report_parser
    from pondsim.studies.calibrate import add_fit_parser
    from pondsim.studies.crash_fit_command import add_hazardfit_parser
    from pondsim.studies.screen import add_screen_parser

    add_fit_parser(sub)
    add_hazardfit_parser(sub)
    add_screen_parser(sub)
    add_report_parser(sub)

    k = sub.add_parser("keys", help="print the scenario file reference (Markdown)")
    k.set_defaults()
    return p


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised where the program is, so that it unwinds like Ctrl-C (outputs
    being written are discarded whole)."""


def _on_sigterm(signum, frame):
    raise Terminated()


def main(argv: list[str] | None = None) -> int:
    import signal

    args = _parser().parse_args(argv)
    try:
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
    except ValueError:  # not the main thread (e.g. called from a worker thread)
        previous = None
    try:
        commands = {"weather": cmd_weather, "run": cmd_run, "compare": cmd_compare,
                    "outlook": cmd_outlook, "tune": cmd_tune, "fit": cmd_fit,
                    "hazardfit": cmd_hazardfit,
                    "screen": cmd_screen, "report": cmd_report, "keys": cmd_keys}
        check_arguments(args)
        return commands[args.command](args)
    except InputError as err:
        print(f"pondsim: error: {err}", file=sys.stderr)
        return EXIT_INPUT
    except MemoryError:
        print("pondsim: error: not enough memory for this run; use fewer members, weather "
              "years or draws (--members, --years, --draws, run.members)", file=sys.stderr)
        return EXIT_INPUT
    except Terminated:
        print("pondsim: terminated; no output set was written", file=sys.stderr)
        return 128 + signal.SIGTERM
    except KeyboardInterrupt:
        print("pondsim: interrupted; no output set was written", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into e.g. `head`, which closed early
        sys.stderr.close()
        return 0
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


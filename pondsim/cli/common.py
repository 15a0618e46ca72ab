"""Helpers shared by the commands: option meanings, scenario loading with the site check,
checks of command-line values, output sets."""

from __future__ import annotations

from pathlib import Path

from pondsim.errors import InputError

EXIT_INPUT = 2


#: One meaning of the ensemble options in every command.
MEMBERS_HELP = "crash replicates per driver set (weather year x parameter draw)"


YEARS_HELP = "weather years"


#: Crash replicates of an outlook with crashes on, at least (farm totals draw each pond's
#: crash history from a cell's replicates; common practice for a bootstrap: >= 4-8).
OUTLOOK_REPLICATES = 4


def add_strict_option(parser) -> None:
    """``--strict``: refuse a run whose site disagrees with its weather."""
    parser.add_argument("--strict", action="store_true",
                        help="refuse to run when the site check fails (scenario site vs "
                        "the weather file's header, or the data's solar noon); default: "
                        "warn (weather.site_check)")


def add_place_options(parser, pieces: str) -> None:
    """``--workers N`` | ``--scheduler ADDRESS``: where a study's pieces run (as for
    ``screen``); the results are the same wherever they run."""
    where = parser.add_mutually_exclusive_group()
    where.add_argument("--workers", type=int, default=None,
                       help=f"local worker processes for the {pieces} (default 1: serial, "
                       "in this process; each worker takes a few seconds to start)")
    where.add_argument("--scheduler", metavar="ADDRESS",
                       help="dask.distributed scheduler, e.g. tcp://host:8786 (start one "
                       "with `dask scheduler` and workers with `dask worker ADDRESS`)")


def load_checked_scenario(args):
    """The scenario of ``args.scenario``, in strict site-check mode under ``--strict``."""
    import dataclasses

    from pondsim.scenario import load_scenario

    scenario = load_scenario(args.scenario)
    if getattr(args, "strict", False):
        scenario = scenario.replace(weather=dataclasses.replace(scenario.weather,
                                                                site_check="strict"))
    return scenario


def print_site_check(meta_or_attrs) -> None:
    """The site check's line of the terminal summary."""
    text = meta_or_attrs.get("site_check")
    if text:
        flag = "WARNING: " if str(text).startswith("FAILED") else ""
        print(f"{flag}site check {text}")


#: Command-line values checked before anything runs: flag -> (low, high), whole numbers.
WHOLE_NUMBER_FLAGS = {"members": (1, 1_000_000), "years": (1, 100_000),
                      "draws": (1, 100_000), "workers": (1, 4096), "seed": (0, 2**63 - 1),
                      "year": (1, 9999), "max_members": (1, 1_000_000),
                      "sobol_samples": (1, 8192)}


def check_arguments(args) -> None:
    """The same one-line error as the scenario checks for a bad command-line value
    (a negative --seed, --members 0, a NaN coordinate, ...)."""
    import math

    for name, (low, high) in WHOLE_NUMBER_FLAGS.items():
        value = getattr(args, name, None)
        if value is not None and not low <= value <= high:
            raise InputError(f"{value} is out of range; allowed: a whole number in "
                             f"[{low}, {high}]", field=f"--{name.replace('_', '-')}")
    for name, low, high in (("latitude", -90, 90), ("longitude", -180, 180),
                            ("elevation", -500, 6000), ("utc_offset", -14, 14)):
        value = getattr(args, name, None)
        if value is not None and not (math.isfinite(value) and low <= value <= high):
            raise InputError(f"{value} is out of range; allowed: a number in [{low}, "
                             f"{high}]", field=f"--{name.replace('_', '-')}")
    target = getattr(args, "target", None)
    if target is not None and not (math.isfinite(target) and 0.1 <= target <= 100):
        raise InputError(f"{target:g} is out of range; allowed: a number in [0.1, 100] %",
                         field="--target")
    out = getattr(args, "out", None)
    if out is not None and not str(out).strip():
        raise InputError("empty output folder name", field="--out")


def _out_dir(args, suffix: str) -> Path:
    return Path(args.out) if args.out else Path("out") / f"{Path(args.scenario).stem}{suffix}"


def _output_set(args, command: str, suffix: str, seed):
    """The command's output set; the folder is checked here, before any computation."""
    from pondsim.results.files import OutputSet

    return OutputSet(_out_dir(args, suffix), command=command, seed=seed,
                     scenario=args.scenario)


def _print_written(files, written) -> None:
    print("\n" + files.written_line(written))


def _check_memory(scenario, members, n_sets=1):
    """Refuse, with the estimate and the limit, a run whose daily outputs would not fit."""
    from pondsim.operations.simulate import check_memory

    check_memory(scenario, members, n_sets)


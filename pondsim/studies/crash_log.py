"""A site's pond log: when each pond was inoculated, when it crashed or was stopped, and
optionally its harvests and density samples (read for ``pondsim hazardfit``).

The log is a CSV file (``#`` starts a comment line), one row per event:

=========  ==========================================================================
column     meaning
=========  ==========================================================================
``pond``   pond identifier (any text)
``date``   local date of the event, YYYY-MM-DD (a time of day is ignored)
``event``  ``inoculated``, ``crash``, ``end``, ``harvest`` or ``sample``
``value``  ``inoculated``: density at inoculation [g m-3] (optional; default the
           scenario's inoculum); ``harvest``: share of the culture volume removed
           [-], in (0, 1); ``sample``: density [g m-3] (> 0); empty otherwise
=========  ==========================================================================

A *period* runs from an ``inoculated`` row to the pond's next ``crash`` row (the culture
crashed that day) or ``end`` row (the culture was stopped for another reason, or the log
stops: the period is *censored* that day). Harvests and samples of a pond must fall inside
one of its periods. Rows may come in any order; each pond's events are taken in date
order, and events of one day in the order of the file (inoculated, then harvests and
samples, then crash or end). Any problem raises :class:`~pondsim.errors.InputError`
naming the file, the row (1-based, the header being row 1, comment lines not counted) and
the field.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.errors import InputError, did_you_mean
from pondsim.forcing.timestamps import parse_times

EVENTS = ("inoculated", "crash", "end", "harvest", "sample")
COLUMNS = ("pond", "date", "event", "value")


@dataclass(frozen=True)
class PondLog:
    """A checked pond log.

    Attributes
    ----------
    periods : DataFrame
        One row per period: ``pond``, ``start`` and ``end`` (dates, inclusive),
        ``crashed`` (bool: ended by a crash), ``inoculum_g_m3`` (NaN: scenario default),
        ``days`` (pond-days at risk).
    harvests : DataFrame
        ``period`` (row of ``periods``), ``date``, ``fraction`` [-].
    samples : DataFrame
        ``period``, ``date``, ``density_g_m3``.
    path : Path or None
    notes : list of str
    """

    periods: pd.DataFrame
    harvests: pd.DataFrame
    samples: pd.DataFrame
    path: Path | None = None
    notes: list = field(default_factory=list)

    @property
    def n_crashes(self) -> int:
        return int(self.periods["crashed"].sum())

    @property
    def pond_days(self) -> int:
        return int(self.periods["days"].sum())

    def years(self) -> list[int]:
        """Calendar years the periods touch, in order."""
        first = int(self.periods["start"].min().year)
        last = int(self.periods["end"].max().year)
        return list(range(first, last + 1))


def read_pond_log(path) -> PondLog:
    """Read and check a pond log CSV (columns in the module docstring)."""
    path = Path(path)
    if not path.is_file():
        raise InputError("pond log not found", path=path)
    try:
        frame = pd.read_csv(path, comment="#", skipinitialspace=True, dtype=str,
                            keep_default_na=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
        raise InputError(f"not a readable CSV file: {err}", path=path) from None
    return parse_pond_log(frame, path=path)


def parse_pond_log(frame: pd.DataFrame, *, path=None) -> PondLog:
    """Check a pond-log table (the core of :func:`read_pond_log`)."""
    frame = frame.rename(columns=lambda c: str(c).strip().lower())
    for col in ("pond", "date", "event"):
        if col not in frame.columns:
            raise InputError(f"no {col!r} column{did_you_mean(col, frame.columns)}; the "
                             f"log needs columns {', '.join(COLUMNS)} (value optional); "
                             f"columns in the file: {', '.join(map(str, frame.columns))}",
                             path=path, field=col)
    if len(frame) == 0:
        raise InputError("the log holds no rows", path=path)
    text = frame.astype(str).apply(lambda s: s.str.strip())
    rows = np.arange(len(frame)) + 2  # the header is row 1
    pond = text["pond"]
    bad = pond.eq("") | pond.str.lower().eq("nan")
    if bad.any():
        raise InputError(f"row {rows[bad.to_numpy()][0]}: missing pond identifier",
                         path=path, field="pond")
    event = text["event"].str.lower()
    unknown = ~event.isin(EVENTS)
    if unknown.any():
        i = int(np.flatnonzero(unknown.to_numpy())[0])
        raise InputError(f"row {rows[i]}: unknown event {text['event'].iloc[i]!r}"
                         f"{did_you_mean(event.iloc[i], EVENTS)}; allowed: "
                         + ", ".join(EVENTS), path=path, field="event")
    dates = pd.Series(parse_times(text["date"], path=path, field="date", coerce=True),
                      index=text.index)
    if dates.isna().any():
        i = int(np.flatnonzero(dates.isna().to_numpy())[0])
        raise InputError(f"row {rows[i]}: {text['date'].iloc[i]!r} is not a date; write "
                         "dates like 2025-06-14", path=path, field="date")
    dates = dates.dt.normalize()
    value = pd.to_numeric(text["value"], errors="coerce") if "value" in text else \
        pd.Series(np.nan, index=text.index)
    if "value" in text:
        unreadable = value.isna() & text["value"].ne("") & text["value"].str.lower().ne("nan")
        if unreadable.any():
            i = int(np.flatnonzero(unreadable.to_numpy())[0])
            raise InputError(f"row {rows[i]}: value {text['value'].iloc[i]!r} is not a "
                             "number", path=path, field="value")
    value = value.to_numpy(dtype=float)
    _check_values(event.to_numpy(), value, rows, path)

    table = pd.DataFrame({"pond": pond, "date": dates, "event": event, "value": value,
                          "row": rows})
    # Each pond's events by date; events of one day in the order of the file.
    table = table.sort_values(["pond", "date", "row"], kind="stable")
    periods, harvests, samples = [], [], []
    for pond_id, events in table.groupby("pond", sort=False):
        open_start = None
        for r in events.itertuples(index=False):
            if r.event == "inoculated":
                if open_start is not None:
                    raise InputError(f"row {r.row}: pond {pond_id!r} is inoculated on "
                                     f"{r.date.date()} while its period from "
                                     f"{open_start[0].date()} (row {open_start[2]}) has no "
                                     "crash or end row; close it first", path=path,
                                     field="event")
                if periods and periods[-1]["pond"] == pond_id \
                        and r.date <= periods[-1]["end"]:
                    raise InputError(f"row {r.row}: pond {pond_id!r} is inoculated on "
                                     f"{r.date.date()}, not after its previous period "
                                     f"ended ({periods[-1]['end'].date()})", path=path,
                                     field="date")
                open_start = (r.date, r.value, r.row)
            elif open_start is None:
                raise InputError(f"row {r.row}: {r.event} of pond {pond_id!r} on "
                                 f"{r.date.date()} lies outside any period (no "
                                 "inoculated row before it)", path=path, field="event")
            elif r.event in ("crash", "end"):
                start, ino, _ = open_start
                periods.append({"pond": pond_id, "start": start, "end": r.date,
                                "crashed": r.event == "crash", "inoculum_g_m3": ino,
                                "days": int((r.date - start).days) + 1})
                open_start = None
            elif r.event == "harvest":
                harvests.append({"period": len(periods), "date": r.date,
                                 "fraction": r.value})
            else:
                samples.append({"period": len(periods), "date": r.date,
                                "density_g_m3": r.value})
        if open_start is not None:
            raise InputError(f"pond {pond_id!r}: the period from {open_start[0].date()} "
                             f"(row {open_start[2]}) has no crash or end row; add an "
                             "'end' row on the last day the pond was observed", path=path,
                             field="event")
    if not periods:
        raise InputError("the log holds no complete period (inoculated ... crash/end)",
                         path=path, field="event")
    harvest_table = pd.DataFrame(harvests, columns=["period", "date", "fraction"])
    # Several harvests of one pond on one day: the remaining shares multiply.
    if len(harvest_table):
        harvest_table = (harvest_table.groupby(["period", "date"], as_index=False)
                         ["fraction"].agg(lambda v: 1.0 - float(np.prod(1.0 - v))))
    return PondLog(periods=pd.DataFrame(periods), harvests=harvest_table,
                   samples=pd.DataFrame(samples, columns=["period", "date", "density_g_m3"]),
                   path=None if path is None else Path(path))


def _check_values(event, value, rows, path):
    def first(mask):
        return int(np.flatnonzero(mask)[0])

    harvest = event == "harvest"
    bad = harvest & ~((value > 0) & (value < 1))
    if bad.any():
        i = first(bad)
        raise InputError(f"row {rows[i]}: harvest value {value[i]:g} out of range; allowed: "
                         "the share of the culture volume removed, in (0, 1)", path=path,
                         field="value")
    sample = event == "sample"
    bad = sample & ~((value > 0) & np.isfinite(value))
    if bad.any():
        i = first(bad)
        raise InputError(f"row {rows[i]}: sample value {value[i]:g} out of range; allowed: "
                         "a density > 0 g m-3", path=path, field="value")
    ino = event == "inoculated"
    bad = ino & ~np.isnan(value) & ~((value >= 0.1) & (value <= 5000))
    if bad.any():
        i = first(bad)
        raise InputError(f"row {rows[i]}: inoculum {value[i]:g} g m-3 out of range; "
                         "allowed: 0.1 to 5000 g m-3 (or empty for the scenario's)",
                         path=path, field="value")


def write_pond_log(path, periods: pd.DataFrame, harvests: pd.DataFrame | None = None,
                   samples: pd.DataFrame | None = None, header: str = "") -> Path:
    """Write periods (and optionally harvests and samples, by period row) as a pond-log
    CSV, atomically. Inverse of :func:`read_pond_log`."""
    from pondsim.results.files import atomic_write

    rows = []
    for i, p in enumerate(periods.itertuples(index=False)):
        ino = getattr(p, "inoculum_g_m3", np.nan)
        rows.append((p.pond, p.start, 0, "inoculated", "" if pd.isna(ino) else f"{ino:g}"))
        rows.append((p.pond, p.end, 2, "crash" if p.crashed else "end", ""))
        for extra, event, col, fmt in ((harvests, "harvest", "fraction", "{:.4f}"),
                                       (samples, "sample", "density_g_m3", "{:.1f}")):
            if extra is not None and len(extra):
                for e in extra[extra["period"] == i].itertuples(index=False):
                    rows.append((p.pond, e.date, 1, event, fmt.format(getattr(e, col))))
    frame = pd.DataFrame(rows, columns=["pond", "date", "rank", "event", "value"])
    frame = frame.sort_values(["pond", "date", "rank"], kind="stable").drop(columns="rank")
    frame["date"] = pd.to_datetime(frame["date"]).dt.strftime("%Y-%m-%d")

    def write(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            for line in header.splitlines():
                fh.write(f"# {line}\n")
            frame.to_csv(fh, index=False)

    return atomic_write(Path(path), write)


def log_from_daily(daily, dates, ponds, *, harvests: bool = True, sample_every_days: int = 0,
                   sample_cv: float = 0.1, seed: int = 0):
    """A pond log of what the engine did: ``(periods, harvests, samples)`` tables for
    :func:`write_pond_log` from :class:`pondsim.operations.engine.Daily` of one member per
    pond (crashes on, restarts as the engine made them; the last period of each pond is
    censored on the last day).

    Samples (every *sample_every_days* days from inoculation, 0: none) are the end-of-day
    density times a lognormal error of coefficient of variation *sample_cv*.
    """
    dates = pd.DatetimeIndex(dates)
    status = np.asarray(daily.status)
    crashed = np.asarray(daily.crashed, bool)
    alive = (status == 0) | crashed  # growing through the day (a crash ends it)
    going_on = np.concatenate([np.zeros((len(ponds), 1), bool), (alive & ~crashed)[:, :-1]],
                              axis=1)
    starts = alive & ~going_on
    rng = np.random.default_rng(seed)
    sigma = math.sqrt(math.log1p(sample_cv ** 2))
    periods, harvest_rows, sample_rows = [], [], []
    last = len(dates) - 1
    for i, pond in enumerate(ponds):
        for s in np.flatnonzero(starts[i]):
            ends = np.flatnonzero(crashed[i, s:])
            e = s + int(ends[0]) if ends.size else last
            k = len(periods)
            periods.append({"pond": pond, "start": dates[s], "end": dates[e],
                            "crashed": bool(ends.size), "inoculum_g_m3": np.nan,
                            "days": e - s + 1})
            if harvests:
                for d in np.flatnonzero(daily.harvest_fraction[i, s:e + 1] > 0) + s:
                    harvest_rows.append({"period": k, "date": dates[d],
                                         "fraction": float(daily.harvest_fraction[i, d])})
            if sample_every_days:
                for d in range(s, e, sample_every_days):
                    value = daily.density[i, d] * math.exp(sigma * rng.standard_normal())
                    sample_rows.append({"period": k, "date": dates[d],
                                        "density_g_m3": value})
    return (pd.DataFrame(periods),
            pd.DataFrame(harvest_rows, columns=["period", "date", "fraction"]),
            pd.DataFrame(sample_rows, columns=["period", "date", "density_g_m3"]))

"""Reading dates and times written by people: one format for the whole column, and no
silent guess between day-first and month-first.

``pandas.to_datetime`` infers a format per element (``format="mixed"``) or from the first
element: a column of ``03/04/2025``-style dates is read month-first, so a day-first file
whose days never pass 12 becomes a different, still increasing, series of dates — a
silently wrong answer. :func:`parse_times` reads ISO 8601 (``2025-04-03 08:00``) as such;
for ``D/M/Y`` or ``M/D/Y`` columns (``/``, ``.`` or ``-`` separated, four-digit year) it
uses the one order that reads EVERY row, and refuses a column that both orders read
differently; anything else goes to pandas' own parser.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from pondsim.errors import InputError

_ISO = re.compile(r"^\d{4}-\d{2}-\d{2}([ T]\d{1,2}:\d{2}(:\d{2}(\.\d+)?)?)?"
                  r"(Z|[+-]\d{2}(:?\d{2})?)?$")
_DMY = re.compile(r"^(\d{1,2})([/.-])(\d{1,2})\2(\d{4})((?:[ T]\d{1,2}:\d{2}(?::\d{2})?)?)$")


def parse_times(values, *, path=None, field: str = "time",
                coerce: bool = False) -> pd.DatetimeIndex:
    """Parse a column of dates or date-times with one format for all rows.

    Parameters
    ----------
    values : sequence of str (or anything pandas reads as dates)
    path : str or Path, optional
        File named in an error.
    field : str
        Column named in an error.
    coerce : bool
        Unreadable entries become NaT (the caller reports the row) instead of an error.

    Returns
    -------
    pandas.DatetimeIndex
        Naive or zone-aware as written.

    Raises
    ------
    InputError
        A column of ``a/b/yyyy`` dates that reads both day-first and month-first with
        different dates (e.g. ``03/04/2025``: 3 April or 4 March), or an unreadable
        column (unless ``coerce``).
    """
    def to_datetime(fmt):
        try:
            return pd.DatetimeIndex(pd.to_datetime(text, format=fmt,
                                                   errors="coerce" if coerce else "raise"))
        except (ValueError, TypeError, OverflowError) as err:
            raise InputError(f"cannot read the times as dates ({err}); write them like "
                             "2025-03-20 or 2025-03-20 08:00", path=path,
                             field=field) from None

    text = pd.Series(values).astype(str).str.strip()
    present = text[~text.isin(["", "nan", "NaT", "None"])]
    if len(present) and present.str.match(_ISO).all():
        return to_datetime("ISO8601")
    parts = present.str.extract(_DMY)
    if len(present) and parts[0].notna().all():
        first, second = parts[0].astype(int), parts[2].astype(int)
        sep = parts[1].iloc[0]
        day_first = bool((second <= 12).all() and (first <= 31).all())
        month_first = bool((first <= 12).all() and (second <= 31).all())
        if day_first and month_first and (first != second).any():
            i = int(np.flatnonzero((first != second).to_numpy())[0])
            example = present.iloc[i]
            a, b = int(first.iloc[i]), int(second.iloc[i])
            months = ("January", "February", "March", "April", "May", "June", "July",
                      "August", "September", "October", "November", "December")
            raise InputError(
                f"the dates are ambiguous: {example!r} reads as {a} {months[b - 1]} "
                f"(day first) or {b} {months[a - 1]} (month first) and no row settles "
                "it; write them as ISO 8601 dates like 2025-04-03 (year-month-day)",
                path=path, field=field)
        if day_first or month_first:
            clock = parts[4].fillna("")
            has_time = clock.str.len().gt(0)
            if has_time.any() and not has_time.all():
                fmt = None
            else:
                seconds = clock.str.count(":").max() == 2 if has_time.all() else False
                date = f"%d{sep}%m{sep}%Y" if day_first else f"%m{sep}%d{sep}%Y"
                sep_t = clock.iloc[0][0] if has_time.all() else ""
                fmt = date + (f"{sep_t}%H:%M" + (":%S" if seconds else "")
                              if has_time.all() else "")
            if fmt is not None:
                return to_datetime(fmt)
    return to_datetime("mixed")


__all__ = ["parse_times"]

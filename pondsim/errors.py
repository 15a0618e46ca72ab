"""Errors raised for bad user input.

Every problem with a scenario file, a weather file or an observations file is raised as
:class:`InputError`, which names the file, the field and what is allowed. The command-line
interface prints the message and exits with status 2, without a traceback.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from pathlib import Path


class InputError(ValueError):
    """A user-supplied file or value is invalid.

    Parameters
    ----------
    message : str
        What is wrong and what is allowed.
    path : str or Path, optional
        The file the value came from.
    field : str, optional
        The key, column or field name (dotted for nested TOML keys).
    """

    def __init__(self, message: str, *, path: str | Path | None = None, field: str | None = None):
        self.path = None if path is None else Path(path)
        self.field = field
        self.reason = message
        where = []
        if path is not None:
            where.append(str(path))
        if field:
            where.append(f"field '{field}'")
        prefix = ": ".join(where)
        super().__init__(f"{prefix}: {message}" if prefix else message)


def did_you_mean(name: str, choices: Iterable[str]) -> str:
    """Return a ' (did you mean 'x'?)' hint for a misspelt *name*, or ''."""
    close = difflib.get_close_matches(name, list(choices), n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""

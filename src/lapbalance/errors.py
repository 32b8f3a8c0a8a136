"""Error and warning types shared by every module.

Bad input raises :class:`InputError`: one line naming the file, the field and the fix. The CLI
prints it to stderr and exits with status 2, without a traceback.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from pathlib import Path


class InputError(ValueError):
    """A problem with user input, worded as one line: ``file: field ... fix``.

    Parameters
    ----------
    message : str
        What is wrong and how to fix it.
    source : str or Path, optional
        The file (or ``--option``) the value came from.
    field : str, optional
        Dotted key, column or row that holds the bad value.
    """

    def __init__(self, message: str, source: str | Path | None = None, field: str | None = None):
        self.source = str(source) if source is not None else None
        self.field = field
        self.message = message
        super().__init__(self.one_line())

    def one_line(self) -> str:
        parts = []
        if self.source:
            parts.append(f"{self.source}:")
        if self.field:
            parts.append(f"{self.field}:")
        parts.append(self.message)
        return " ".join(parts).replace("\n", " ")


class InfeasibleError(InputError):
    """The car cannot drive the track at all (e.g. grip too low to hold the slowest corner)."""


class PhysicsWarning(UserWarning):
    """A value outside a model's range of validity (extrapolated aero map, floor contact...)."""


def closest(name: str, valid: Iterable[str]) -> str | None:
    """Return the valid name closest to ``name`` (difflib ratio >= 0.6), or None."""
    match = difflib.get_close_matches(name, list(valid), n=1, cutoff=0.6)
    return match[0] if match else None


def did_you_mean(name: str, valid: Iterable[str]) -> str:
    """A short hint: ``did you mean "x"?`` or the list of valid names."""
    valid = list(valid)
    best = closest(name, valid)
    if best:
        return f'did you mean "{best}"?'
    return "valid: " + ", ".join(sorted(valid))

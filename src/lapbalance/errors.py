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
            parts.append(f"{clip(self.source, 160)}:")
        if self.field:
            parts.append(f"{clip(self.field, 80)}:")
        parts.append(self.message)
        return tidy(" ".join(parts))


#: Longest single value (word) echoed in a message before it is cut [characters].
MAX_VALUE_CHARS = 80
#: Longest whole message line [characters]; beyond, the middle is cut (the fix is kept).
MAX_LINE_CHARS = 480


def clip(value, limit: int = 60) -> str:
    """``value`` as text cut to a readable length for a message.

    Long text keeps its start and end around an ellipsis and says how long it was, e.g.
    ``'AAAA…AAAA (350000 characters)'``. Control characters become spaces.
    """
    text = str(value)
    text = "".join(" " if (ord(c) < 32 or ord(c) == 127) else c for c in text)
    if len(text) <= limit:
        return text
    keep = max(limit - 24, 8)
    head, tail = keep * 2 // 3, keep - keep * 2 // 3
    return f"{text[:head]}…{text[-tail:] if tail else ''} ({len(text)} characters)"


def tidy(line: str) -> str:
    """One message line: newlines folded, long words cut (:func:`clip`), the whole line cut
    in the middle when it is still longer than :data:`MAX_LINE_CHARS` (start and fix kept)."""
    line = " ".join(line.splitlines())
    if len(line) > MAX_VALUE_CHARS:
        words = line.split(" ")
        line = " ".join(clip(w, MAX_VALUE_CHARS) if len(w) > MAX_VALUE_CHARS else w
                        for w in words)
    if len(line) > MAX_LINE_CHARS:
        head = MAX_LINE_CHARS * 2 // 5
        tail = MAX_LINE_CHARS - head - 40
        line = f"{line[:head]} …[{len(line) - head - tail} characters cut]… {line[-tail:]}"
    return line


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

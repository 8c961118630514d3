"""Error types of swimlab.

Every domain error is a :class:`ValueError`, so callers that only know the standard library can
still catch it. :class:`InputError` carries *where* the bad value was (file, row, column, field)
so that a page or the command line can point a person at it.
"""

from __future__ import annotations


class SwimlabError(ValueError):
    """Base class for swimlab's domain errors."""


class InputError(SwimlabError):
    """A value a person or a file supplied is not usable.

    Parameters
    ----------
    message
        What was wrong and what is valid, in words, including the offending value.
    file, row, column, field
        Where the value came from, as far as it is known. ``row`` is 1-based as a person
        counts lines in a file; ``field`` is a dotted path into a session (``fish.0.mass_g``).
    """

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        row: int | None = None,
        column: str | None = None,
        field: str | None = None,
    ) -> None:
        self.file = file
        self.row = row
        self.column = column
        self.field = field
        self.reason = message
        super().__init__(self._compose(message))

    def _compose(self, message: str) -> str:
        parts = []
        if self.file is not None:
            parts.append(f"file {self.file!r}")
        if self.row is not None:
            parts.append(f"row {self.row}")
        if self.column is not None:
            parts.append(f"column {self.column!r}")
        if self.field is not None:
            parts.append(f"field {self.field!r}")
        return f"{', '.join(parts)}: {message}" if parts else message


class OutOfRangeError(InputError):
    """A physical input lies outside every supported correlation's validity range."""


class ConflictError(SwimlabError):
    """A save was based on a stale version of a session (optimistic concurrency)."""


class PermissionDeniedError(SwimlabError):
    """The acting person may not take this action on this session."""

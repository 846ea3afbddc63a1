"""Named exceptions and warnings used across tailtrace."""

from __future__ import annotations

__all__ = [
    "TailtraceError",
    "InputError",
    "ConfigError",
    "DataQualityWarning",
    "ConvergenceWarning",
    "ModelWarning",
]


class TailtraceError(Exception):
    """Base class of every error tailtrace raises on purpose."""


class InputError(TailtraceError):
    """Bad input data, located by file, row and column.

    ``row`` is the 1-based line number in the file (the header is line 1),
    or ``None`` when the problem concerns the whole file.
    """

    def __init__(
        self,
        message: str,
        *,
        file: str,
        row: int | None = None,
        column: str | None = None,
        value: object = None,
    ) -> None:
        self.file = str(file)
        self.row = row
        self.column = column
        self.value = value
        self.reason = message
        where = [f"file {self.file}"]
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column '{column}'")
        text = ", ".join(where) + f": {message}"
        if value is not None:
            text += f" (found {value!r})"
        super().__init__(text)


class ConfigError(TailtraceError):
    """Invalid or inconsistent configuration."""


class DataQualityWarning(UserWarning):
    """Suspicious but usable input (gaps, stale prices, extra columns)."""


class ModelWarning(UserWarning):
    """A model assumption failed and a documented fallback was used."""


class ConvergenceWarning(ModelWarning):
    """An optimiser (e.g. a GARCH or Student-t fit) did not converge."""

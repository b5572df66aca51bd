"""The small exception family of nstress.

Every error a user can cause is one of these. The command line turns them
into a message (no traceback) and a documented exit code:

* :class:`InputError`, :class:`ConfigError` -> exit code 2
* :class:`FitError` -> exit code 1
"""

from __future__ import annotations

from typing import Any

EXIT_OK = 0
EXIT_FIT_FAILED = 1
EXIT_BAD_INPUT = 2


class NstressError(Exception):
    """Base class of every error nstress raises on purpose."""

    exit_code: int = EXIT_BAD_INPUT


class InputError(NstressError):
    """A sample table (or another input file) is unusable.

    Parameters
    ----------
    message
        What is wrong and what was expected.
    file
        Path of the offending file, as the user gave it.
    row
        1-based data row (the header is row 0), or ``None`` for the whole file.
    column
        Column name (as normalised by intake), or ``None``.
    value
        The offending value, or ``None``.
    """

    exit_code = EXIT_BAD_INPUT

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        row: int | None = None,
        column: str | None = None,
        value: Any = None,
    ) -> None:
        self.file = file
        self.row = row
        self.column = column
        self.value = value
        self.detail = message
        where = []
        if file is not None:
            where.append(f"file {file}")
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column '{column}'")
        prefix = ", ".join(where)
        val = f" (value {value!r})" if value is not None else ""
        super().__init__(f"{prefix}: {message}{val}" if prefix else f"{message}{val}")


class InputErrors(InputError):
    """Several input errors gathered into one message.

    Parameters
    ----------
    errors
        The individual errors, in row order.
    limit
        At most this many are spelled out in the message.
    """

    def __init__(self, errors: list[InputError], limit: int = 20) -> None:
        self.errors = list(errors)
        first = self.errors[0]
        lines = [str(e) for e in self.errors[:limit]]
        if len(self.errors) > limit:
            lines.append(f"... and {len(self.errors) - limit} more")
        NstressError.__init__(self, f"{len(self.errors)} input error(s):\n  " + "\n  ".join(lines))
        self.file, self.row, self.column, self.value = (
            first.file,
            first.row,
            first.column,
            first.value,
        )
        self.detail = first.detail


class ConfigError(NstressError):
    """A configuration or workflow file is invalid.

    Parameters
    ----------
    message
        What is wrong and what was expected.
    key
        Dotted path of the offending key (``priors.kappa.sd``), or ``None``.
    file
        The workflow file, or ``None``.
    """

    exit_code = EXIT_BAD_INPUT

    def __init__(self, message: str, *, key: str | None = None, file: str | None = None) -> None:
        self.key = key
        self.file = file
        self.detail = message
        where = []
        if file is not None:
            where.append(f"file {file}")
        if key is not None:
            where.append(f"key '{key}'")
        prefix = ", ".join(where)
        super().__init__(f"{prefix}: {message}" if prefix else message)


class FitError(NstressError):
    """A model fit could not be carried out or failed hard."""

    exit_code = EXIT_FIT_FAILED

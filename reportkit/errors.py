"""User-facing errors: bad spec, bad data. The command line maps them to exit code 2."""

from __future__ import annotations


class ReportkitError(Exception):
    """A problem with the user's input, explained in one paragraph.

    ``where`` names the file (and line or field, when known); ``message`` says what is
    wrong and what to do. The command line prints ``where: message`` without a
    traceback and exits with code 2.
    """

    exit_code = 2

    def __init__(self, message: str, where: str | None = None) -> None:
        self.message = message
        self.where = where
        super().__init__(f"{where}: {message}" if where else message)


class SpecError(ReportkitError):
    """The spec file cannot be read or does not validate."""


class DataError(ReportkitError):
    """The data file cannot be read, or the sample cannot support the model."""


class OutputError(ReportkitError):
    """The output folder cannot be written (e.g. it exists and overwriting was not asked)."""

"""Errors of the input boundary: what the command line turns into exit code 2 and one line."""

from __future__ import annotations


class InputError(Exception):
    """Bad user input (a path, a run directory, an option); the command line exits with code 2."""


class ConfigError(InputError):
    """A refused config field; ``str()`` is the single line ``<field>: <message>``."""

    def __init__(self, field: str, message: str) -> None:
        super().__init__(field, message)
        self.field = field
        self.message = message

    def __str__(self) -> str:
        return " ".join(f"{self.field}: {self.message}".split())


class RunFailure(Exception):
    """A run that cannot go on (not bad input, not a bug): the command line exits with code 1 and
    prints this one line; the last good checkpoint stays on disk."""


class StorageError(RunFailure):
    """A file of a run directory could not be written (disk full, directory unwritable); whatever
    was on disk before stays intact."""

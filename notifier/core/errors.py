"""Exceptions raised by fogwatch, each carrying the exit code the CLI returns.

::

    FogwatchError (exit 1)            base: an unexpected runtime failure
    ├── UsageError (exit 2)           bad command-line usage
    ├── ConfigError (exit 2)          invalid config or rule file; holds every problem
    ├── DataError (exit 2)            input data that cannot be used at all
    ├── SourceUnavailable (exit 3)    a data source could not be reached or read
    ├── StoreError (exit 1)           the database could not be opened, migrated or written
    └── DeliveryError (exit 4)        a message could not be delivered
        ├── TransientDeliveryError    worth retrying later
        └── PermanentDeliveryError    retrying will not help

Errors from the libraries underneath (requests, smtplib, sqlite, yaml) are translated
into these at the adapter that calls them, with ``raise ... from exc``.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "ConfigError",
    "ConfigProblem",
    "DataError",
    "DeliveryError",
    "FogwatchError",
    "PermanentDeliveryError",
    "SourceUnavailable",
    "StoreError",
    "TransientDeliveryError",
    "UsageError",
]


class FogwatchError(Exception):
    """Base of every error fogwatch raises on purpose."""

    exit_code = 1


class UsageError(FogwatchError):
    exit_code = 2


@dataclass(frozen=True)
class ConfigProblem:
    """One problem in a config or rule file, located by file and line."""

    path: str
    line: int | None
    message: str

    def __str__(self) -> str:
        where = f"{self.path}:{self.line}" if self.line else self.path
        return f"{where}: {self.message}"


class ConfigError(FogwatchError):
    """A config or rule file is invalid. ``problems`` lists every problem found."""

    exit_code = 2

    def __init__(self, problems: list[ConfigProblem] | ConfigProblem | str):
        if isinstance(problems, str):
            problems = [ConfigProblem("<config>", None, problems)]
        elif isinstance(problems, ConfigProblem):
            problems = [problems]
        self.problems: list[ConfigProblem] = list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))


class DataError(FogwatchError):
    exit_code = 2


class SourceUnavailable(FogwatchError):
    exit_code = 3


class DeliveryError(FogwatchError):
    exit_code = 4


class TransientDeliveryError(DeliveryError):
    """Delivery failed in a way that may succeed later (timeout, refused, 5xx, SMTP 4xx)."""


class PermanentDeliveryError(DeliveryError):
    """Delivery failed in a way a retry cannot fix (bad address, webhook 4xx)."""


class StoreError(FogwatchError):
    """The database could not be opened, migrated or written."""

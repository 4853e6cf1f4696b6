"""Log lines: an ISO 8601 UTC time, the level, the logger and the message.

>>> import logging
>>> record = logging.makeLogRecord(
...     {"name": "notifier.service.scheduler", "levelname": "INFO", "msg": "fogwatch stopped",
...      "created": 1796402405.0}
... )
>>> UTCFormatter().format(record)
'2026-12-04T16:40:05Z INFO notifier.service.scheduler: fogwatch stopped'
"""

from __future__ import annotations

import logging
import time
from typing import TextIO

from notifier.core.redact import redact

__all__ = [
    "CHATTY_LIBRARIES",
    "DATE_FORMAT",
    "LINE_FORMAT",
    "JSONFormatter",
    "UTCFormatter",
    "level_for",
    "setup_logging",
]

LINE_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"
# ISO 8601 with a literal Z: a service's log is read beside other machines' logs, and
# UTC with whole seconds sorts and compares as text.
DATE_FORMAT = "%Y-%m-%dT%H:%M:%SZ"
# libraries that log every job run at INFO (the five-second config watch alone is some
# 700 lines an hour): kept at WARNING unless -vv asks for everything
CHATTY_LIBRARIES = ("apscheduler",)


class UTCFormatter(logging.Formatter):
    """Formats a record as ``2026-12-04T16:40:05Z LEVEL logger: message`` (time in UTC)."""

    def __init__(self) -> None:
        super().__init__(fmt=LINE_FORMAT, datefmt=DATE_FORMAT)

    def format(self, record: logging.LogRecord) -> str:
        """The line, with every secret cut (:func:`notifier.core.redact.redact`): a library's
        message or a traceback may carry a URL's key or a value from the environment."""
        return redact(super().format(record))

    def formatTime(self, record: logging.LogRecord, datefmt: str | None = None) -> str:
        """The record's time in UTC (the Z in :data:`DATE_FORMAT` promises it)."""
        return time.strftime(datefmt or DATE_FORMAT, time.gmtime(record.created))


class JSONFormatter(logging.Formatter):
    """One JSON object per line (``--log-format json``), for log collectors::

        {"time": "2026-12-04T16:40:05Z", "level": "INFO", "logger": "...", "message": "..."}

    An exception's traceback goes in ``"exc"``, so a record stays one line; secrets are
    cut as in :class:`UTCFormatter`.
    """

    def format(self, record: logging.LogRecord) -> str:
        import json

        out = {
            "time": time.strftime(DATE_FORMAT, time.gmtime(record.created)),
            "level": record.levelname,
            "logger": record.name,
            "message": redact(record.getMessage()),
        }
        if record.exc_info:
            out["exc"] = redact(self.formatException(record.exc_info))
        return json.dumps(out, ensure_ascii=False)


def level_for(verbosity: int) -> int:
    """The root level for ``-v`` given ``verbosity`` times: WARNING, then INFO, then DEBUG.

    >>> [logging.getLevelName(level_for(v)) for v in range(4)]
    ['WARNING', 'INFO', 'DEBUG', 'DEBUG']
    """
    return logging.WARNING - 10 * min(verbosity, 2)


def setup_logging(
    verbosity: int = 0,
    stream: TextIO | None = None,
    *,
    service: bool = False,
    json_lines: bool = False,
) -> None:
    """Sends log lines to ``stream`` (standard error by default) in the :class:`UTCFormatter`
    layout (or as :class:`JSONFormatter` objects with ``json_lines``) at :func:`level_for`
    ``verbosity``.

    ``service`` (``fogwatch run``) starts one step lower, at INFO, so that a running
    service's log shows each alert raised and cleared, and its reloads, without ``-v``.
    The :data:`CHATTY_LIBRARIES` stay at WARNING below ``-vv``.

    Like :func:`logging.basicConfig` it does nothing when the root logger already has a
    handler (an embedding program, or a test's log capture, chose where lines go).
    """
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JSONFormatter() if json_lines else UTCFormatter())
    logging.basicConfig(level=level_for(verbosity + int(service)), handlers=[handler])
    for name in CHATTY_LIBRARIES:
        logging.getLogger(name).setLevel(logging.NOTSET if verbosity >= 2 else logging.WARNING)

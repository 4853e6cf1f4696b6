"""The interface every observation source implements, and what one poll returns.

A source is built from its config (see :func:`notifier.ingest.poll.build_sources`) with
everything it touches handed in: the store, the HTTP session. ``poll(now)`` never
raises for a problem with the data or the far end; it returns a failed
:class:`PollResult` with the reason, so one broken source never stops the others.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from typing import Protocol, runtime_checkable

import pandas as pd

from notifier.core.columns import Rejection, empty_frame

__all__ = ["FileOutcome", "ObservationSource", "PollResult"]

#: (file name, status) where status is ``processed``, ``partial`` (taken, some rows
#: rejected), ``rejected`` or ``duplicate`` (same content taken before).
FileOutcome = tuple[str, str]


@dataclass
class PollResult:
    """What one poll of one source found.

    ``frame`` holds the good rows (canonical table). ``stored`` is true when the source
    has already committed them itself, as the file drop does, so that a file's rows
    and the record that it was taken land in one transaction.
    """

    source_id: str
    frame: pd.DataFrame = field(default_factory=empty_frame)
    rejections: list[Rejection] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    ok: bool = True
    error: str | None = None
    files: list[FileOutcome] = field(default_factory=list)
    stored: bool = False

    def finish(self, frames: list[pd.DataFrame], errors: list[str]) -> PollResult:
        """End the poll: the good rows of every input in one table, the errors (an input
        that could not be read at all) joined into one failure."""
        if frames:
            self.frame = pd.concat(frames, ignore_index=True)
        if errors:
            self.ok = False
            self.error = "; ".join(errors)
        return self

    @property
    def rows_rejected(self) -> int:
        """Rejected rows (a row with several problems counts once)."""
        return len({(r.origin, r.line if r.line is not None else id(r)) for r in self.rejections})


@runtime_checkable
class ObservationSource(Protocol):
    """Anything that can be polled for observations."""

    @property
    def id(self) -> str: ...

    def poll(self, now: datetime) -> PollResult: ...

"""A large window read whole in two parts at once, the upper sites in a helper process.

Reading a window whole is turning rows into Python objects and those into columns: at
100,000 sites (14 M rows) about a minute of one core, all of it under Python's global
lock, so a second thread gains nothing (measured: 7.6 s and 8.1 s at 10,000 sites, one
thread and two). A second *process* reads the upper half of the sites (by id, as the
store orders them) while this one reads the lower half; its columns come back pickled
(numpy arrays: a copy, not a conversion) and the two halves are joined in order. Only a
whole read of many sites from a store another process can open (a database file or
server, not an in-memory database) is split; anything that fails in the helper is read
here instead, as if it had not been split.

The two parts are two reads, each consistent in itself; a batch written between them is
in one part and perhaps not the other, and is read again at the window's next update
(the window records the last batch *before* reading), as for a single read.
"""

from __future__ import annotations

import json
import logging
import os
import pickle
import subprocess
import sys
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from collections.abc import Sequence

    from notifier.storage.store import Store

__all__ = ["SPLIT_MIN_SITES", "split_point", "whole_window_chunks"]

log = logging.getLogger(__name__)

#: below this many sites a whole read takes a few seconds: not worth a process's start
#: (about a second to import pandas and the store)
SPLIT_MIN_SITES = 20_000


def split_point(store: Store, site_ids: Sequence[str]) -> str | None:
    """The site id the upper part starts at, or ``None``: read in one piece."""
    if len(site_ids) < SPLIT_MIN_SITES or (os.cpu_count() or 1) < 2:
        return None
    if store.url == "sqlite://" or ":memory:" in store.url:
        return None  # another process cannot open it
    ordered = sorted(site_ids)
    return ordered[len(ordered) // 2]


def whole_window_chunks(store: Store, start: datetime, site_ids: Sequence[str]) -> list[Any]:
    """Every row from ``start`` on, as :meth:`Store.window_chunks` gives them, read in
    two parts at once where :func:`split_point` allows."""
    middle = split_point(store, site_ids)
    if middle is None:
        return store.window_chunks(None, start, None)
    helper = _start_helper(store.url, start, middle)
    lower = store.window_chunks(None, start, None, site_range=(None, middle))
    upper = None if helper is None else _helpers_part(helper)
    if upper is None:  # no helper, or it failed: the upper part read here
        upper = store.window_chunks(None, start, None, site_range=(middle, None))
    return lower + upper


def _start_helper(url: str, start: datetime, middle: str) -> subprocess.Popen[bytes] | None:
    # A fresh interpreter running this module (not multiprocessing: that would import
    # the caller's main script again). The store's URL, which may hold a password, goes
    # in on stdin, never on the command line where other users could list it.
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(p for p in sys.path if p)}
    try:
        helper = subprocess.Popen(
            [sys.executable, "-m", "notifier.storage.window_parts"],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            env=env,
        )
    except OSError as exc:
        log.warning("cannot start the window's second reader (%s); reading alone", exc)
        return None
    assert helper.stdin is not None and helper.stdout is not None
    try:
        with helper.stdin:
            helper.stdin.write(json.dumps([url, start.timestamp(), middle]).encode())
    except OSError as exc:  # it ended before reading its arguments
        log.warning("the window's second reader failed (%s); reading alone", exc)
        helper.stdout.close()
        helper.wait()
        return None
    return helper


def _helpers_part(helper: subprocess.Popen[bytes]) -> list[Any] | None:
    assert helper.stdout is not None
    part: list[Any] | None = None
    try:
        part = pickle.load(helper.stdout)  # noqa: S301 - our own child's output
    except Exception as exc:  # it died or wrote nothing: read its part here
        log.warning("the window's second reader failed (%s); reading its part here", exc)
    finally:
        helper.stdout.close()
        code = helper.wait()
    if code != 0:
        log.warning("the window's second reader ended with %s; reading its part here", code)
        return None
    return part


def _upper_part(url: str, start_s: float, middle: str) -> list[Any]:
    """In the helper process: the rows of the sites from ``middle`` on."""
    from notifier.storage.store import Store

    with Store(url) as store:
        start = datetime.fromtimestamp(start_s, tz=UTC)
        return store.window_chunks(None, start, None, site_range=(middle, None))


if __name__ == "__main__":  # the helper: its arguments on stdin, its part on stdout
    url, start_s, middle = json.loads(sys.stdin.read())
    pickle.dump(_upper_part(url, start_s, middle), sys.stdout.buffer, protocol=5)
    sys.stdout.buffer.flush()

"""The leader among the ``fogwatch run`` instances sharing one store.

Several instances on one PostgreSQL store split the sites between them (see
``notifier.core.partition``); the work that must happen once for the whole store — the
evening outlooks, housekeeping — is done by one of them, the leader. Leadership is a
PostgreSQL session-level advisory lock (``pg_try_advisory_lock``, docs/references.md
[PostgreSQL advisory locks]) held on a connection of the leader's own: when
that connection ends, because the process stopped or the network dropped, the server
releases the lock and the next instance that asks takes it over. Nobody waits for it:
an instance that is not the leader asks again the next time leader's work is due.

SQLite serves a single instance (the config check refuses more), which always leads.
"""

from __future__ import annotations

import logging
import threading
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from notifier.storage.store import Store

__all__ = ["LEADER_LOCK_KEY", "Leadership"]

log = logging.getLogger(__name__)

#: The advisory lock's key: any fixed 64-bit number no other program on the same
#: database uses; these are the bytes of "fogwatch" read as a big-endian integer.
LEADER_LOCK_KEY = int.from_bytes(b"fogwatch", "big") & 0x7FFF_FFFF_FFFF_FFFF


class Leadership:
    """Whether this instance leads; :meth:`leads` takes the lock when it is free."""

    def __init__(self, store: Store):
        self.store = store
        self._connection: Any = None  # the DB-API connection holding the lock
        self._guard = threading.Lock()

    @property
    def shared(self) -> bool:
        """True where several instances may share the store (PostgreSQL)."""
        return self.store.engine.dialect.name == "postgresql"

    def leads(self) -> bool:
        """True while this instance holds the leader lock (taken now if it is free)."""
        if not self.shared:
            return True
        with self._guard:
            if self._connection is not None and self._alive():
                return True
            self._drop()
            connection = self.store.engine.raw_connection()
            try:
                cursor = connection.cursor()
                cursor.execute("SELECT pg_try_advisory_lock(%s)", (LEADER_LOCK_KEY,))
                row = cursor.fetchone()
                taken = bool(row and row[0])
                cursor.close()
                connection.commit()  # the lock is the session's; no transaction stays open
            except Exception:
                connection.invalidate()
                raise
            if not taken:
                connection.close()  # back to the pool: it holds no lock
                return False
            log.warning("this instance now leads: it runs the outlooks and housekeeping")
            self._connection = connection
            return True

    def release(self) -> None:
        """Give the lead up (at stop): the connection that held it is closed."""
        with self._guard:
            self._drop()

    def _alive(self) -> bool:
        try:
            cursor = self._connection.cursor()
            cursor.execute("SELECT 1")
            cursor.close()
            self._connection.commit()
            return True
        except Exception:  # the connection ended: the server released the lock with it
            log.warning("the leader lock's connection ended; asking for the lead again")
            return False

    def _drop(self) -> None:
        if self._connection is None:
            return
        connection, self._connection = self._connection, None
        try:
            connection.invalidate()  # closed for good, not pooled: the lock goes with it
        except Exception:  # already gone
            pass

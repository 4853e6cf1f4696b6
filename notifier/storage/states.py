"""The alert states in the store, and a copy of them kept in memory between cycles.

A running service reads every alert state at the start of each cycle (the lifecycle
steps from them) and writes back the ones that changed. Reading them all back each
cycle costs a JSON parse per state: at 100,000 sites tens of thousands of states, a
couple of seconds a cycle, for what this process wrote itself a cycle ago.

So :class:`AlertStates` keeps what it read and what it wrote, and the store keeps a
counter (``counters.alert_states``) that every write of states moves on by one, in the
same transaction as the states. A read first asks the counter: when it still stands
where this process left it, nobody else has written states since, and the copy in
memory is the table; otherwise (another instance sharing a PostgreSQL store, another
process on the same file, another ``Outbox`` on the same store) the states are read
whole again. The store stays the durable copy; the memory only saves the read.

What is kept of a written state is what a read would give back (the state parsed from
the JSON written), so a cycle that follows its own write sees exactly what it would
have read.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from datetime import UTC, datetime
from types import MappingProxyType
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from notifier.engine.alerts import AlertState, StateKey
from notifier.engine.rules import LEVELS
from notifier.storage.migrations import alert_states, counters

__all__ = ["AlertStates"]

#: the counter moved on by every write of alert states
COUNTER = "alert_states"
_RANK = MappingProxyType({level: rank for rank, level in enumerate(LEVELS)})


class AlertStates:
    """Reads and writes of the ``alert_states`` table, with the last known table kept."""

    def __init__(self, store: Any):
        self.store = store
        self.engine = store.engine
        # (the counter's value, the states as of that value), or None: not known
        self._known: tuple[int, dict[StateKey, AlertState]] | None = None
        #: whether the last :meth:`read` was answered from memory (for tests and benches)
        self.last_from_memory = False

    def read(self) -> dict[StateKey, AlertState]:
        """Every alert state (a new dict: the caller may change it)."""
        with self.engine.connect() as conn:
            # the counter first: a write committed between the two reads makes the copy
            # look older than it is, so the next read goes to the store again (never the
            # other way round)
            count = _counter(conn)
            known = self._known
            if known is not None and known[0] == count:
                self.last_from_memory = True
                return dict(known[1])
            out = {}
            for text in conn.execute(sa.select(alert_states.c.state)).scalars():
                state = AlertState.from_dict(json.loads(text))
                out[state.key] = state
        self._known = (count, out)
        self.last_from_memory = False
        return dict(out)

    def write(
        self,
        conn: Connection,
        previous: Mapping[StateKey, AlertState],
        new_states: Mapping[StateKey, AlertState],
        when: str,
    ) -> _Written | None:
        """Write the changes from ``previous`` to ``new_states`` in ``conn``'s
        transaction; the returned record is :meth:`applied` once that commits."""
        gone = list(previous.keys() - new_states.keys())
        if gone:  # one executemany, not a statement per state
            conn.execute(
                alert_states.delete().where(
                    (alert_states.c.site == sa.bindparam("s"))
                    & (alert_states.c.hazard == sa.bindparam("h"))
                ),
                [{"s": key[0], "h": key[1]} for key in gone],
            )
        rows = [
            {
                "site": key[0],
                "hazard": key[1],
                "state": json.dumps(state.to_dict()),
                "updated_at": when,
            }
            for key, state in new_states.items()
            # most states are the very object stepped from: no field-by-field comparison
            if previous.get(key) is not state and previous.get(key) != state
        ]
        if rows:
            stmt = self.store._insert(alert_states)
            conn.execute(
                stmt.on_conflict_do_update(
                    index_elements=["site", "hazard"],
                    set_={"state": stmt.excluded.state, "updated_at": stmt.excluded.updated_at},
                ),
                rows,
            )
        if not gone and not rows:
            return None
        kept = [new_states[(row["site"], row["hazard"])] for row in rows]
        return _Written(_moved_on(self.store, conn), gone, rows, kept)

    def applied(self, written: _Written | None) -> None:
        """After the commit: the copy in memory follows the write, if it was the table
        just before it (the counter moved on by this write alone); else it is dropped."""
        known = self._known
        if written is None or known is None:
            return
        if written.count != known[0] + 1:  # someone else wrote in between
            self._known = None
            return
        states = known[1]
        for key in written.gone:
            states.pop(key, None)
        for row, state in zip(written.rows, written.states, strict=True):
            # as a read would give it back: the state itself where its JSON parses back
            # to an identical one (the usual case; parsing every written state was a
            # tenth of the commit at 100,000 sites), else the parsed JSON
            if not _reads_back_as_itself(state):
                state = AlertState.from_dict(json.loads(row["state"]))
            states[state.key] = state
        self._known = (written.count, states)

    def forget(self) -> None:
        """Drop the copy in memory (a failed transaction: the next read goes to the store)."""
        self._known = None


class _Written:
    """What one transaction wrote: the counter's new value, the keys deleted and the rows
    upserted."""

    __slots__ = ("count", "gone", "rows", "states")

    def __init__(
        self,
        count: int,
        gone: list[StateKey],
        rows: list[dict[str, Any]],
        states: list[AlertState],
    ):
        self.count = count
        self.gone = gone
        self.rows = rows
        self.states = states  # the state of each row


_TIMES = (
    "since",
    "episode_start",
    "below_since",
    "clear_since",
    "last_event_at",
    "last_reminder_at",
    "seen_since",
    "eta",
    "gap_from",
    "gap_pending_since",
)


def _utc(t: Any) -> bool:
    """A ``datetime`` its ISO text gives back identically: in UTC, not a repeated hour."""
    return type(t) is datetime and t.tzinfo is UTC and not t.fold


def _reads_back_as_itself(state: AlertState) -> bool:
    """Whether ``AlertState.from_dict`` of the state's JSON gives an identical state:
    every time in UTC (a time in another zone comes back as the same instant in UTC),
    the texts as tuples of str, the cooldown times in level order, a peak level."""
    if type(state) is not AlertState or not state.peak:
        return False
    for name in _TIMES:
        t = getattr(state, name)
        if t is not None and not _utc(t):
            return False
    ranks = []
    for level, t in state.last_raised:
        if not _utc(t) or type(level) is not str:
            return False
        ranks.append(_RANK.get(level, -1))
    if ranks != sorted(ranks) or -1 in ranks or len(set(ranks)) != len(ranks):
        return False
    texts = (state.site_id, state.hazard, state.level, state.peak)
    if not all(type(x) is str for x in texts):
        return False
    return all(
        type(part) is tuple and all(type(x) is str for x in part)
        for part in (state.rules, state.reasons, state.seen)
    )


def _counter(conn: Connection) -> int:
    value = conn.execute(sa.select(counters.c.value).where(counters.c.name == COUNTER)).scalar()
    return int(value or 0)


def _moved_on(store: Any, conn: Connection) -> int:
    """The counter moved on by one in ``conn``'s transaction; its new value."""
    conn.execute(
        store._insert(counters)
        .values(name=COUNTER, value=0)
        .on_conflict_do_nothing(index_elements=["name"])
    )
    return int(
        conn.execute(
            counters.update()
            .where(counters.c.name == COUNTER)
            .values(value=counters.c.value + 1)
            .returning(counters.c.value)
        ).scalar_one()
    )

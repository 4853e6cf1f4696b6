"""The bot on Matrix: a sync loop (matrix-nio) that answers the bot's grammar in rooms
and direct messages, in a thread of its own beside the scheduler.

- **Rooms.** The listed ``rooms`` are joined at start. An invitation is accepted for a
  listed room, or for any room with ``invites: accept``; any other is declined.
  Rooms are unencrypted: in a room with ``m.room.encryption`` the bot says it cannot
  work there and leaves (it never sits silent in a room it cannot read).
- **Who speaks.** The Matrix user id is the sender id; the answer comes from
  ``answer(sender, text, now)`` (the same function as the HTTP endpoint's), sent as an
  ``m.notice`` (bots answer with notices, so two bots do not answer each other). In a
  room with more than two members only messages that start with a command word are
  answered; in a direct chat, every message. Past ``bot.rate_per_minute`` messages from
  one sender in a minute, the rest are logged and not answered.
- **Restarts.** The sync token is saved once a sync's events are handled, so the next
  start asks for what came after: a command sent while fogwatch was down is answered.
  An answered event's id is recorded after its answer is sent, and the answer's
  transaction id is made from the event id: a restart between the two sends the same
  transaction again, which the homeserver does not post twice. The first start of an
  account answers nothing from before it (old history is not news).
- **Trouble.** A failed sync backs off (1 s doubling to 5 min, jittered); a 429 waits
  the server's ``retry_after_ms``. A refused token (``M_UNKNOWN_TOKEN``) is logged as
  such once and retried every 5 minutes. The state (connected, retrying, token refused,
  stopped) and the last error are kept in the store for ``fogwatch status``.
"""

from __future__ import annotations

import asyncio
import hashlib
import logging
import random
import threading
import time
from collections.abc import Callable, Iterable
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any, Protocol

from notifier.bot.grammar import starts_with_command
from notifier.bot.server import _Guard as RateGuard
from notifier.core.redact import redact

if TYPE_CHECKING:  # pragma: no cover
    from nio import AsyncClient

    from notifier.core.config import MatrixSettings

__all__ = ["ENCRYPTED_REFUSAL", "MatrixBot", "MatrixLink", "SyncMemory", "retry_delay_s"]

log = logging.getLogger(__name__)

MAX_DELAY_S = 300.0
SYNC_TIMEOUT_MS = 30_000  # how long a sync waits on the homeserver for something new
MAX_TEXT = 500  # as the HTTP endpoint: longer commands are cut
ENCRYPTED_REFUSAL = (
    "This room is end-to-end encrypted, and I can only read unencrypted rooms, so I am "
    "leaving it. Invite me to an unencrypted room or start an unencrypted direct chat."
)


class SyncMemory(Protocol):
    """Where the connection keeps its place (:class:`notifier.storage.matrixstate.MatrixState`)."""

    def next_batch(self) -> str | None: ...
    def synced(self, next_batch: str, now: datetime) -> None: ...
    def set_state(self, state: str, now: datetime, error: str | None = None) -> None: ...
    def handled(self, event_id: str) -> bool: ...
    def mark_handled(self, event_id: str, room_id: str, now_s: float) -> bool: ...


def retry_delay_s(failures: int, retry_after_ms: float | None = None, jitter: float = 0.0) -> float:
    """Seconds to wait after ``failures`` failed syncs in a row: the server's own
    ``retry_after_ms`` when it gave one, else 1 s doubling up to 5 min, stretched by
    ``jitter`` (0 to 1: a fraction of the delay, so many clients do not retry at once).

    >>> [retry_delay_s(n) for n in (1, 2, 3, 10)]
    [1.0, 2.0, 4.0, 300.0]
    >>> retry_delay_s(4, retry_after_ms=2500)
    2.5
    """
    if retry_after_ms is not None and retry_after_ms >= 0:
        return min(retry_after_ms / 1000.0, MAX_DELAY_S)
    base = min(2.0 ** max(failures - 1, 0), MAX_DELAY_S)
    return min(base * (1.0 + jitter), MAX_DELAY_S)


class _SyncFailed(Exception):
    def __init__(
        self,
        message: str,
        retry_after_ms: float | None = None,
        token: bool = False,
        unreachable: bool = False,
    ):
        super().__init__(message)
        self.retry_after_ms = retry_after_ms
        self.token_refused = token
        self.unreachable = unreachable

    @property
    def about_the_connection(self) -> bool:
        """Not about one request: the homeserver is away, busy, or refuses the token."""
        return self.unreachable or self.token_refused or self.retry_after_ms is not None


def _txn_for(event_id: str) -> str:
    """The transaction id of the answer to ``event_id``: the same on every attempt."""
    return "fw-re-" + hashlib.sha256(event_id.encode()).hexdigest()[:32]


class MatrixBot:
    """One account's connection; ``run(stop)`` syncs until ``stop`` is set."""

    def __init__(
        self,
        settings: MatrixSettings,
        answer: Callable[[str, str, datetime], str],
        memory: SyncMemory,
        clock: Callable[[], datetime] = lambda: datetime.now(UTC),
        sync_timeout_ms: int = SYNC_TIMEOUT_MS,
        rate_per_minute: int = 20,
    ):
        self.settings = settings
        self.answer = answer
        self.memory = memory
        self.clock = clock
        self.sync_timeout_ms = sync_timeout_ms
        self.me = settings.user_id
        self.listed: set[str] = set(settings.rooms)  # room ids, and aliases resolved at start
        self.members: dict[str, int] = {}  # room id → joined members, as far as seen
        self.state = "starting"
        self.joined_listed = False
        self.guard = RateGuard(rate_per_minute)  # messages answered per sender per minute
        self.rng = random.Random()

    def _client(self) -> AsyncClient:
        from nio import AsyncClient, AsyncClientConfig

        # no retries inside nio: 429s and connection errors come back here, to back off
        config = AsyncClientConfig(
            max_limit_exceeded=0,
            max_timeouts=0,
            encryption_enabled=False,
            store_sync_tokens=False,
            request_timeout=self.sync_timeout_ms / 1000 + 30,
        )
        client = AsyncClient(self.settings.homeserver, self.me, config=config)
        client.access_token = self.settings.access_token
        return client

    def _set_state(self, state: str, error: str | None = None) -> None:
        self.state = state
        try:
            self.memory.set_state(state, self.clock(), error)
        except Exception as exc:  # the store is down: the connection goes on
            log.warning("matrix: cannot record the state %s: %s", state, type(exc).__name__)

    async def run(self, stop: asyncio.Event) -> None:
        client = self._client()
        failures = 0
        try:
            self._set_state("starting")
            since = self.memory.next_batch()
            while not stop.is_set():
                try:
                    if not self.joined_listed:
                        await self._join_listed(client)
                    since = await self._sync_once(client, since, stop)
                    if since is None:  # stopped mid-sync
                        break
                    if self.state != "connected":
                        log.warning("matrix: connected to %s as %s", client.homeserver, self.me)
                        self._set_state("connected")
                    failures = 0
                except _SyncFailed as exc:
                    failures += 1
                    delay = retry_delay_s(failures, exc.retry_after_ms, self.rng.random() * 0.2)
                    if exc.token_refused:
                        delay = MAX_DELAY_S
                        if self.state != "token refused":
                            log.error(
                                "matrix: the homeserver refused the access token of %s "
                                "(M_UNKNOWN_TOKEN): set matrix.access_token to a valid token; "
                                "trying again every %.0f s",
                                self.me,
                                delay,
                            )
                        self._set_state("token refused", str(exc))
                    else:
                        log.warning("matrix: %s; retrying in %.1f s", exc, delay)
                        self._set_state("retrying", str(exc))
                    try:
                        await asyncio.wait_for(stop.wait(), timeout=delay)
                    except TimeoutError:
                        pass
        finally:
            await client.close()
            self._set_state("stopped")

    async def _call(self, coro: Any) -> Any:
        """A nio call: its response, or _SyncFailed for an error or a lost connection."""
        from aiohttp import ClientError  # (nio's HTTP client)
        from nio import ErrorResponse

        try:
            response = await coro
        except (OSError, TimeoutError, ClientError) as exc:
            raise _SyncFailed(
                f"cannot reach the homeserver: {type(exc).__name__}", unreachable=True
            ) from exc
        if isinstance(response, ErrorResponse):
            code = str(response.status_code or "")
            text = redact(f"{code} {response.message or ''}".strip())
            raise _SyncFailed(
                f"homeserver error: {text}",
                getattr(response, "retry_after_ms", None),
                token=code == "M_UNKNOWN_TOKEN",
                unreachable=not code.startswith("M_"),  # a proxy's 502, not the homeserver's
            )
        return response

    async def _join_listed(self, client: AsyncClient) -> None:
        """Join each listed room (an alias is resolved first, so that an invitation to
        it is known as listed even where the bot may not join before it is invited). A
        room that cannot be joined is logged and left; a connection problem is raised."""
        for room in self.settings.rooms:
            try:
                if room.startswith("#"):
                    resolved = await self._call(client.room_resolve_alias(room))
                    self.listed.add(resolved.room_id)
                joined = await self._call(client.join(room))
                self.listed.add(joined.room_id)
            except _SyncFailed as exc:
                if exc.about_the_connection:
                    raise
                log.warning("matrix: cannot join %s (listed in matrix.rooms): %s", room, exc)
        self.joined_listed = True

    async def _sync_once(
        self, client: AsyncClient, since: str | None, stop: asyncio.Event
    ) -> str | None:
        """One sync, its events handled; the token the next one starts from (None if
        ``stop`` was set while waiting)."""
        sync = asyncio.ensure_future(
            client.sync(timeout=self.sync_timeout_ms, since=since, set_presence="online")
        )
        stopping = asyncio.ensure_future(stop.wait())
        done, _ = await asyncio.wait({sync, stopping}, return_when=asyncio.FIRST_COMPLETED)
        if sync not in done:
            sync.cancel()
            return None
        stopping.cancel()
        response = await self._call(sync)
        await self._handle(client, response, answering=since is not None)
        try:
            self.memory.synced(response.next_batch, self.clock())
        except Exception as exc:
            raise _SyncFailed(f"cannot record the sync token: {type(exc).__name__}") from exc
        return str(response.next_batch)

    async def _handle(self, client: AsyncClient, response: Any, answering: bool) -> None:
        for room_id in response.rooms.invite:
            await self._invited(client, room_id)
        for room_id, info in response.rooms.join.items():
            if info.summary is not None and info.summary.joined_member_count is not None:
                self.members[room_id] = info.summary.joined_member_count
            events = [e.source for e in [*info.state, *info.timeline.events]]
            if await self._refuse_encrypted(client, room_id, events):
                continue
            for event in _after_own_join(info.timeline.events, self.me):
                if answering or self._just_joined(info.timeline.events):
                    await self._maybe_answer(client, room_id, event)

    def _just_joined(self, events: Iterable[Any]) -> bool:
        return any(_is_own_join(e.source, self.me) for e in events)

    async def _invited(self, client: AsyncClient, room_id: str) -> None:
        if self.settings.invites == "accept" or room_id in self.listed:
            log.info("matrix: joining %s on invitation", room_id)
            await self._call(client.join(room_id))
        else:
            log.warning("matrix: declined an invitation to %s (not in matrix.rooms)", room_id)
            await self._call(client.room_leave(room_id))

    async def _refuse_encrypted(
        self, client: AsyncClient, room_id: str, events: list[dict[str, Any]]
    ) -> bool:
        marks = [e for e in events if e.get("type") in ("m.room.encryption", "m.room.encrypted")]
        if not marks:
            return False
        key = str(marks[0].get("event_id") or f"encryption:{room_id}")
        if not self.memory.handled(key):
            log.warning("matrix: %s is encrypted; saying so and leaving it", room_id)
            content = {"msgtype": "m.notice", "body": ENCRYPTED_REFUSAL}
            await self._call(client.room_send(room_id, "m.room.message", content, _txn_for(key)))
            self.memory.mark_handled(key, room_id, time.time())
        await self._call(client.room_leave(room_id))
        return True

    async def _maybe_answer(self, client: AsyncClient, room_id: str, event: dict[str, Any]) -> None:
        content = event.get("content") or {}
        sender, event_id = event.get("sender"), event.get("event_id")
        if (
            event.get("type") != "m.room.message"
            or content.get("msgtype") != "m.text"
            or not isinstance(content.get("body"), str)
            or sender == self.me
            or not isinstance(sender, str)
            or not isinstance(event_id, str)
        ):
            return
        text = _without_reply_quote(content["body"])
        direct = self.members.get(room_id, 3) <= 2
        if not direct and not starts_with_command(text):
            return  # chat between people in a shared room
        if self.memory.handled(event_id):
            return
        if self.guard.over_rate(sender, time.time()):  # as bot.rate_per_minute over HTTP
            log.warning("matrix: %s sends too many messages; not answered", sender)
            self.memory.mark_handled(event_id, room_id, time.time())
            return
        try:
            reply = self.answer(sender, text[:MAX_TEXT], self.clock())
        except Exception:  # a bug must not stop the connection, nor be retried forever
            log.exception("matrix: command from %s failed", sender)
            reply = "Sorry, that went wrong on my side. Try again later."
        notice = {"msgtype": "m.notice", "body": reply}
        await self._call(client.room_send(room_id, "m.room.message", notice, _txn_for(event_id)))
        self.memory.mark_handled(event_id, room_id, time.time())


def _is_own_join(event: dict[str, Any], me: str) -> bool:
    return (
        event.get("type") == "m.room.member"
        and event.get("state_key") == me
        and (event.get("content") or {}).get("membership") == "join"
        and (event.get("unsigned") or {}).get("prev_content", {}).get("membership") != "join"
    )


def _after_own_join(events: Iterable[Any], me: str) -> list[dict[str, Any]]:
    """The timeline's events, without those from before the bot joined (when it joined
    within this timeline: history from before is not addressed to it)."""
    sources = [e.source for e in events]
    for i in range(len(sources) - 1, -1, -1):
        if _is_own_join(sources[i], me):
            return sources[i + 1 :]
    return sources


def _without_reply_quote(body: str) -> str:
    """A reply's own text, without the quoted lines (``> ...``) clients put before it."""
    lines = body.split("\n")
    while lines and lines[0].startswith(">"):
        lines.pop(0)
    return "\n".join(lines).strip()


class MatrixLink:
    """A :class:`MatrixBot` in a thread with its own event loop: ``start()``,
    ``stop()`` (the sync in flight is cancelled; the state becomes ``stopped``)."""

    def __init__(self, bot: MatrixBot):
        self.bot = bot
        self._loop: asyncio.AbstractEventLoop | None = None
        self._stop: asyncio.Event | None = None
        self._ready = threading.Event()
        self._thread = threading.Thread(target=self._main, name="matrix", daemon=True)

    def _main(self) -> None:
        loop = asyncio.new_event_loop()
        self._loop = loop
        try:
            self._stop = asyncio.Event()
            self._ready.set()
            loop.run_until_complete(self.bot.run(self._stop))
        except Exception:
            log.exception("matrix: the connection stopped on an error")
        finally:
            loop.run_until_complete(loop.shutdown_asyncgens())
            loop.close()

    def start(self) -> MatrixLink:
        self._thread.start()
        self._ready.wait(10)
        return self

    def stop(self, timeout_s: float = 30.0) -> None:
        loop, stop = self._loop, self._stop
        if loop is not None and stop is not None and not loop.is_closed():
            try:
                loop.call_soon_threadsafe(stop.set)
            except RuntimeError:  # the loop closed meanwhile
                pass
        self._thread.join(timeout_s)

    @property
    def state(self) -> str:
        return self.bot.state

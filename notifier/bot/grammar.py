"""The messaging bot: a small command grammar and short plain-text replies.

Commands (one per message, case does not matter)::

    help                              what the bot understands
    sites                             the sites you may ask about
    status [SITE]                     one site, or every site you follow
    why SITE                          the reasons behind a site's level
    follow SITE [from watch|warning]  send me this site's alerts
    unfollow SITE                     stop sending them
    hush SITE for 3h [for everyone]   mute a site (everyone: operators only)
    unhush SITE [for everyone]        lift it
    join CODE                         become known, with a code an operator gave you

The grammar is pure; every read and write goes through a ``BotBackend`` so the same
commands work over HTTP, from the shell (``fogwatch ask``) and in tests.

A sender id must be a plain identifier (``notifier.core.config.check_sender_id``): any
other is refused before anything else, ``join`` included. A sender names only the sites
``BotBackend.sites_for`` gives them (a member: what their join codes granted); any other
site is answered as unknown, so its name is not given away. A hush is the sender's own
unless an operator says ``for everyone``, which is a flag, never a sender id.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Protocol
from zoneinfo import ZoneInfo

from notifier.core.config import SENDER_ID, SENDER_ID_RULE, parse_duration_s

__all__ = ["BotBackend", "SiteStatus", "handle", "starts_with_command"]

CAUTION = "Automated estimate, not an official forecast."
MAX_MUTE = timedelta(days=14)  # a product bound: a forgotten hush must not silence a season
HOW_LONG = "Say how long, e.g. 'hush SITE for 3h' or 'for 45min'."
HUSH_BOUNDS = "A hush lasts between a minute and 14 days."
BAD_SENDER = f"I can't take messages from that sender id: it may use {SENDER_ID_RULE}."


@dataclass(frozen=True)
class SiteStatus:
    site_id: str
    name: str
    level: str  # none | watch | warning
    summary: str  # one short line: hazards, eta, key values
    data_age_min: float | None
    # how old the data is, as a person reads it ("newest reading Sat 07 Nov 09:00 GMT,
    # 27 days 5 h old: STALE"; core.freshness), and whether it is past alerts.stale_after
    data_text: str = ""
    stale: bool = False


class BotBackend(Protocol):
    """What the bot needs from the running service."""

    def site_names(self) -> dict[str, str]: ...
    def site_timezone(self, site_id: str) -> str: ...
    def is_known(self, sender: str) -> bool: ...
    def is_operator(self, sender: str) -> bool: ...
    def sites_for(self, sender: str) -> list[str]: ...  # ids of the sites they may name
    def join(self, sender: str, code: str) -> str | None: ...  # what it granted, or None
    def status(self, site_ids: Sequence[str]) -> list[SiteStatus]: ...
    def reasons(self, site_id: str) -> list[str]: ...
    def followed(self, sender: str) -> list[str]: ...
    def follow(self, sender: str, site_id: str, min_level: str) -> None: ...
    def unfollow(self, sender: str, site_id: str) -> bool: ...
    def mute(self, sender: str, site_id: str, until: datetime, everyone: bool = False) -> None: ...
    def unmute(self, sender: str, site_id: str, everyone: bool = False) -> bool: ...


HELP = """\
I watch sites for fog and icing. Say:
  sites — the sites you may ask about
  status [SITE] — a site, or all you follow
  why SITE — the reasons behind its level
  follow SITE [from warning] — get its alerts
  unfollow SITE
  hush SITE for 3h — mute it for a while
  unhush SITE
  join CODE — with a code from an operator"""


def _site(backend: BotBackend, sender: str, text: str) -> str | None:
    """The one site among those ``sender`` may name that ``text`` means: by id, by name or
    by a part of the name found in no other."""
    allowed = backend.site_names()
    names = {sid: allowed[sid] for sid in backend.sites_for(sender) if sid in allowed}
    key = text.strip().lower()
    if key in names:
        return key
    for sid, name in names.items():
        if name.lower() == key:
            return sid
    matches = [sid for sid, name in names.items() if key and key in name.lower()]
    return matches[0] if len(matches) == 1 else None


def _unknown_site(backend: BotBackend, text: str) -> str:
    return f"I don't know a site '{text.strip()}'. Say 'sites' for the list."


def _status_line(s: SiteStatus) -> str:
    """``Name: LEVEL — summary (newest reading …)``; on stale data the level is marked as
    judged from old data, so that silence does not read as safety."""
    if s.data_text:
        data = f" ({s.data_text})"
    elif s.data_age_min is not None:
        data = f" (data {s.data_age_min:.0f} min old)"
    else:
        data = ""
    level = s.level.upper()
    if s.stale:
        level += " on old data" if s.data_age_min is not None else " with no data"
    return f"{s.name}: {level} — {s.summary}{data}"


def handle(backend: BotBackend, sender: str, text: str, now: datetime) -> str:
    """Answer one message from ``sender``."""
    words = text.strip()
    lower = words.lower()
    if not SENDER_ID.fullmatch(sender):
        return BAD_SENDER
    if not words:
        return "Say 'help' to see what I understand."
    # joining is the one thing a stranger may do
    if re.fullmatch(r"join\s+(\S+)", lower):
        return _join(backend, sender, words.split()[1])
    if not backend.is_known(sender):
        return "I don't know you yet. Ask an operator for a join code, then say 'join CODE'."
    for pattern, reply in _COMMANDS:
        m = pattern.fullmatch(lower)
        if m:
            return reply(backend, sender, m, now)
    return "I didn't understand that. Say 'help'."


def _join(backend: BotBackend, sender: str, code: str) -> str:
    """Makes ``sender`` known with an operator's join code (as typed: codes keep their case)."""
    granted = backend.join(sender, code)
    if granted is None:
        return "That code is not valid. Ask your site operator for a current one."
    names = backend.site_names()
    if granted in names:  # a site's code: its alerts follow
        return f"Welcome. You now follow {names[granted]}. Say 'help' to see what else I do."
    mine = [names[sid] for sid in backend.sites_for(sender) if sid in names]
    if not mine:
        return "Welcome. Your code covers no site yet; ask your site operator."
    return (
        f"Welcome. You may ask about {', '.join(mine)}. Say 'follow SITE' to get a site's alerts."
    )


def _help(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """What the bot understands."""
    return HELP


def _sites(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """Every site, marking the ones ``sender`` follows."""
    names = backend.site_names()
    followed = set(backend.followed(sender))
    mine = [sid for sid in backend.sites_for(sender) if sid in names]
    lines = [f"{'*' if sid in followed else '-'} {sid}: {names[sid]}" for sid in mine]
    return "\n".join(["Sites (* = you follow):", *lines])


def _status(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """One line per site: the one named, or else every site ``sender`` follows."""
    if m.group(1):
        sid = _site(backend, sender, m.group(1))
        if sid is None:
            return _unknown_site(backend, m.group(1))
        ids = [sid]
    else:
        ids = backend.followed(sender)
        if not ids:
            return "You follow no sites. Say 'status SITE' or 'follow SITE'."
    lines = [_status_line(s) for s in backend.status(ids)]
    return "\n".join([*lines, CAUTION])


def _why(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """A site's level and up to eight reasons behind it."""
    sid = _site(backend, sender, m.group(1))
    if sid is None:
        return _unknown_site(backend, m.group(1))
    (st,) = backend.status([sid])
    reasons = backend.reasons(sid)
    body = [f"- {r}" for r in reasons[:8]] or ["- no rule is firing"]
    return "\n".join([f"{st.name}: {st.level.upper()}", *body, CAUTION])


def _follow(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """Sends ``sender`` a site's alerts from a level (watch unless told) up."""
    level = m.group(2) or "watch"
    if level not in ("watch", "warning"):
        return "Levels are 'watch' and 'warning', e.g. 'follow SITE from warning'."
    sid = _site(backend, sender, m.group(1))
    if sid is None:
        return _unknown_site(backend, m.group(1))
    backend.follow(sender, sid, level)
    return f"You will get {backend.site_names()[sid]} alerts from {level} level up."


def _unfollow(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """Stops sending ``sender`` a site's alerts."""
    sid = _site(backend, sender, m.group(1))
    if sid is None:
        return _unknown_site(backend, m.group(1))
    if backend.unfollow(sender, sid):
        return f"You no longer get {backend.site_names()[sid]} alerts."
    return f"You were not following {backend.site_names()[sid]}."


def _hush(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """Mutes a site for a while, for ``sender`` or (operators only) for everyone."""
    sid = _site(backend, sender, m.group(1))
    if sid is None:
        return _unknown_site(backend, m.group(1))
    try:
        seconds = parse_duration_s(m.group(2))
    except ValueError:
        return HOW_LONG
    # compare as numbers first: a timedelta of 10^20 hours overflows
    if not 60 <= seconds <= MAX_MUTE.total_seconds():
        return HUSH_BOUNDS
    everyone = bool(m.group(3))
    if everyone and not backend.is_operator(sender):
        return "Only an operator can hush a site for everyone."
    until = now + timedelta(seconds=seconds)
    backend.mute(sender, sid, until, everyone)
    scope = "for everyone" if everyone else "for you"
    local = until.astimezone(ZoneInfo(backend.site_timezone(sid)))
    return (
        f"{backend.site_names()[sid]} hushed {scope} until "
        f"{local:%H:%M %Z} ({local:%d %b}). Warnings then resume."
    )


def _how_long(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """Asks for the missing duration of a hush."""
    return HOW_LONG


def _unhush(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """Lifts a hush, ``sender``'s own or (operators only) everyone's."""
    sid = _site(backend, sender, m.group(1))
    if sid is None:
        return _unknown_site(backend, m.group(1))
    everyone = bool(m.group(2))
    if everyone and not backend.is_operator(sender):
        return "Only an operator can lift a hush for everyone."
    if backend.unmute(sender, sid, everyone):
        return f"{backend.site_names()[sid]} alerts are back on."
    return f"{backend.site_names()[sid]} was not hushed."


def _which_site(backend: BotBackend, sender: str, m: re.Match[str], now: datetime) -> str:
    """Asks which site a command without one is about."""
    example = next(iter(backend.sites_for(sender)), "SITE")
    return f"Say which site, e.g. '{m.group(0)} {example}'. Say 'sites' for the list."


Reply = Callable[[BotBackend, str, re.Match[str], datetime], str]

# Tried in order, each against the whole lower-cased message: the first that matches answers.
# A hush without "for ..." comes after the full hush, and a bare command word last.
_COMMANDS: list[tuple[re.Pattern[str], Reply]] = [
    (re.compile(r"help|\?|hello|hi"), _help),
    (re.compile(r"sites"), _sites),
    (re.compile(r"status(?:\s+(.+))?"), _status),
    (re.compile(r"why\s+(.+)"), _why),
    (re.compile(r"follow\s+(.+?)(?:\s+from\s+(\S+))?"), _follow),
    (re.compile(r"unfollow\s+(.+)"), _unfollow),
    (re.compile(r"hush\s+(.+?)\s+for\s+(.+?)(\s+for\s+everyone)?"), _hush),
    (re.compile(r"hush\s+.+"), _how_long),
    (re.compile(r"unhush\s+(.+?)(\s+for\s+everyone)?"), _unhush),
    (re.compile(r"why|follow|unfollow|hush|unhush"), _which_site),
]

# what a message for the bot starts with, in a room shared with people talking among
# themselves (greetings are left out there: "hi" is for the people)
COMMAND_WORDS = frozenset(
    ("help", "sites", "status", "why", "follow", "unfollow", "hush", "unhush", "join")
)


def starts_with_command(text: str) -> bool:
    """True when ``text`` begins with one of the bot's command words.

    >>> starts_with_command("Status vale"), starts_with_command("status? no idea")
    (True, False)
    """
    words = text.split(maxsplit=1)
    return bool(words) and words[0].lower() in COMMAND_WORDS

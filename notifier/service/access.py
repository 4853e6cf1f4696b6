"""Who may do what through the bot, and what a hush does to routing.

- An **operator** (a sender listed in ``senders`` of a subscriber with ``operator: true``)
  may name every site, and hush or unhush a site for everyone.
- A sender **listed in the config** (``bot.allow``, or any subscriber's ``senders``) may
  name every site: an operator put them there by hand.
- A **member** who joined with a code may name only what their codes granted: a site id,
  ``tag:NAME`` (the sites carrying that tag in the config as it is now) or ``all``. A
  second code adds its grant to the first.
- Anyone else may only say ``join CODE``.

"Naming a site" covers ``status``, ``why``, ``follow``, ``hush`` and the ``sites`` list;
a follow that its sender may no longer name (a tag since moved, a sender since taken off
the allow list) is not routed.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Mapping
from typing import Literal, cast

from notifier.core.config import BOT_SUBSCRIBER_PREFIX, Config, Subscriber
from notifier.delivery.routing import Mute
from notifier.storage.botstate import BotState, Hush

__all__ = ["Access", "bot_subscriber_id", "bot_subscribers", "routing_mutes"]

Follow = tuple[str, str, str]  # (sender, site id, min level), as the store keeps them


class Access:
    """The bot's rights over ``config``, given the members' stored grants."""

    def __init__(self, config: Config, grants: Mapping[str, tuple[str, ...]]):
        self.config = config
        self.grants = grants
        self.listed: set[str] = set(config.bot.allow)
        for sub in config.subscribers:
            self.listed.update(sub.senders)
        self.operators = {s for sub in config.subscribers if sub.operator for s in sub.senders}

    @classmethod
    def of(cls, config: Config, bot_state: BotState) -> Access:
        return cls(config, bot_state.grants())

    def is_operator(self, sender: str) -> bool:
        return sender in self.operators

    def sites(self, sender: str) -> tuple[str, ...]:
        """The ids of the sites ``sender`` may name, in config order."""
        if sender in self.listed:
            return tuple(s.id for s in self.config.sites)
        return tuple(s.id for s in self.config.sites_matching(self.grants.get(sender, ())))

    def may_name(self, sender: str, site_id: str) -> bool:
        return site_id in self.sites(sender)


def bot_subscriber_id(sender: str, site: str) -> str:
    """The subscriber id of ``sender``'s follow of ``site`` (a hash: ids are identifiers)."""
    digest = hashlib.sha256(f"{sender}|{site}".encode()).hexdigest()[:12]
    return f"{BOT_SUBSCRIBER_PREFIX}{digest}"


def bot_subscribers(config: Config, follows: Iterable[Follow], access: Access) -> list[Subscriber]:
    """A subscriber for each follow whose sender may still name its site."""
    return [
        Subscriber(
            id=bot_subscriber_id(sender, site),
            name=sender,
            channel=config.bot.channel,
            address=sender,
            sites=(site,),
            # the bot stores only levels a Subscriber accepts
            min_level=cast(Literal["watch", "warning"], level),
        )
        for sender, site, level in follows
        if access.may_name(sender, site)
    ]


def routing_mutes(config: Config, hushes: Iterable[Hush], follows: Iterable[Follow]) -> list[Mute]:
    """Stored hushes as routing's mutes. One for everyone covers every subscriber; a
    sender's own covers the configured subscribers they speak for and their own follows,
    and no one else."""
    followed: dict[str, list[str]] = {}
    for sender, site, _ in follows:
        followed.setdefault(sender, []).append(site)
    out: list[Mute] = []
    for hush in hushes:
        if hush.everyone:
            out.append(Mute(None, hush.site, hush.until))
            continue
        for sub in config.subscribers:
            if hush.who in sub.senders:
                out.append(Mute(sub.id, hush.site, hush.until))
        for site in followed.get(hush.who, ()):
            out.append(Mute(bot_subscriber_id(hush.who, site), hush.site, hush.until))
    return out

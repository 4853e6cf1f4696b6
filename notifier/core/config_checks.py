"""The config's cross-checks: references and uniqueness across the file (sites named by
sources, subscribers and join codes; channels; rule and model paths; the web token and
the instance count), over the entries that passed validation (:class:`View`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

from notifier.core.config import (
    BOT_SUBSCRIBER_PREFIX,
    Config,
    EmailChannel,
    FileDropSource,
    FolderChannel,
    instance_problem,
    is_loopback_host,
)
from notifier.core.config_matrix import MatrixChannel, check_matrix_address
from notifier.core.yamlio import Loc

__all__ = ["View", "cross_check"]


@dataclass
class View:
    """The file as the cross-checks see it: without entries that failed validation.

    ``index[section][i]`` is the position in the file of the i-th entry kept; ``known``
    holds the ids (and, for sites, tags) of entries left out, or ``None`` when a whole
    section was left out, so that references to them are not reported as unknown.
    """

    data: Any
    index: dict[str, list[int]] = field(default_factory=dict)
    known: dict[str, set[str] | None] = field(default_factory=dict)

    def raw_loc(self, loc: Loc) -> Loc:
        if len(loc) > 1 and loc[0] in self.index and isinstance(loc[1], int):
            return (loc[0], self.index[loc[0]][loc[1]], *loc[2:])
        return loc

    def also_known(self, kind: str) -> set[str] | None:
        return self.known.get(kind, set())


def cross_check(config: Config, view: View) -> list[tuple[Loc, str]]:
    """References and uniqueness across the file, as (location, what is wrong).

    Locations index the entries of ``config`` (see :meth:`View.raw_loc` for the file's).
    """
    problems: list[tuple[Loc, str]] = []

    def add(loc: Loc, msg: str) -> None:
        problems.append((loc, msg))

    if not config.sites and "sites" not in view.known:  # (not when every site failed)
        add(("sites",), "at least one site is needed")
    site_ids = [s.id for s in config.sites]
    other_sites, other_tags = view.also_known("sites"), view.also_known("tags")
    other_channels = view.also_known("channels")
    tags = {t for s in config.sites for t in s.tags}
    for kind, items in (
        ("site", config.sites),
        ("source", config.sources),
        ("channel", config.channels),
        ("subscriber", config.subscribers),
    ):
        seen: set[str] = set()
        for i, item in enumerate(items):
            if item.id in seen:
                add((kind + "s", i, "id"), f"duplicate {kind} id {item.id!r}")
            seen.add(item.id)

    def check_site_ref(loc: Loc, ref: str) -> None:
        if other_sites is None or ref in other_sites:
            return  # a site that failed validation (already reported)
        if ref not in site_ids:
            known = ", ".join([*site_ids, *sorted(other_sites - set(site_ids))])
            add(loc, f"unknown site {ref!r} (known: {known})")

    def check_selector(loc: Loc, sel: str) -> None:
        """A choice of sites: a site id, ``tag:NAME`` or ``all``."""
        if sel == "all":
            return
        if sel.startswith("tag:"):
            if other_tags is not None and sel[4:] not in tags | other_tags:
                add(loc, f"no site has tag {sel[4:]!r}")
        else:
            check_site_ref(loc, sel)

    for i, src in enumerate(config.sources):
        if isinstance(src, FileDropSource):
            if src.site is not None:
                check_site_ref(("sources", i, "site"), src.site)
            for station, site_id in src.stations.items():
                check_site_ref(("sources", i, "stations", station), site_id)
        elif src.sites != "all":
            for site_id in src.sites:
                check_site_ref(("sources", i, "sites"), site_id)
    channel_ids = {c.id for c in config.channels} | {"stdout"} | (other_channels or set())

    def channel_known(ref: str) -> bool:
        return ref in channel_ids or other_channels is None

    for i, sub in enumerate(config.subscribers):
        if sub.id.startswith(BOT_SUBSCRIBER_PREFIX):
            add(
                ("subscribers", i, "id"),
                f"ids starting {BOT_SUBSCRIBER_PREFIX!r} are kept for the bot's followers "
                f"(got {sub.id!r})",
            )
        if not channel_known(sub.channel):
            add(
                ("subscribers", i, "channel"),
                f"unknown channel {sub.channel!r} (known: {', '.join(sorted(channel_ids))})",
            )
        else:
            ch = next((c for c in config.channels if c.id == sub.channel), None)
            if isinstance(ch, EmailChannel | FolderChannel) and not sub.address:
                add(("subscribers", i, "address"), "an email address is needed for this channel")
            if sub.address and ch is not None and isinstance(ch, EmailChannel | FolderChannel):
                if not re.match(r"^[^@\s<>,;]+@[^@\s<>,;]+\.[^@\s<>,;]+$", sub.address):
                    add(("subscribers", i, "address"), f"not an email address: {sub.address!r}")
            if isinstance(ch, MatrixChannel):
                check_matrix_address(add, ("subscribers", i, "address"), sub.address, ch)
        for sel in sub.sites:
            check_selector(("subscribers", i, "sites"), sel)
    for code, granted in config.bot.join_codes.items():
        check_selector(("bot", "join_codes", code), granted)  # a site, "tag:NAME" or "all"
    if not channel_known(config.bot.channel):
        add(
            ("bot", "channel"),
            f"unknown channel {config.bot.channel!r} (known: {', '.join(sorted(channel_ids))})",
        )
    for i, rule_path in enumerate(config.rules):
        if not rule_path.exists():
            add(("rules", i), f"rule path not found: {rule_path}")
    if config.model is not None and not config.model.is_file():
        add(("model",), f"model file not found: {config.model} (write one with fogwatch learn)")
    if (problem := instance_problem(config)) is not None:
        add(("instance", "count"), problem)
    if config.web is not None and not is_loopback_host(config.web.host) and not config.web.token:
        add(("web", "token"), f"web.host {config.web.host} is not loopback: a token is needed")
    return problems

"""Reading a config file: YAML with line marks, ``${NAME}`` from the environment,
validation into :class:`~notifier.core.config.Config`, paths resolved against the file's
folder, and cross-checks — every problem reported at once as ``file:line``.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

from pydantic import (
    ValidationError,
)

from notifier.core.config import (
    BOT_SUBSCRIBER_PREFIX,
    Config,
    EmailChannel,
    FileDropSource,
    FolderChannel,
    TextChannel,
)
from notifier.core.errors import ConfigError, ConfigProblem
from notifier.core.yamlio import MarkedDict, MarkedList, expand_env, line_of, load_yaml

__all__ = ["load_config", "problems_from_validation"]


def _expand_all(
    node: Any,
    loc: tuple[Any, ...],
    missing: list[tuple[tuple[Any, ...], str]],
    expanded: set[tuple[Any, ...]],
) -> Any:
    if isinstance(node, MarkedDict):
        for key in list(node):
            node[key] = _expand_all(node[key], (*loc, key), missing, expanded)
    elif isinstance(node, MarkedList):
        for i, item in enumerate(node):
            node[i] = _expand_all(item, (*loc, i), missing, expanded)
    elif isinstance(node, str) and "${" in node:
        try:
            value = expand_env(node)
        except KeyError as exc:
            missing.append((loc, exc.args[0]))
        else:
            expanded.add(loc)
            return value
    return node


def _resolve(base: Path, value: Path) -> Path:
    return value if value.is_absolute() else (base / value).resolve()


def _loc_text(loc: tuple[Any, ...]) -> str:
    parts = []
    for part in loc:
        if isinstance(part, int):
            parts.append(f"[{part}]")
        else:
            parts.append(("." if parts else "") + str(part))
    return "".join(parts)


def _raw_loc(raw: Any, loc: tuple[Any, ...]) -> tuple[Any, ...]:
    """``loc`` without the validator's own labels (union tags), as keys of the file."""
    out: list[Any] = []
    node: Any = raw
    for k, part in enumerate(loc):
        if isinstance(node, dict) and part not in node:
            nxt = loc[k + 1] if k + 1 < len(loc) else None
            if nxt is not None and nxt in node:
                continue  # a tag pydantic adds for the member of a union
            out.extend(loc[k:])  # a missing key: name it as it is
            break
        if isinstance(node, dict | list):
            try:
                node = node[part]
            except (KeyError, IndexError, TypeError):
                node = None
        out.append(part)
    return tuple(out)


def problems_from_validation(
    path: str,
    raw: Any,
    exc: ValidationError,
    prefix: str = "",
    secret_locs: set[tuple[Any, ...]] = frozenset(),  # type: ignore[assignment]
) -> list[ConfigProblem]:
    """Turn pydantic's errors into located problems, one per error.

    A value that came from the environment is never echoed: it may be a secret.
    """
    out = []
    for err in exc.errors(include_url=False):
        loc = tuple(p for p in err["loc"] if p not in ("function-after", "function-before"))
        shown = _raw_loc(raw, loc)
        msg = err["msg"].removeprefix("Value error, ")
        where = _loc_text(shown)
        got = ""
        if err["type"] not in ("missing",) and not isinstance(err.get("input"), dict | list):
            got = f" (got {err.get('input')!r})"
        if err["type"] == "extra_forbidden":
            msg = "unknown key"
            got = ""
        if _raw_loc(raw, loc) in secret_locs:
            got = " (value from the environment, not shown)"
        out.append(ConfigProblem(path, line_of(raw, loc), f"{prefix}{where}: {msg}{got}"))
    return out


def load_config(path: str | Path) -> Config:
    """Load and validate a config file; raise ``ConfigError`` listing every problem."""
    path = Path(path).resolve()
    raw = load_yaml(path)
    if raw is None:
        raw = MarkedDict()
        raw.key_lines = {}
    if not isinstance(raw, dict):
        raise ConfigError(ConfigProblem(str(path), 1, "expected a mapping at the top level"))
    missing: list[tuple[tuple[Any, ...], str]] = []
    expanded: set[tuple[Any, ...]] = set()
    _expand_all(raw, (), missing, expanded)
    problems = [
        ConfigProblem(
            str(path),
            line_of(raw, loc),
            f"{_loc_text(loc)}: environment variable {name} is not set",
        )
        for loc, name in missing
    ]
    if problems:
        raise ConfigError(problems)
    try:
        config = Config.model_validate({**raw, "path": path})
    except ValidationError as exc:
        raise ConfigError(
            problems_from_validation(str(path), raw, exc, secret_locs=expanded)
        ) from exc
    config = _resolve_paths(config)
    problems = _cross_check(config, raw)
    if problems:
        raise ConfigError(problems)
    return config


def _resolve_paths(config: Config) -> Config:
    base = config.base_dir
    sources = tuple(
        s.model_copy(update={"path": _resolve(base, s.path)})
        if isinstance(s, FileDropSource)
        else s
        for s in config.sources
    )
    channels = []
    for ch in config.channels:
        if isinstance(ch, FolderChannel):
            ch = ch.model_copy(update={"path": _resolve(base, ch.path)})
        elif isinstance(ch, TextChannel) and ch.file is not None:
            ch = ch.model_copy(update={"file": _resolve(base, ch.file)})
        channels.append(ch)
    rules = tuple(_resolve(base, r) for r in config.rules)
    store = config.store
    if store.url and store.url.startswith("sqlite:///") and not store.url.startswith("sqlite:////"):
        rel = store.url.removeprefix("sqlite:///")
        if rel and rel != ":memory:":
            store = store.model_copy(update={"url": f"sqlite:///{_resolve(base, Path(rel))}"})
    return config.model_copy(
        update={"sources": sources, "channels": tuple(channels), "rules": rules, "store": store}
    )


def _cross_check(config: Config, raw: Any) -> list[ConfigProblem]:
    path = str(config.path)
    problems: list[ConfigProblem] = []

    def add(loc: tuple[Any, ...], msg: str) -> None:
        problems.append(ConfigProblem(path, line_of(raw, loc), f"{_loc_text(loc)}: {msg}"))

    if not config.sites:
        add(("sites",), "at least one site is needed")
    site_ids = [s.id for s in config.sites]
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

    def check_site_ref(loc: tuple[Any, ...], ref: str) -> None:
        if ref not in site_ids:
            add(loc, f"unknown site {ref!r} (known: {', '.join(site_ids)})")

    for i, src in enumerate(config.sources):
        if isinstance(src, FileDropSource):
            if src.site is not None:
                check_site_ref(("sources", i, "site"), src.site)
            for station, site_id in src.stations.items():
                check_site_ref(("sources", i, "stations", station), site_id)
        elif src.sites != "all":
            for site_id in src.sites:
                check_site_ref(("sources", i, "sites"), site_id)
    channel_ids = {c.id for c in config.channels} | {"stdout"}
    for i, sub in enumerate(config.subscribers):
        if sub.id.startswith(BOT_SUBSCRIBER_PREFIX):
            add(
                ("subscribers", i, "id"),
                f"ids starting {BOT_SUBSCRIBER_PREFIX!r} are kept for the bot's followers "
                f"(got {sub.id!r})",
            )
        if sub.channel not in channel_ids:
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
        for sel in sub.sites:
            if sel == "all":
                continue
            if sel.startswith("tag:"):
                if sel[4:] not in tags:
                    add(("subscribers", i, "sites"), f"no site has tag {sel[4:]!r}")
            else:
                check_site_ref(("subscribers", i, "sites"), sel)
    for code, site_id in config.bot.join_codes.items():
        check_site_ref(("bot", "join_codes", code), site_id)
    if config.bot.channel not in channel_ids:
        add(
            ("bot", "channel"),
            f"unknown channel {config.bot.channel!r} (known: {', '.join(sorted(channel_ids))})",
        )
    for i, rule_path in enumerate(config.rules):
        if not rule_path.exists():
            add(("rules", i), f"rule path not found: {rule_path}")
    return problems

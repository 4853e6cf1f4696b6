"""Warnings about a config that works but should change: a secret written literally in
the file (it belongs in the environment, as ``${NAME}``) and a key no longer used.

Each warning names ``file:line`` and what to write instead, never the secret's value.
They never make a file invalid.
"""

from __future__ import annotations

import re
from typing import Any
from urllib.parse import parse_qsl, urlsplit

from notifier.core.errors import ConfigProblem
from notifier.core.redact import SECRET_NAME as _SECRET_NAME
from notifier.core.yamlio import Expansion, Loc, line_of, loc_text

__all__ = ["RETIRED_KEYS", "literal_secrets", "retire_keys"]

#: Keys a config may still carry from an earlier version: ignored, with a warning why.
RETIRED_KEYS: dict[Loc, str] = {
    ("schedule", "morning_summary_local_time"): (
        "no longer used, ignored: watch news held in a subscriber's quiet_hours goes as "
        "one summary when those quiet hours end, in the subscriber's own zone; "
        "delete this line"
    ),
}


def retire_keys(path: str, raw: Any) -> list[ConfigProblem]:
    """Take out keys no longer used (so an old file still loads), with a warning each."""
    out = []
    for loc, why in RETIRED_KEYS.items():
        *parents, key = loc
        node = raw
        for part in parents:
            node = node.get(part) if isinstance(node, dict) else None
        if isinstance(node, dict) and key in node:
            out.append(ConfigProblem(path, line_of(raw, loc), f"{loc_text(loc)}: {why}"))
            del node[key]
    return out


_PLACEHOLDER = re.compile(r"^\{[a-z_]+\}$")  # {lat}, {lon}, {site}: filled in per site


def _env_name(*parts: Any) -> str:
    words = [re.sub(r"[^A-Za-z0-9]+", "_", str(p)).strip("_").upper() for p in parts]
    return "_".join(w for w in words if w)


def _from_env(text: Any) -> bool:
    return isinstance(text, str) and "${" in text


def literal_secrets(path: str, raw: Any, found: Expansion) -> list[ConfigProblem]:
    """A warning for each secret written in the file rather than read from the environment:
    a webhook or bot ``secret``, an SMTP ``password``, a URL with a password or a
    credential in its query, a credential header. The value itself is never shown."""
    out: list[ConfigProblem] = []

    def warn(loc: Loc, what: str, write: str, name: str) -> None:
        out.append(
            ConfigProblem(
                path,
                line_of(raw, loc),
                f"{loc_text(loc)}: {what} is written in the file; secrets belong in the "
                f"environment: write {write} and set {name} in fogwatch's environment",
            )
        )

    places: list[tuple[Loc, dict[Any, Any], str]] = []
    for section in ("channels", "sources"):
        items = raw.get(section)
        for i, item in enumerate(items if isinstance(items, list) else []):
            if isinstance(item, dict):
                places.append(((section, i), item, str(item.get("id") or f"{section}{i}")))
    for section, owner in (("bot", "bot"), ("store", "db"), ("web", "web"), ("matrix", "matrix")):
        if isinstance(raw.get(section), dict):
            places.append(((section,), raw[section], owner))
    for loc, item, owner in places:
        for key in ("secret", "password", "token", "access_token"):
            value = found.written.get((*loc, key), item.get(key))
            if item.get(key) in (None, "") or _from_env(value):
                continue
            name = _env_name("FOGWATCH", owner, key)
            warn(
                (*loc, key),
                f"{'an' if key[0] in 'aeiou' else 'a'} {key}",
                f'{key}: "${{{name}}}"',
                name,
            )
        url = found.written.get((*loc, "url"), item.get("url"))
        if isinstance(url, str):
            for what, write, name in _url_secrets(url, owner):
                warn((*loc, "url"), what, write, name)
        headers = item.get("headers")
        for header, written in (headers if isinstance(headers, dict) else {}).items():
            value = found.written.get((*loc, "headers", header), written)
            if not _SECRET_NAME.search(str(header)) or value in (None, "") or _from_env(value):
                continue
            word = "token" if str(header).lower() == "authorization" else str(header)
            name = _env_name("FOGWATCH", owner, word)
            scheme = str(value).split(" ", 1)[0] if " " in str(value) else ""
            write = f'{header}: "{scheme + " " if scheme else ""}${{{name}}}"'
            warn((*loc, "headers", header), f"a credential in header {header}", write, name)
    return out


def _url_secrets(url: str, owner: str) -> list[tuple[str, str, str]]:
    """(what, how to write it, variable) for each credential written in ``url``."""
    try:
        parts = urlsplit(url)
        password = parts.password
    except ValueError:
        return []
    out = []
    if password and not _from_env(password):
        name = _env_name("FOGWATCH", owner, "password")
        user = parts.username or "USER"
        out.append(("a password in the URL", f"{user}:${{{name}}}@ in the URL", name))
    for key, value in parse_qsl(parts.query, keep_blank_values=False):
        if not _SECRET_NAME.search(key) or _from_env(value) or _PLACEHOLDER.match(value):
            continue
        name = _env_name("FOGWATCH", owner, key)
        out.append(
            (f"a credential in the URL's query ({key}=…)", f"{key}=${{{name}}} in the URL", name)
        )
    return out

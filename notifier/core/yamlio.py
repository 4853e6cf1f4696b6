"""YAML loading that remembers where each value came from.

``load_yaml`` returns plain dicts and lists (subclasses ``MarkedDict`` / ``MarkedList``)
that carry the 1-based line of every key and item, so that validation errors can be
reported as ``path:line: ...``. Only ``yaml.SafeLoader`` is used: no tags, no objects.
"""

from __future__ import annotations

import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from notifier.core.errors import ConfigError, ConfigProblem

__all__ = [
    "Expansion",
    "Loc",
    "MarkedDict",
    "MarkedList",
    "expand_all",
    "expand_env",
    "expand_env_all",
    "line_of",
    "load_yaml",
    "loc_text",
]

#: A place in a loaded file: the keys and list indexes from its top (``("sites", 0, "id")``).
Loc = tuple[Any, ...]


class MarkedDict(dict):  # type: ignore[type-arg]
    """A dict that knows the line of itself (``line``) and of each key (``key_lines``)."""

    line: int | None = None
    key_lines: dict[Any, int]


class MarkedList(list):  # type: ignore[type-arg]
    """A list that knows the line of itself and of each item."""

    line: int | None = None
    item_lines: list[int]


class _Loader(yaml.SafeLoader):
    pass


def _construct_mapping(loader: _Loader, node: yaml.MappingNode) -> MarkedDict:
    loader.flatten_mapping(node)
    out = MarkedDict()
    out.line = node.start_mark.line + 1
    out.key_lines = {}
    for key_node, value_node in node.value:
        key = loader.construct_object(key_node, deep=True)
        if key in out:
            raise yaml.constructor.ConstructorError(
                None, None, f"duplicate key {key!r}", key_node.start_mark
            )
        out[key] = loader.construct_object(value_node, deep=True)
        out.key_lines[key] = key_node.start_mark.line + 1
    return out


def _construct_sequence(loader: _Loader, node: yaml.SequenceNode) -> MarkedList:
    out = MarkedList(loader.construct_object(child, deep=True) for child in node.value)
    out.line = node.start_mark.line + 1
    out.item_lines = [child.start_mark.line + 1 for child in node.value]
    return out


_Loader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping)
_Loader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_SEQUENCE_TAG, _construct_sequence)


def load_yaml(path: str | os.PathLike[str]) -> Any:
    """Read ``path`` with line marks; a syntax error becomes a ``ConfigError`` at its line."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise ConfigError(ConfigProblem(str(path), None, "file not found")) from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(ConfigProblem(str(path), None, f"cannot read: {exc}")) from exc
    try:
        return yaml.load(text, Loader=_Loader)  # noqa: S506 - _Loader is a SafeLoader
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark else None
        what = exc.problem or str(exc)
        raise ConfigError(ConfigProblem(str(path), line, f"YAML syntax: {what}")) from exc
    except yaml.YAMLError as exc:
        raise ConfigError(ConfigProblem(str(path), None, f"YAML: {exc}")) from exc


def line_of(data: Any, loc: Sequence[Any]) -> int | None:
    """The line of the deepest element of ``data`` reached by the path ``loc``."""
    line = getattr(data, "line", None)
    node = data
    for part in loc:
        if isinstance(node, MarkedDict):
            if part not in node:
                continue  # a validator's own label (e.g. a union tag), not a key
            line = node.key_lines.get(part, line)
            node = node[part]
        elif isinstance(node, MarkedList) and isinstance(part, int) and 0 <= part < len(node):
            line = node.item_lines[part]
            node = node[part]
        else:
            break
    return line


# ``${NAME}``, or ``${NAME:-default}``: the default is used when NAME is unset or empty,
# as in the POSIX shell's parameter expansion (IEEE Std 1003.1, 2.6.2 "Parameter
# Expansion"); a default cannot contain "}"
_ENV = re.compile(r"\$\{([A-Za-z_][A-Za-z0-9_]*)(?::-([^}]*))?\}")


def expand_env_all(value: str, environ: Mapping[str, str] | None = None) -> tuple[str, list[str]]:
    """Replace each ``${NAME}`` that is set, and each ``${NAME:-default}`` (by NAME when it
    is set and not empty, else by the default); also return the names that are missing.

    Every missing name is found, not only the first (each once, in order of appearance);
    a missing one is left as written in the returned text.

    >>> expand_env_all("${A}:${B}:${C}:${B}", {"A": "1"})
    ('1:${B}:${C}:${B}', ['B', 'C'])
    >>> expand_env_all("${A:-x}/${B:-}/${C:-y}", {"A": "1", "C": ""})
    ('1//y', [])
    """
    env = os.environ if environ is None else environ
    missing: list[str] = []

    def repl(match: re.Match[str]) -> str:
        name, default = match.group(1), match.group(2)
        if default is not None:
            return env.get(name) or default
        if name in env:
            return env[name]
        if name not in missing:
            missing.append(name)
        return match.group(0)

    return _ENV.sub(repl, value), missing


def expand_env(value: str, environ: Mapping[str, str] | None = None) -> str:
    """Replace each ``${NAME}`` with the environment variable (``${NAME:-default}`` falls
    back to its default); a missing one is an error.

    Raises ``KeyError`` whose arguments name every missing variable (the first is
    ``args[0]``); config loading uses :func:`expand_env_all` and reports each at its line.
    """
    text, missing = expand_env_all(value, environ)
    if missing:
        raise KeyError(*missing)
    return text


@dataclass
class Expansion:
    """What ``${NAME}`` expansion found, by location in the file."""

    missing: dict[Loc, list[str]] = field(default_factory=dict)  # names not set
    expanded: set[Loc] = field(default_factory=set)  # values read from the environment
    written: dict[Loc, str] = field(default_factory=dict)  # the text before expansion

    def is_missing(self, loc: Loc) -> bool:
        return any(loc[: len(m)] == m for m in self.missing)


def expand_all(node: Any, loc: Loc, found: Expansion) -> Any:
    if isinstance(node, MarkedDict):
        for key in list(node):
            node[key] = expand_all(node[key], (*loc, key), found)
    elif isinstance(node, MarkedList):
        for i, item in enumerate(node):
            node[i] = expand_all(item, (*loc, i), found)
    elif isinstance(node, str) and "${" in node:
        value, missing = expand_env_all(node)
        found.written[loc] = node
        if missing:
            found.missing[loc] = missing
            return node  # left as written: validation skips this place
        found.expanded.add(loc)
        return value
    return node


def loc_text(loc: Loc) -> str:
    """``sites[0].id``: a place in the file as a person reads it."""
    parts = []
    for part in loc:
        if isinstance(part, int):
            parts.append(f"[{part}]")
        else:
            parts.append(("." if parts else "") + str(part))
    return "".join(parts)

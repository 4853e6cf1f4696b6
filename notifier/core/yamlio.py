"""YAML loading that remembers where each value came from.

``load_yaml`` returns plain dicts and lists (subclasses ``MarkedDict`` / ``MarkedList``)
that carry the 1-based line of every key and item, so that validation errors can be
reported as ``path:line: ...``. Only ``yaml.SafeLoader`` is used: no tags, no objects.

Two bounds keep a hostile or broken file from holding a CPU for minutes ("billion laughs",
an anchor aliased within an anchor, nine levels deep): a file over :data:`MAX_FILE_BYTES`
is refused before it is read, and a document whose aliases would add more than
:data:`MAX_ALIAS_NODES` nodes beyond those written is refused before it is built, at the
line of the costliest alias. Both checks take well under a second.
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
from notifier.core.redact import MASK, redact

__all__ = [
    "MAX_ALIAS_NODES",
    "MAX_FILE_BYTES",
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
    "without_env_value",
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


#: a config or rule file larger than this is refused unread (the shipped ones are ~10 kB)
MAX_FILE_BYTES = 2 * 1024 * 1024
#: how many nodes aliases may add beyond those written (a shared block reused a few times
#: adds tens; an alias bomb adds hundreds of millions)
MAX_ALIAS_NODES = 10_000


class _Loader(yaml.SafeLoader):
    """A SafeLoader that remembers where each alias stands and which node it names."""

    def __init__(self, stream: str) -> None:
        super().__init__(stream)
        self.aliases: list[tuple[int, yaml.Node]] = []

    def compose_node(self, parent: yaml.Node | None, index: Any) -> yaml.Node:
        if self.check_event(yaml.AliasEvent):
            line = self.peek_event().start_mark.line + 1
            node = super().compose_node(parent, index)
            self.aliases.append((line, node))
            return node
        return super().compose_node(parent, index)


def _children(node: yaml.Node) -> list[yaml.Node]:
    if isinstance(node, yaml.MappingNode):
        return [n for pair in node.value for n in pair]
    if isinstance(node, yaml.SequenceNode):
        return list(node.value)
    return []


class _Loop(Exception):
    pass


def _alias_problem(root: yaml.Node, aliases: list[tuple[int, yaml.Node]]) -> tuple[int, str] | None:
    """(line, why) when the aliases would blow the document up, else None.

    Sizes are counted once per distinct node (memoised), so the check is linear in the
    file even when the document it describes is astronomically large.
    """
    size: dict[int, int] = {}
    visiting: set[int] = set()

    def expanded(node: yaml.Node) -> int:
        key = id(node)
        if key in size:
            return size[key]
        if key in visiting:
            raise _Loop  # an anchor that contains an alias to itself
        visiting.add(key)
        total = 1 + sum(expanded(child) for child in _children(node))
        visiting.discard(key)
        size[key] = total
        return total

    try:
        total = expanded(root)
    except _Loop:
        line = aliases[0][0] if aliases else None
        return line or 1, "an alias refers to the node that contains it (a loop)"
    extra = total - len(size)
    if extra <= MAX_ALIAS_NODES:
        return None
    line, _ = max(aliases, key=lambda a: size.get(id(a[1]), 0))
    return line, (
        f"aliases expand the document by {extra:,} nodes, over the limit of "
        f"{MAX_ALIAS_NODES:,} (an alias bomb?); write the repeated parts out instead"
    )


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
        size = path.stat().st_size
        if size > MAX_FILE_BYTES:
            raise ConfigError(
                ConfigProblem(
                    str(path),
                    None,
                    f"file of {size:,} bytes is over the {MAX_FILE_BYTES:,}-byte "
                    "limit for a config or rule file",
                )
            )
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise ConfigError(ConfigProblem(str(path), None, "file not found")) from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(ConfigProblem(str(path), None, f"cannot read: {exc}")) from exc
    loader = _Loader(text)
    try:
        root = loader.get_single_node()
        if root is None:
            return None
        problem = _alias_problem(root, loader.aliases)
        if problem is not None:
            raise ConfigError(ConfigProblem(str(path), *problem))
        return loader.construct_document(root)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark else None
        what = exc.problem or str(exc)
        raise ConfigError(ConfigProblem(str(path), line, f"YAML syntax: {what}")) from exc
    except yaml.YAMLError as exc:
        raise ConfigError(ConfigProblem(str(path), None, f"YAML: {exc}")) from exc
    except RecursionError as exc:
        raise ConfigError(ConfigProblem(str(path), None, "YAML nested too deeply")) from exc
    finally:
        loader.dispose()


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
    values: set[str] = field(default_factory=set)  # what the environment gave (secrets, maybe)

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
        env = os.environ
        found.values.update(env[name] for name, _ in _ENV.findall(node) if env.get(name))
        return value
    return node


def without_env_value(message: str, raw: Any, loc: Loc) -> str:
    """``message`` with the value at ``loc`` (read from the environment) not shown."""
    node = raw
    for part in loc:
        try:
            node = node[part]
        except (KeyError, IndexError, TypeError):
            return redact(message)
    if isinstance(node, str) and node:
        for shown in (repr(node), node):
            message = message.replace(shown, f"{MASK} (value from the environment, not shown)")
    return redact(message)


def loc_text(loc: Loc) -> str:
    """``sites[0].id``: a place in the file as a person reads it."""
    parts = []
    for part in loc:
        if isinstance(part, int):
            parts.append(f"[{part}]")
        else:
            parts.append(("." if parts else "") + str(part))
    return "".join(parts)

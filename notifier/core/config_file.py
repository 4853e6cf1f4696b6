"""Reading a config file: YAML with line marks, ``${NAME}`` from the environment,
validation into :class:`~notifier.core.config.Config`, paths resolved against the file's
folder, and cross-checks — every problem reported at once as ``file:line``.

Every missing ``${NAME}`` is reported (each at its line), and the file is validated and
cross-checked all the same, so one run of ``fogwatch check`` shows everything wrong with
it. Entries that fail validation are left out of the cross-checks (and their ids still
count as known, so nothing is reported twice).

Besides errors, :func:`read_config` returns *warnings*: a secret or password written
literally in the file (it belongs in the environment, as ``${NAME}``) and a key that is
no longer used (:mod:`notifier.core.config_warnings`). :func:`load_config` logs each
warning at WARNING, so the service shows them; ``fogwatch check`` prints them. They never
make a file invalid.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from pydantic import (
    ValidationError,
)

from notifier.core.config import (
    CapChannel,
    Config,
    FileDropSource,
    FolderChannel,
    TextChannel,
)
from notifier.core.config_checks import View, cross_check
from notifier.core.config_hints import did_you_mean, folder_problems
from notifier.core.config_warnings import literal_secrets, retire_keys
from notifier.core.errors import ConfigError, ConfigProblem
from notifier.core.redact import remember_env_value
from notifier.core.sites_file import read_sites_file
from notifier.core.yamlio import (
    Expansion,
    Loc,
    MarkedDict,
    MarkedList,
    expand_all,
    line_of,
    load_yaml,
    loc_text,
    without_env_value,
)

__all__ = ["check_config", "load_config", "problems_from_validation", "read_config"]

log = logging.getLogger(__name__)

_SECRET_KEYS = ("secret", "password")


def _resolve(base: Path, value: Path) -> Path:
    return value if value.is_absolute() else (base / value).resolve()


def _raw_loc(raw: Any, loc: Loc) -> Loc:
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


def _error_loc(err: Any) -> Loc:
    return tuple(p for p in err["loc"] if p not in ("function-after", "function-before"))


def problems_from_validation(
    path: str,
    raw: Any,
    exc: ValidationError,
    prefix: str = "",
    secret_locs: set[Loc] = frozenset(),  # type: ignore[assignment]
    skip: Any = None,
) -> list[ConfigProblem]:
    """Turn pydantic's errors into located problems, one per error.

    A value that came from the environment is never echoed: it may be a secret. ``skip``
    (a predicate on the location in the file) leaves out errors already reported, such
    as a value whose environment variable is not set.
    """
    out = []
    for err in exc.errors(include_url=False):
        loc = _error_loc(err)
        shown = _raw_loc(raw, loc)
        if skip is not None and skip(shown):
            continue
        msg = err["msg"].removeprefix("Value error, ")
        where = loc_text(shown)
        got = ""
        if err["type"] not in ("missing",) and not isinstance(err.get("input"), dict | list):
            got = f" (got {err.get('input')!r})"
            if f"got: {err.get('input')!r}" in msg:
                got = ""  # the validator's message shows it already
        if err["type"] == "extra_forbidden":
            hint = did_you_mean(loc)
            msg = f"unknown key ({hint})" if hint else "unknown key"
            got = ""
        if shown in secret_locs:
            got = " (value from the environment, not shown)"
        elif shown and shown[-1] in _SECRET_KEYS:
            got = ""  # a secret written in the file is not echoed either
        out.append(ConfigProblem(path, line_of(raw, loc), f"{prefix}{where}: {msg}{got}"))
    return out


def load_config(path: str | Path) -> Config:
    """Load and validate a config file; raise ``ConfigError`` listing every problem.

    Warnings (a secret written in the file, a key no longer used) are logged at WARNING,
    whether or not the file is valid.
    """
    config, problems, warnings = _read(path)
    for warning in warnings:
        log.warning("%s", warning)
    if config is None:
        raise ConfigError(problems)
    return config


def read_config(path: str | Path) -> tuple[Config, list[ConfigProblem]]:
    """The validated config and its warnings; ``ConfigError`` lists every problem.

    A problem is anything that makes the file unusable: a missing ``${NAME}`` (each one),
    a value the models refuse, a reference to something not configured. A warning is
    something that works but should change.
    """
    config, problems, warnings = _read(path)
    if config is None:
        raise ConfigError(problems)
    return config, warnings


def check_config(
    path: str | Path,
) -> tuple[Config | None, list[ConfigProblem], list[ConfigProblem]]:
    """What ``fogwatch check`` reports, in one round: (the config as far as it validated,
    or ``None``; every problem, including a drop folder that does not exist; the
    warnings). The config is returned even with problems, so that its rule files can be
    checked in the same run."""
    return _read(path, check=True)


def _read(
    path: str | Path, check: bool = False
) -> tuple[Config | None, list[ConfigProblem], list[ConfigProblem]]:
    """(the config, or ``None`` when there are problems unless ``check``; the problems;
    the warnings)."""
    path = Path(path).resolve()
    raw = load_yaml(path)
    if raw is None:
        raw = MarkedDict()
        raw.key_lines = {}
    if not isinstance(raw, dict):
        raise ConfigError(ConfigProblem(str(path), 1, "expected a mapping at the top level"))
    found = Expansion()
    expand_all(raw, (), found)
    for value in found.values:  # from now on cut from every message and log line
        remember_env_value(value)
    warnings = sorted(
        retire_keys(str(path), raw) + literal_secrets(str(path), raw, found),
        key=lambda p: p.line or 0,
    )
    problems = [
        ConfigProblem(
            str(path),
            line_of(raw, loc),
            f"{loc_text(loc)}: environment variable {name} is not set",
        )
        for loc, names in found.missing.items()
        for name in names
    ]
    problems += _with_sites_file(path, raw)
    config, found_problems, view = _validate(path, raw, found)
    problems += found_problems
    if check and config is not None:
        sources = view.index.get("sources", list(range(len(config.sources))))
        problems += folder_problems(str(path), raw, config, sources, skip=found.is_missing)
    # in the order of the file (a problem without a line first)
    problems.sort(key=lambda p: p.line or 0)
    if problems or config is None:
        if not problems:  # pragma: no cover - a failed validation always says why
            problems = [ConfigProblem(str(path), None, "invalid config")]
        return (config if check else None), problems, warnings
    return config, [], warnings


def _with_sites_file(path: Path, raw: dict[Any, Any]) -> list[ConfigProblem]:
    """The sites of ``sites_file`` put after the config's own ``sites`` (as validated
    sites: they are not validated again); the problems of the table. In the config's
    checks a table's site stands at the ``sites_file`` line."""
    name = raw.get("sites_file")
    if name is None:
        return []
    key_lines: dict[Any, int] = getattr(raw, "key_lines", {})
    line = key_lines.get("sites_file", 0)  # 0: no line known
    if not isinstance(name, str) or not name.strip():
        return [ConfigProblem(str(path), line, f"sites_file: expected a file name, got: {name!r}")]
    table, problems = read_sites_file(_resolve(path.parent, Path(name)))
    written = raw.get("sites", [])
    if not isinstance(written, list):
        return problems  # the config's own error says what is wrong with ``sites``
    sites = MarkedList([*written, *table])
    sites.line = getattr(written, "line", None) or line
    sites.item_lines = [*getattr(written, "item_lines", [line] * len(written))]
    sites.item_lines += [line] * len(table)
    raw["sites"] = sites
    key_lines.setdefault("sites", line)
    return problems


def _validate(
    path: Path, raw: Any, found: Expansion
) -> tuple[Config | None, list[ConfigProblem], View]:
    """Validate and cross-check; on a validation error, cross-check what did validate."""
    view = View(raw)
    try:
        config = Config.model_validate({**raw, "path": path})
    except ValidationError as exc:
        problems = problems_from_validation(
            str(path), raw, exc, secret_locs=found.expanded, skip=found.is_missing
        )
        pruned = _prune(raw, exc)
        if pruned is None:
            return None, problems, view
        view = pruned
        try:
            config = Config.model_validate({**view.data, "path": path})
        except ValidationError:
            return None, problems, view
    else:
        problems = []
    config = _resolve_paths(config)
    for loc, message in cross_check(config, view):
        raw_loc = view.raw_loc(loc)
        if found.is_missing(raw_loc):
            continue
        if raw_loc in found.expanded:  # never echo what the environment gave
            message = without_env_value(message, raw, raw_loc)
        problems.append(
            ConfigProblem(str(path), line_of(raw, raw_loc), f"{loc_text(raw_loc)}: {message}")
        )
    return config, problems, view


_LISTS = ("sites", "sources", "channels", "subscribers", "rules")


def _ids_and_tags(items: Iterable[Any]) -> tuple[set[str] | None, set[str] | None]:
    ids: set[str] | None = set()
    tags: set[str] | None = set()
    for item in items:
        item_id = item.get("id") if isinstance(item, dict) else None
        if isinstance(item_id, str) and ids is not None:
            ids.add(item_id)
        else:
            ids = None
        item_tags = item.get("tags", []) if isinstance(item, dict) else None
        if isinstance(item_tags, list) and tags is not None:
            tags.update(str(t) for t in item_tags)
        else:
            tags = None
    return ids, tags


def _prune(raw: Any, exc: ValidationError) -> View | None:
    """The file without the entries (or sections) that failed validation; ``None`` when
    an error cannot be pinned to one of them."""
    bad_items: dict[str, set[int]] = {}
    bad_keys: set[Any] = set()
    for err in exc.errors(include_url=False):
        loc = _error_loc(err)
        if not loc:
            return None
        top = loc[0]
        if (
            top in _LISTS
            and len(loc) > 1
            and isinstance(loc[1], int)
            and isinstance(raw.get(top), list)
        ):
            bad_items.setdefault(top, set()).add(loc[1])
        else:
            bad_keys.add(top)
    data = MarkedDict()
    data.line = getattr(raw, "line", None)
    data.key_lines = dict(getattr(raw, "key_lines", {}))
    view = View(data)
    for key, value in raw.items():
        if key in bad_keys:
            if key in _LISTS:
                view.known[key] = None
                if key == "sites":
                    view.known["tags"] = None
            continue
        if key not in bad_items:
            data[key] = value
            continue
        kept = MarkedList()
        kept.line = value.line
        kept.item_lines = []
        view.index[key] = []
        for i, item in enumerate(value):
            if i in bad_items[key]:
                continue
            kept.append(item)
            kept.item_lines.append(value.item_lines[i])
            view.index[key].append(i)
        ids, tags = _ids_and_tags(value[i] for i in sorted(bad_items[key]))
        view.known[key] = ids
        if key == "sites":
            view.known["tags"] = tags
        data[key] = kept
    return view


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
        if isinstance(ch, FolderChannel | CapChannel):
            ch = ch.model_copy(update={"path": _resolve(base, ch.path)})
        elif isinstance(ch, TextChannel) and ch.file is not None:
            ch = ch.model_copy(update={"file": _resolve(base, ch.file)})
        channels.append(ch)
    rules = tuple(_resolve(base, r) for r in config.rules)
    sites_file = None if config.sites_file is None else _resolve(base, config.sites_file)
    model = None if config.model is None else _resolve(base, config.model)
    store = config.store
    if store.url and store.url.startswith("sqlite:///") and not store.url.startswith("sqlite:////"):
        rel = store.url.removeprefix("sqlite:///")
        if rel and rel != ":memory:":
            store = store.model_copy(update={"url": f"sqlite:///{_resolve(base, Path(rel))}"})
    return config.model_copy(
        update={
            "sources": sources,
            "channels": tuple(channels),
            "rules": rules,
            "store": store,
            "model": model,
            "sites_file": sites_file,
        }
    )

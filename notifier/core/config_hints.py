"""Hints for a config that is almost right: the key a misspelt one was meant to be, and
the problems only ``fogwatch check`` looks for (a drop folder that does not exist).

>>> did_you_mean(("sites", 0, "elevaton_m"))
"did you mean 'elevation_m'?"
>>> did_you_mean(("schedul",))
"did you mean 'schedule'?"
>>> did_you_mean(("sites", 0, "zzz"))
''
"""

from __future__ import annotations

import difflib
import types
import typing
from collections.abc import Callable
from pathlib import Path
from typing import Any

from pydantic import BaseModel

from notifier.core.config import Config, FileDropSource
from notifier.core.errors import ConfigProblem
from notifier.core.yamlio import Loc, line_of, loc_text

__all__ = ["did_you_mean", "folder_problems", "keys_at"]


def _models_in(annotation: Any) -> list[type[BaseModel]]:
    """Every model class an annotation can hold: through unions, tuples, lists, dicts
    (their values) and ``Annotated``."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    origin = typing.get_origin(annotation)
    args = typing.get_args(annotation)
    if origin is typing.Annotated:
        return _models_in(args[0])
    if origin is dict:
        return _models_in(args[1]) if len(args) == 2 else []
    if origin in (typing.Union, types.UnionType, tuple, list, set, frozenset):
        out: list[type[BaseModel]] = []
        for arg in args:
            out += [m for m in _models_in(arg) if m not in out]
        return out
    return []


def _tag(model: type[BaseModel]) -> str | None:
    """The literal a discriminated member is chosen by (``type: filedrop``), if any."""
    field = model.model_fields.get("type")
    args = typing.get_args(field.annotation) if field is not None else ()
    return args[0] if len(args) == 1 and isinstance(args[0], str) else None


def keys_at(loc: Loc) -> list[str]:
    """The keys the config accepts beside the last part of ``loc`` (a validator's
    location: list indexes and union tags included)."""
    models: list[type[BaseModel]] = [Config]
    for part in loc[:-1]:
        if isinstance(part, int):
            continue  # an item of a list: the models are already its items'
        with_field = [m for m in models if part in m.model_fields]
        if with_field:
            models = []
            for m in with_field:
                models += [
                    x for x in _models_in(m.model_fields[part].annotation) if x not in models
                ]
            continue
        tagged = [m for m in models if _tag(m) == part]
        if tagged:
            models = tagged  # a tag pydantic adds for the member of a union
        else:
            models = []  # a place no model describes: no hint
    keys: list[str] = []
    for m in models:
        for name, field in m.model_fields.items():
            if m is Config and name == "path":
                continue  # set by the loader, not written in a file
            keys += [k for k in (field.alias or name,) if k not in keys]
    return keys


def did_you_mean(loc: Loc) -> str:
    """``did you mean 'schedule'?`` for an unknown key close to a known one (by
    :func:`difflib.get_close_matches`), or ``""``."""
    if not loc or not isinstance(loc[-1], str):
        return ""
    close = difflib.get_close_matches(loc[-1], keys_at(loc), n=1, cutoff=0.6)
    return f"did you mean {close[0]!r}?" if close else ""


def folder_problems(
    path: str, raw: Any, config: Config, index: list[int], skip: Callable[[Loc], bool]
) -> list[ConfigProblem]:
    """A file-drop source whose folder does not exist (``once`` would fail on it).

    ``index[i]`` is the position in the file of the config's i-th source (sources that
    failed validation are not in ``config``); ``skip`` leaves out a place already
    reported (a path whose environment variable is not set)."""
    out = []
    for i, src in enumerate(config.sources):
        loc = ("sources", index[i] if i < len(index) else i, "path")
        if isinstance(src, FileDropSource) and not Path(src.path).is_dir() and not skip(loc):
            what = "is not a folder" if Path(src.path).exists() else "does not exist"
            out.append(
                ConfigProblem(
                    path,
                    line_of(raw, loc),
                    f"{loc_text(loc)}: drop folder {src.path} {what} (create it, or fix the path)",
                )
            )
    return out

"""Rule explanations as text: ``{feature:.1f}`` placeholders filled from a site's values,
and the clauses whose values are unknown left out (pure: no I/O)."""

from __future__ import annotations

import re
import string
from collections.abc import Mapping
from typing import Any

import numpy as np

__all__ = ["render_template"]


_UNKNOWN = "\x00"  # stands in for an unknown value until its clause is dropped


class _SafeFormatter(string.Formatter):
    def get_value(self, key: Any, args: Any, kwargs: Any) -> Any:
        # only the values the template names are read (a site's features are many)
        return _plain(kwargs.get(key, float("nan")))

    def format_field(self, value: Any, format_spec: str) -> str:
        if isinstance(value, float) and not np.isfinite(value):
            return _UNKNOWN
        return super().format_field(value, format_spec)


def render_template(template: str, values: Mapping[str, Any]) -> str:
    """Fill ``{feature:.1f}`` placeholders; a clause with an unknown value is left out.

    A clause is a bracketed aside or a stretch ending in ``, ; : .``; a text whose
    every clause needs an unknown value comes back empty.

    >>> render_template("Fog within {h:.1f} h; air {t:.1f} °C.", {"h": float("nan"), "t": 2})
    'Air 2.0 °C.'
    """
    text = _SafeFormatter().vformat(template, (), values)
    if _UNKNOWN not in text:
        return text
    text = re.sub(r"\s*\([^()]*\x00[^()]*\)", "", text)
    pieces = [p for p in re.split(r"(?<=[,;:.])\s+", text) if _UNKNOWN not in p]
    if not pieces:
        return ""
    out = " ".join(pieces).strip()
    out = out[0].upper() + out[1:]
    return out[:-1] + "." if out[-1] in ",;:" else out


def _plain(v: Any) -> Any:
    if isinstance(v, np.generic):
        return v.item()
    return v

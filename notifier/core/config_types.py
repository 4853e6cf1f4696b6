"""The value types of the configuration: durations, time zones, signing secrets,
identifiers and bot sender ids, each with its check (:mod:`notifier.core.config` builds
the models from them)."""

from __future__ import annotations

import re
from typing import Annotated, Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import AfterValidator, BeforeValidator, Field, ValidationInfo, WithJsonSchema

from notifier.core.signing import SECRET_HINT, secret_problem

__all__ = [
    "SENDER_ID",
    "SENDER_ID_RULE",
    "Duration",
    "Identifier",
    "PositiveDuration",
    "SenderId",
    "SigningSecret",
    "TimeZoneName",
    "check_sender_id",
    "parse_duration_s",
]

_DURATION = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(s|sec|min|m|h|hr|d)?\s*$", re.IGNORECASE)

_UNIT_S = {None: 1.0, "s": 1.0, "sec": 1.0, "m": 60.0, "min": 60.0, "h": 3600.0, "hr": 3600.0}


_UNIT_S["d"] = 86400.0


def parse_duration_s(value: Any) -> float:
    """``"10min"``, ``"2h"``, ``"30 s"``, ``90`` (seconds) → seconds as float.

    >>> parse_duration_s("45min")
    2700.0
    """
    if isinstance(value, bool):
        raise ValueError(f"expected a duration such as '10min', got: {value!r}")
    if isinstance(value, int | float):
        seconds = float(value)
    else:
        match = _DURATION.match(str(value))
        if not match:
            raise ValueError(f"expected a duration such as '10min' or '2h', got: {value!r}")
        unit = match.group(2).lower() if match.group(2) else None
        seconds = float(match.group(1)) * _UNIT_S[unit]
    if seconds < 0:
        raise ValueError(f"duration must not be negative, got: {value!r}")
    return seconds


# what an editor may accept for a duration (the JSON Schema from `fogwatch schema`)
_DURATION_SCHEMA = {
    "anyOf": [
        {"type": "number", "minimum": 0},
        {"type": "string", "pattern": r"^\s*\d+(\.\d+)?\s*([sS]|sec|min|[mM]|[hH]|hr|[dD])?\s*$"},
    ]
}
Duration = Annotated[
    float, BeforeValidator(parse_duration_s), WithJsonSchema(_DURATION_SCHEMA, mode="validation")
]


def _positive(value: float, info: ValidationInfo) -> float:
    if value <= 0:
        raise ValueError(f"{info.field_name} must be positive, got: {value}")
    return value


PositiveDuration = Annotated[Duration, AfterValidator(_positive)]


def _check_zone(name: str) -> str:
    if name in _KNOWN_ZONES:  # a config of many sites names a few zones many times
        return name
    try:
        ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise ValueError(f"unknown time zone {name!r} (expected e.g. 'Europe/Dublin')") from exc
    _KNOWN_ZONES.add(name)
    return name


_KNOWN_ZONES: set[str] = set()  # names ZoneInfo has accepted (it keeps them loaded)


TimeZoneName = Annotated[str, BeforeValidator(_check_zone)]


def _check_secret(secret: str) -> str:
    problem = secret_problem(secret)
    if problem:  # the message never holds the value: it may be a secret
        raise ValueError(f"{problem}; {SECRET_HINT}")
    return secret


#: A signing secret in the Standard Webhooks form, ``whsec_`` + base64
#: (:mod:`notifier.core.signing`).
SigningSecret = Annotated[str, AfterValidator(_check_secret)]

Identifier = Annotated[str, Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]*$", max_length=64)]

# A bot sender id is a plain identifier: ASCII letters and digits and a little punctuation,
# enough for phone numbers (+440000001), mail-style ids and Matrix user ids
# (@ana:example.org, whose localparts may hold . _ = - / +; at most 255 characters, and
# "*" is left out because it is a wildcard: docs/references.md [Matrix identifiers]).
# No "*", space or control character, so no sender can pass for "everyone".
SENDER_ID = re.compile(r"[A-Za-z0-9@:._=/+-]{1,255}")
SENDER_ID_RULE = "letters, digits and @ : . _ = - / + only, 1 to 255 characters"


def check_sender_id(value: str) -> str:
    """``value`` if it is a plain sender id, else ValueError saying what is allowed.

    >>> check_sender_id("@ana:example.org")
    '@ana:example.org'
    """
    if not isinstance(value, str) or not SENDER_ID.fullmatch(value):
        shown = value if not isinstance(value, str) or len(value) <= 40 else value[:40] + "…"
        raise ValueError(f"a sender id may use {SENDER_ID_RULE}, got: {shown!r}")
    return value


SenderId = Annotated[str, AfterValidator(check_sender_id)]

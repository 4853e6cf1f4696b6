"""A JSON Schema (draft 2020-12) of rule and safety files, for editors: built from the
very tables the rule loader checks against (the feature catalog, the tests, hazards,
levels, exposures and uses), so the two cannot drift apart.

The loader (:mod:`notifier.engine.rule_files`) stays the judge: it also checks what a
schema cannot say (an ``explain`` template's field names, a duration's text).
"""

from __future__ import annotations

from typing import Any

from notifier.engine.catalog import FEATURES
from notifier.engine.rules import EXPOSURES, HAZARDS, USES

__all__ = ["rule_file_schema"]

_NUMBER_TESTS = ("below", "above", "at_most", "at_least")


def _comparison(kind: str) -> dict[str, Any]:
    if kind == "bool":
        return {
            "type": "object",
            "properties": {"is": {"type": "boolean"}},
            "required": ["is"],
            "additionalProperties": False,
        }
    props: dict[str, Any] = {op: {"type": "number"} for op in _NUMBER_TESTS}
    props["between"] = {"type": "array", "items": {"type": "number"}, "minItems": 2, "maxItems": 2}
    props["margin"] = {"type": "number", "minimum": 0}
    return {
        "type": "object",
        "properties": props,
        "minProperties": 1,
        "maxProperties": 2,
        "additionalProperties": False,
    }


def rule_file_schema() -> dict[str, Any]:
    """The schema of one rule or safety file (``version: 1``)."""
    condition_ref = {"$ref": "#/$defs/condition"}
    features = {
        name: {"description": f"{spec.label} ({spec.unit})" if spec.unit else spec.label}
        | _comparison(spec.kind)
        for name, spec in FEATURES.items()
    }
    one_feature = [
        {
            "type": "object",
            "properties": {name: body},
            "required": [name],
            "additionalProperties": False,
        }
        for name, body in features.items()
    ]
    groups = [
        {
            "type": "object",
            "properties": {key: {"type": "array", "items": condition_ref, "minItems": 1}},
            "required": [key],
            "additionalProperties": False,
        }
        for key in ("all", "any")
    ]
    groups.append(
        {
            "type": "object",
            "properties": {"not": condition_ref},
            "required": ["not"],
            "additionalProperties": False,
        }
    )
    names = {"type": "array", "items": {"type": "string"}}
    rule = {
        "type": "object",
        "required": ["id", "hazard", "level", "when"],
        "additionalProperties": False,
        "properties": {
            "id": {"type": "string"},
            "hazard": {"enum": list(HAZARDS)},
            "level": {"enum": ["watch", "warning"]},
            "kind": {"type": "string"},
            "when": {
                "anyOf": [{"type": "array", "items": condition_ref, "minItems": 1}, condition_ref]
            },
            "hold": {"anyOf": [{"type": "number", "minimum": 0}, {"type": "string"}]},
            "sites": {
                "type": "object",
                "additionalProperties": False,
                "properties": {
                    "exposure": {"type": "array", "items": {"enum": list(EXPOSURES)}},
                    "use": {"type": "array", "items": {"enum": list(USES)}},
                    "tags": names,
                    "ids": names,
                },
            },
            "explain": {"type": "string"},
            "safety": names,
            "description": {"type": "string"},
        },
    }
    note = {
        "type": "object",
        "required": ["text"],
        "additionalProperties": False,
        "properties": {
            "hazards": {"type": "array", "items": {"enum": list(HAZARDS)}},
            "uses": {"type": "array", "items": {"enum": list(USES)}},
            "text": {"type": "string"},
        },
    }
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "title": "fogwatch rule or safety file",
        "type": "object",
        "required": ["version"],
        "additionalProperties": False,
        "properties": {
            "version": {"const": 1},
            "description": {"type": "string"},
            "rules": {"type": "array", "items": {"$ref": "#/$defs/rule"}},
            "safety_notes": {"type": "object", "additionalProperties": note},
        },
        "$defs": {"condition": {"oneOf": one_feature + groups}, "rule": rule},
    }

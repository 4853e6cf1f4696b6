"""A JSON Schema of the config file, from the pydantic models that validate it, for
editors (``fogwatch schema``; ``fogwatch init`` points its config at it).

The models accept durations as text (``10min``) and every string may be ``${NAME}``,
which the schema allows; ``path`` is set by the loader, never written, so it is left out.
"""

from __future__ import annotations

from typing import Any

from notifier.core.config import Config

__all__ = ["config_schema"]


def config_schema() -> dict[str, Any]:
    schema = Config.model_json_schema(mode="validation")
    schema["properties"].pop("path", None)
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = "fogwatch config"
    return schema

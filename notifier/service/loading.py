"""What every command needs from a config, whether or not a service runs: the config and
rules loaded together, the store opened, the observations a moment needs, one
evaluation of every rule, and ``--at`` times read.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING

from notifier.core.config import Config, Site
from notifier.core.config_file import load_config
from notifier.core.errors import ConfigError, UsageError
from notifier.engine.catalog import FeatureSettings
from notifier.engine.model import FogModel, ModelError
from notifier.engine.rule_files import load_rule_set
from notifier.engine.rules import RuleSet

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.engine.assessed import Assessments
    from notifier.engine.catalog import FeatureTable
    from notifier.engine.features import FeatureCache
    from notifier.storage.store import Store

__all__ = ["Loaded", "evaluate", "load", "observations_for", "parse_time", "read_model"]


FORECAST_HORIZON = timedelta(hours=36)


@dataclass
class Loaded:
    """A validated config with its rule set, and its site model if it names one."""

    config: Config
    rules: RuleSet
    model: FogModel | None = None

    @property
    def settings(self) -> FeatureSettings:
        return FeatureSettings(model=self.model)


def load(config_path: str | Path, model_path: str | Path | None = None) -> Loaded:
    """The config and its rules; the model from ``model_path`` (say ``replay --model``)
    or else the config's ``model:`` key."""
    config = load_config(config_path)
    path = Path(model_path) if model_path is not None else config.model
    model = None if path is None else read_model(path)
    return Loaded(config, load_rule_set(config.rule_paths()), model)


def read_model(path: Path) -> FogModel:
    """A model file written by ``fogwatch learn``; a clear error when it cannot be used."""
    import json

    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{path}: model file not found (write one with fogwatch learn)") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ConfigError(f"{path}: cannot read the model: {exc}") from None
    try:
        return FogModel.from_dict(data, str(path))
    except ModelError as exc:
        raise ConfigError(str(exc)) from None


def parse_time(text: str | None, default: datetime | None = None) -> datetime:
    """ISO 8601 with offset or Z; a naive time is taken as UTC."""
    if text is None:
        return default if default is not None else datetime.now(UTC)
    try:
        t = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError as exc:
        raise UsageError(
            f"--at: expected an ISO 8601 time such as 2026-11-20T03:00Z, got: {text!r}"
        ) from exc
    return (t if t.tzinfo else t.replace(tzinfo=UTC)).astimezone(UTC)


def open_store(config: Config) -> Store:
    from notifier.storage.store import Store

    return Store(config.store_url)


def observations_for(config: Config, store: Store, at: datetime) -> pd.DataFrame:
    """The rolling window for every site: observed rows up to ``at``, forecasts ahead."""
    start = at - timedelta(seconds=config.store.window)
    return store.window([s.id for s in config.sites], start, at + FORECAST_HORIZON)


def evaluate(
    loaded: Loaded,
    obs: pd.DataFrame,
    at: datetime,
    cache: dict[float, FeatureTable] | None = None,
    feature_cache: FeatureCache | None = None,  # the caller's, kept between cycles
    sites: Sequence[Site] | None = None,  # default: every configured site
) -> Assessments:
    """Assess every site (or ``sites``) at ``at``; ``cache`` carries feature tables
    between cycles. A site's assessment object is built when it is first read (see
    ``Assessments``)."""
    from notifier.engine.assess import assess

    return assess(
        loaded.rules,
        loaded.config.sites if sites is None else sites,
        obs,
        at,
        loaded.settings,
        stale_after_min=loaded.config.alerts.stale_after / 60.0,
        cache=cache,
        feature_cache=feature_cache,
    )

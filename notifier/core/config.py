"""Configuration: the validated, frozen models (a file is read by
:mod:`notifier.core.config_file`, where every error gets its file:line).

Only ``sites`` is required. Everything else has a working default: no sources, the
shipped ``rules/`` folder, plain text to stdout, and a SQLite file beside the config.
Relative paths resolve against the config file's folder; ``${NAME}`` in any string is
read from the environment, and a missing variable is a located error.
"""

from __future__ import annotations

import re
from datetime import time as dtime
from pathlib import Path
from typing import Annotated, Any, Literal
from zoneinfo import ZoneInfo

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    field_validator,
    model_validator,
)

from notifier.core.config_matrix import MatrixChannel, MatrixSettings, with_matrix_defaults
from notifier.core.config_types import (
    SENDER_ID,
    SENDER_ID_RULE,
    Duration,
    Identifier,
    PositiveDuration,
    SenderId,
    SigningSecret,
    TimeZoneName,
    check_sender_id,
    parse_duration_s,
)

__all__ = [  # with the value types of notifier.core.config_types, re-exported
    "SENDER_ID",
    "SENDER_ID_RULE",
    "Duration",
    "Identifier",
    "PositiveDuration",
    "SenderId",
    "SigningSecret",
    "TimeZoneName",
    "AlertSettings",
    "BotSettings",
    "CHANNEL_TYPES",
    "CapChannel",
    "Config",
    "EmailChannel",
    "FieldSpec",
    "FileDropSource",
    "FolderChannel",
    "HttpJsonSource",
    "MatrixChannel",
    "MatrixSettings",
    "InstanceSettings",
    "Schedule",
    "Site",
    "StoreSettings",
    "Subscriber",
    "TextChannel",
    "WebSettings",
    "WebhookChannel",
    "default_rules_dir",
    "check_sender_id",
    "instance_problem",
    "is_loopback_host",
    "parse_duration_s",
]


CONFIG_VERSION = 1


class _Model(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


class Site(_Model):
    id: Identifier
    name: str
    lat: float = Field(ge=-90, le=90)
    lon: float = Field(ge=-180, le=180)
    timezone: TimeZoneName
    exposure: Literal["open", "valley", "forest", "waterside", "coast", "urban"] = "open"
    use: Literal["farm", "port", "venue", "other"] = "other"
    elevation_m: float | None = None
    onshore_from_deg: float | None = Field(default=None, ge=0, le=360)
    onshore_to_deg: float | None = Field(default=None, ge=0, le=360)
    tags: tuple[str, ...] = ()
    # the water's mean surface temperature for each month, January first, where no
    # sensor or feed reports it: the sea-fog rules then work from it, flagged estimated
    water_temp_monthly_c: tuple[float, ...] | None = None

    @model_validator(mode="after")
    def _sector_pair(self) -> Site:
        if (self.onshore_from_deg is None) != (self.onshore_to_deg is None):
            raise ValueError("onshore_from_deg and onshore_to_deg must be given together")
        return self

    @field_validator("water_temp_monthly_c")
    @classmethod
    def _twelve_months(cls, value: tuple[float, ...] | None) -> tuple[float, ...] | None:
        if value is None:
            return value
        if len(value) != 12:
            raise ValueError(
                f"water_temp_monthly_c needs 12 values (January first), got {len(value)}"
            )
        # sea water freezes near -1.9 °C (docs/references.md [Fofonoff & Millard 1983])
        bad = [v for v in value if not -2.0 <= v <= 40.0]
        if bad:
            raise ValueError(f"water_temp_monthly_c must lie in -2 to 40 °C, got: {bad[0]}")
        return value

    @property
    def zone(self) -> ZoneInfo:
        return ZoneInfo(self.timezone)


class FieldSpec(_Model):
    """Where a canonical column comes from in a source record, and in which unit."""

    key: str
    unit: str | None = None


class _SourceBase(_Model):
    id: Identifier
    interval: PositiveDuration = 600.0
    kind: Literal["obs", "forecast"] = "obs"


class FileDropSource(_SourceBase):
    type: Literal["filedrop"]
    path: Path
    glob: str = "*"
    format: Literal["auto", "csv", "json", "ndjson", "metar"] = "auto"
    settle: Duration = 5.0
    site: str | None = None  # for files whose rows carry no site column
    stations: dict[str, str] = {}  # METAR station id → site id


class HttpJsonSource(_SourceBase):
    type: Literal["http_json"]
    url: str
    sites: tuple[str, ...] | Literal["all"] = "all"
    headers: dict[str, str] = {}
    records: str = ""  # dotted path to the list of records; "" = the document itself
    fields: dict[str, str | FieldSpec] = {}
    site_key: str = "site"
    connect_timeout: Duration = 5.0
    read_timeout: Duration = 15.0
    retries: int = Field(default=3, ge=0, le=10)
    backoff: float = Field(default=0.5, ge=0)
    max_bytes: int = Field(default=5_000_000, gt=0)

    @field_validator("url")
    @classmethod
    def _http(cls, value: str) -> str:
        if not re.match(r"^https?://", value):
            raise ValueError(f"url must start with http:// or https://, got: {value!r}")
        return value

    @property
    def per_site(self) -> bool:
        return any(k in self.url for k in ("{site}", "{lat}", "{lon}"))


Source = Annotated[FileDropSource | HttpJsonSource, Field(discriminator="type")]


class TextChannel(_Model):
    id: Identifier
    type: Literal["text"]
    stdout: bool = True
    file: Path | None = None


class FolderChannel(_Model):
    id: Identifier
    type: Literal["folder"]
    path: Path


class EmailChannel(_Model):
    id: Identifier
    type: Literal["email"]
    host: str
    port: int = Field(default=587, gt=0, lt=65536)
    security: Literal["starttls", "ssl", "none"] = "starttls"
    username: str | None = None
    password: str | None = None
    sender: str
    timeout: Duration = 20.0
    chart: bool = True


class WebhookChannel(_Model):
    id: Identifier
    type: Literal["webhook"]
    url: str
    secret: SigningSecret
    timeout: Duration = 10.0
    headers: dict[str, str] = {}


class CapChannel(_Model):
    """CAP 1.2 XML files, one per alert message, written into ``path``."""

    id: Identifier
    type: Literal["cap"]
    path: Path
    sender: str = "fogwatch@localhost.localdomain"
    radius_km: float = Field(default=2.0, gt=0, le=500)


Channel = Annotated[
    TextChannel | FolderChannel | EmailChannel | WebhookChannel | CapChannel | MatrixChannel,
    Field(discriminator="type"),
]

CHANNEL_TYPES = ("text", "folder", "email", "webhook", "cap", "matrix")

_QUIET = re.compile(r"^\s*(\d{1,2}):(\d{2})\s*-\s*(\d{1,2}):(\d{2})\s*$")


class Subscriber(_Model):
    id: Identifier
    name: str = ""
    channel: str
    address: str | None = None
    sites: tuple[str, ...] = ("all",)  # site ids, "tag:NAME", or "all"
    hazards: tuple[Literal["fog", "icing", "data_gap"], ...] = ("fog", "icing", "data_gap")
    min_level: Literal["watch", "warning"] = "watch"
    quiet_hours: str | None = None  # "22:00-06:30" in the subscriber's zone
    warnings_in_quiet_hours: bool = True
    timezone: TimeZoneName | None = None
    operator: bool = False
    senders: tuple[SenderId, ...] = ()  # bot sender ids that speak for this subscriber

    @field_validator("quiet_hours")
    @classmethod
    def _quiet(cls, value: str | None) -> str | None:
        if value is None:
            return None
        match = _QUIET.match(value)
        if not match or int(match.group(1)) > 23 or int(match.group(3)) > 23:
            raise ValueError(f"quiet_hours must look like '22:00-06:30', got: {value!r}")
        return value

    def quiet_window(self) -> tuple[dtime, dtime] | None:
        if not self.quiet_hours:
            return None
        h1, m1, h2, m2 = (int(g) for g in _QUIET.match(self.quiet_hours).groups())  # type: ignore[union-attr]
        return dtime(h1, m1), dtime(h2, m2)


class Schedule(_Model):
    evaluate_every: Duration = 600.0
    deliver_every: Duration = 60.0
    housekeeping_every: Duration = 3600.0
    health_every: Duration = 900.0
    outlook_local_time: str | None = "17:30"
    # (no morning_summary_local_time: what quiet hours held goes to each subscriber when
    # their own quiet_hours end; a file that still has the key is warned, see config_file)
    misfire_grace: Duration = 300.0

    @field_validator("outlook_local_time")
    @classmethod
    def _hhmm(cls, value: str | None) -> str | None:
        if value is not None and not re.match(r"^([01]?\d|2[0-3]):[0-5]\d$", value):
            raise ValueError(f"expected a local time HH:MM, got: {value!r}")
        return value


class StoreSettings(_Model):
    url: str | None = None
    window: Duration = 48 * 3600.0
    keep_deliveries: Duration = 14 * 86400.0


class InstanceSettings(_Model):
    """Which of ``count`` ``fogwatch run`` instances sharing one PostgreSQL store this is.

    Each takes the sites (and sources) that ``notifier.core.partition`` gives its
    ``index``; one of them, whichever holds the store's leader lock, also runs the
    outlooks and housekeeping. Set per machine with ``${ENV}``, say
    ``index: ${FOGWATCH_INSTANCE:-0}``."""

    index: int = Field(default=0, ge=0)
    count: int = Field(default=1, ge=1, le=1024)

    @model_validator(mode="after")
    def _index_below_count(self) -> InstanceSettings:
        if self.index >= self.count:
            raise ValueError(
                f"index must be below count ({self.count}): instances are numbered "
                f"0 to {self.count - 1}, got: {self.index}"
            )
        return self


def instance_problem(config: Config) -> str | None:
    """Why ``config.instance`` cannot work with ``config``'s store, or None."""
    if config.instance.count > 1 and config.store_url.startswith("sqlite"):
        return (
            f"count {config.instance.count} needs a PostgreSQL store (store.url: "
            "postgresql+psycopg://…): instances share the sites through it, and a SQLite "
            "file serves one instance only"
        )
    return None


#: The ids of subscribers made by following a site through the bot start so
#: (``service.bot_subscriber_id``); configured subscribers may not.
BOT_SUBSCRIBER_PREFIX = "bot-"


class AlertSettings(_Model):
    clearing_time: Duration = 45 * 60.0
    reminder_every: Duration = 3 * 3600.0
    cooldown: Duration = 60 * 60.0
    max_delivery_age: Duration = 12 * 3600.0
    stale_after: Duration = 90 * 60.0
    # under a warning, a data gap is sent on its own only once it has lasted this long
    # past stale_after; one that closes sooner is told once, with its end
    # (engine/data_gap.py). 45 min: fogwatch's own choice, equal to clearing_time
    gap_grace: Duration = 45 * 60.0
    # how long a dispatcher's claim on what it is sending lasts (wall-clock time); it
    # should be well above the longest single send (the channels' timeouts)
    claim_lease: PositiveDuration = 15 * 60.0


class BotSettings(_Model):
    secret: SigningSecret | None = None
    allow: tuple[SenderId, ...] = ()  # sender ids allowed without a join code (every site)
    # code → what it grants: a site id, "tag:NAME" (the sites with that tag) or "all"
    join_codes: dict[str, str] = {}
    rate_per_minute: int = Field(default=20, gt=0)
    channel: str = "stdout"  # where alerts for people who follow a site through the bot go


def is_loopback_host(host: str) -> bool:
    """True for an address only this machine can reach (the web app needs no token there).

    >>> [is_loopback_host(h) for h in ("127.0.0.1", "::1", "localhost", "0.0.0.0", "")]
    [True, True, True, False, False]
    """
    import ipaddress

    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


class WebSettings(_Model):
    """``fogwatch serve`` and the web app ``fogwatch run`` serves beside the scheduler."""

    host: str = "127.0.0.1"
    port: int = Field(default=8750, gt=0, lt=65536)
    token: str | None = None  # required when host is not a loopback address
    cap_sender: str = "fogwatch@localhost.localdomain"
    cap_radius_km: float = Field(default=2.0, gt=0, le=500)


class Config(_Model):
    version: int = CONFIG_VERSION
    sites: tuple[Site, ...]
    # a CSV table of further sites, a row each (notifier.core.sites_file): its sites
    # follow those written in ``sites``
    sites_file: Path | None = None
    sources: tuple[Source, ...] = ()
    rules: tuple[Path, ...] = ()
    channels: tuple[Channel, ...] = ()
    subscribers: tuple[Subscriber, ...] = ()
    schedule: Schedule = Schedule()
    store: StoreSettings = StoreSettings()
    alerts: AlertSettings = AlertSettings()
    bot: BotSettings = BotSettings()
    model: Path | None = None  # a site model written by `fogwatch learn` (JSON)
    web: WebSettings | None = None
    matrix: MatrixSettings | None = None
    instance: InstanceSettings = InstanceSettings()
    path: Path | None = None  # the file this came from (set by load_config)

    @model_validator(mode="before")
    @classmethod
    def _matrix_defaults(cls, data: Any) -> Any:
        return with_matrix_defaults(data)

    @field_validator("version")
    @classmethod
    def _version(cls, value: int) -> int:
        if value != CONFIG_VERSION:
            raise ValueError(f"unsupported config version {value} (expected {CONFIG_VERSION})")
        return value

    @property
    def base_dir(self) -> Path:
        return self.path.parent if self.path else Path.cwd()

    @property
    def store_url(self) -> str:
        if self.store.url:
            return self.store.url
        stem = self.path.stem if self.path else "fogwatch"
        return f"sqlite:///{self.base_dir / (stem + '.sqlite')}"

    def site(self, site_id: str) -> Site:
        for site in self.sites:
            if site.id == site_id:
                return site
        raise KeyError(site_id)

    def channel(self, channel_id: str) -> Any:
        for channel in self.channels:
            if channel.id == channel_id:
                return channel
        raise KeyError(channel_id)

    def rule_paths(self) -> tuple[Path, ...]:
        return self.rules or (default_rules_dir(),)

    def sites_matching(self, selectors: tuple[str, ...]) -> tuple[Site, ...]:
        """Sites chosen by ids, ``tag:NAME`` or ``all``."""
        chosen = []
        for site in self.sites:
            for sel in selectors:
                if (
                    sel == "all"
                    or sel == site.id
                    or (sel.startswith("tag:") and sel[4:] in site.tags)
                ):
                    chosen.append(site)
                    break
        return tuple(chosen)


def default_rules_dir() -> Path:
    """The ``rules/`` folder shipped beside the package."""
    return Path(__file__).resolve().parents[2] / "rules"

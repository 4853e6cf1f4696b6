"""Generic HTTP JSON feed: one URL for many sites, or one per site from a template.

The ``requests.Session`` is handed in (tests hand one they control). This adapter
mounts on it, for the feed's host, an adapter that retries connection errors and 5xx
answers with exponential backoff (urllib3 ``Retry``); a ``Retry-After`` header is not
honoured, so that a poll never sleeps longer than its own backoff allows. Each request
has (connect, read) timeouts, and the body is read in chunks and abandoned as soon as it
passes ``max_bytes``.

Every error from requests, urllib3 or json is translated here into
:class:`~notifier.core.errors.SourceUnavailable` with a reason a person can act on, and a poll
turns that into a failed :class:`~notifier.ingest.base.PollResult`; nothing from the
libraries underneath leaks. A URL in a message keeps its path and plain parameters (so an
error says which site a request was for) but not its credentials or key-like parameters
(:func:`notifier.core.redact.redact_url`). A read timeout is reported as one, whether it
comes while waiting for the answer or half-way through the body.

Mapping records to the canonical table (config keys of ``HttpJsonSource``):

- ``records``: dotted path to the list in the document (``data.observations``; a number
  indexes a list); empty means the document is the list;
- ``fields``: column → key in each record (dotted), or ``{key, unit}`` when the feed's
  unit differs from the column's (converted with pint). Columns not mapped pass through
  when a record uses their canonical or alternative name;
- ``{site}``, ``{lat}``, ``{lon}`` in the URL: one request per site, and the rows are
  that site's; otherwise each record names its site under ``site_key`` (or the source
  serves exactly one site).

A rejected record's ``line`` is its position (1-based) in the list of records.
"""

from __future__ import annotations

import json
import re
from collections.abc import Mapping
from datetime import datetime
from typing import TYPE_CHECKING, Any
from urllib.parse import quote, urlsplit, urlunsplit

import requests
from requests.adapters import HTTPAdapter
from urllib3.util.retry import Retry

from notifier import __version__
from notifier.core.columns import ALTERNATIVES, INPUT_COLUMNS, UNITS, missing_columns, unit_registry
from notifier.core.config import FieldSpec
from notifier.core.errors import SourceUnavailable
from notifier.core.observations import normalize
from notifier.core.redact import redact, redact_url
from notifier.ingest.base import PollResult

if TYPE_CHECKING:
    from notifier.core.config import HttpJsonSource, Site

__all__ = ["HttpJsonFeed", "fetch_json", "records_at", "safe_url"]

_CHUNK_BYTES = 64 * 1024
_MISSING = object()
_ERRNO = re.compile(r"\[Errno -?\d+\] [^'\")]+")
# urllib3's pool and object reprs, which say nothing a person can act on
_POOL = re.compile(r"\w*ConnectionPool\([^)]*\):\s*|<[\w.]+ object at 0x[0-9a-f]+>:?\s*")


def safe_url(url: str) -> str:
    """The URL without user name, password, fragment or key-like query values; the path
    and plain parameters (``site=quay``) stay. Fit for logs and health tables.

    >>> safe_url("https://u:pw@feed.invalid:8443/points?site=zz-quay&key=abc#top")
    'https://feed.invalid:8443/points?site=zz-quay&key=***'
    """
    parts = urlsplit(url)
    host = parts.hostname or ""
    if parts.port:
        host = f"{host}:{parts.port}"
    return redact_url(urlunsplit((parts.scheme, host, parts.path, parts.query, "")))


def _read_timed_out(exc: BaseException) -> bool:
    """True when urllib3's read timeout lies somewhere under ``exc``: with retries mounted
    (``read=0``), or in the middle of a body, requests hands it on as a ConnectionError."""
    from urllib3.exceptions import ReadTimeoutError

    seen: set[int] = set()
    todo: list[BaseException] = [exc]
    while todo:
        node = todo.pop()
        if id(node) in seen:
            continue
        seen.add(id(node))
        if isinstance(node, ReadTimeoutError | requests.exceptions.ReadTimeout):
            return True
        inner = [getattr(node, "reason", None), node.__cause__, node.__context__, *node.args]
        todo.extend(i for i in inner if isinstance(i, BaseException))
    return False


def _connection_reason(exc: BaseException) -> str:
    """The useful part of a requests/urllib3 error, without pool and object reprs."""
    found = _ERRNO.search(str(exc))
    if found:
        return found.group(0).strip()
    return redact(_POOL.sub("", _innermost(exc))).strip()


def _innermost(exc: BaseException) -> str:
    node: BaseException = exc
    for _ in range(5):  # requests wraps urllib3, which wraps the socket error
        inner = getattr(node, "reason", None)
        if isinstance(inner, BaseException):
            node = inner
        elif node.args and isinstance(node.args[0], BaseException):
            node = node.args[0]
        else:
            break
    return node.args[0] if node.args and isinstance(node.args[0], str) else str(node)


def fetch_json(
    session: requests.Session,
    url: str,
    *,
    headers: Mapping[str, str],
    timeout: tuple[float, float],
    max_bytes: int,
    retries: int = 0,
) -> Any:
    """GET ``url`` and decode its JSON; raise ``SourceUnavailable`` with the reason."""
    shown = safe_url(url)
    connect_s, read_s = timeout
    try:
        with session.get(url, headers=dict(headers), timeout=timeout, stream=True) as resp:
            if resp.status_code >= 400:
                after = f" after {retries} retries" if retries and resp.status_code >= 500 else ""
                raise SourceUnavailable(
                    f"HTTP {resp.status_code} {resp.reason or ''}".rstrip() + after
                )
            declared = resp.headers.get("Content-Length", "")
            if declared.isdigit() and int(declared) > max_bytes:
                raise SourceUnavailable(
                    f"response of {int(declared)} bytes is over the {max_bytes}-byte limit"
                )
            body = bytearray()
            for chunk in resp.iter_content(_CHUNK_BYTES):
                body += chunk
                if len(body) > max_bytes:
                    raise SourceUnavailable(f"response is over the {max_bytes}-byte limit")
    except SourceUnavailable:
        raise
    except requests.exceptions.ConnectTimeout as exc:
        raise SourceUnavailable(f"no connection within {connect_s:g} s to {shown}") from exc
    except requests.exceptions.ReadTimeout as exc:
        raise SourceUnavailable(f"no answer within the {read_s:g} s read timeout") from exc
    except requests.exceptions.SSLError as exc:
        raise SourceUnavailable(f"TLS failed: {_connection_reason(exc)}") from exc
    except (
        requests.exceptions.ChunkedEncodingError,
        requests.exceptions.ContentDecodingError,
    ) as exc:
        raise SourceUnavailable(f"response cut off or garbled: {_connection_reason(exc)}") from exc
    except requests.exceptions.ConnectionError as exc:
        if _read_timed_out(exc):
            raise SourceUnavailable(f"no answer within the {read_s:g} s read timeout") from exc
        raise SourceUnavailable(f"cannot connect: {_connection_reason(exc)}") from exc
    except requests.exceptions.RequestException as exc:
        reason = redact(_POOL.sub("", str(exc)))
        raise SourceUnavailable(f"request failed: {type(exc).__name__}: {reason}") from exc
    if not body.strip():
        raise SourceUnavailable("empty response (expected JSON)")
    try:
        return json.loads(bytes(body))
    except json.JSONDecodeError as exc:
        raise SourceUnavailable(
            f"not valid JSON: {exc.msg} (line {exc.lineno}, column {exc.colno})"
        ) from exc
    except (UnicodeDecodeError, RecursionError) as exc:
        raise SourceUnavailable(f"not usable JSON: {exc}") from exc
    except ValueError as exc:  # an integer over Python's 4300-digit limit
        raise SourceUnavailable(f"not usable JSON: {str(exc).split(';')[0]}") from exc


def _dig(node: Any, path: str) -> Any:
    for part in path.split(".") if path else ():
        if isinstance(node, dict) and part in node:
            node = node[part]
        elif isinstance(node, list) and part.isdigit() and int(part) < len(node):
            node = node[int(part)]
        else:
            return _MISSING
    return node


def records_at(doc: Any, path: str) -> list[Any]:
    """The list of records at the dotted ``path``; ``SourceUnavailable`` if absent."""
    node = doc
    for part in path.split(".") if path else ():
        step = _dig(node, part)
        if step is _MISSING:
            if isinstance(node, dict):
                keys = ", ".join(sorted(map(str, node))[:10]) or "none"
                there = f"{part!r} is not among the keys there: {keys}"
            else:
                there = f"cannot take {part!r} of a {type(node).__name__}"
            raise SourceUnavailable(
                f"schema mismatch: no records at {path!r} in the response ({there})"
            )
        node = step
    if not isinstance(node, list):
        where = f"at {path!r}" if path else "at the top"
        raise SourceUnavailable(
            f"schema mismatch: expected a list of records {where}, got {type(node).__name__}"
        )
    return node


class HttpJsonFeed:
    """An :class:`~notifier.ingest.base.ObservationSource` over an HTTP JSON API."""

    def __init__(
        self, source: HttpJsonSource, *, sites: Mapping[str, Site], session: requests.Session
    ):
        self.source = source
        self.session = session
        if source.sites == "all":
            self.sites = dict(sites)
        else:
            self.sites = {s: sites[s] for s in source.sites if s in sites}
        self.problem = self._check_fields()
        retry = Retry(
            total=source.retries,
            connect=source.retries,
            read=0,
            status=source.retries,
            other=0,
            backoff_factor=source.backoff,
            status_forcelist=tuple(range(500, 600)),
            allowed_methods=frozenset({"GET"}),
            raise_on_status=False,
            respect_retry_after_header=False,
        )
        prefix = self._prefix()
        previous = session.adapters.get(prefix)
        if previous is not None:  # built again on a long-lived session: free the old pool
            previous.close()
        session.mount(prefix, HTTPAdapter(max_retries=retry))

    @property
    def id(self) -> str:
        return self.source.id

    def _prefix(self) -> str:
        """The URL up to its first placeholder: the most specific prefix requests can
        match, so that two feeds on one host keep their own retry settings."""
        fixed = self.source.url.split("{", 1)[0].split("?", 1)[0]
        parts = urlsplit(fixed)
        if "{" in self.source.url.split("/")[2]:  # the host itself is templated
            return f"{parts.scheme}://"
        return fixed

    def _check_fields(self) -> str | None:
        for column, spec in self.source.fields.items():
            if column not in INPUT_COLUMNS:
                return f"fields: unknown column {column!r} (expected a canonical column name)"
            unit = spec.unit if isinstance(spec, FieldSpec) else None
            if unit is None:
                continue
            target = column if column in UNITS else ALTERNATIVES.get(column, (None, ""))[0]
            if target is None:
                return f"fields.{column}: a unit only applies to a numeric column"
            try:
                unit_registry().Quantity(1.0, unit).to(UNITS[target])
            except Exception as exc:  # pint's errors share no useful base class
                return f"fields.{column}: unit {unit!r} does not convert to {UNITS[target]}: {exc}"
        return None

    def targets(self) -> list[tuple[str | None, str]]:
        """(site id or None, URL) for each request of one poll."""
        url = self.source.url
        if not self.source.per_site:
            return [(None, url)]
        out: list[tuple[str | None, str]] = []
        for site_id, site in self.sites.items():
            filled = (
                url.replace("{site}", quote(site_id, safe=""))
                .replace("{lat}", f"{site.lat:g}")
                .replace("{lon}", f"{site.lon:g}")
            )
            out.append((site_id, filled))
        return out

    def poll(self, now: datetime) -> PollResult:
        result = PollResult(source_id=self.id)
        if self.problem:
            result.ok, result.error = False, self.problem
            return result
        frames = []
        errors = []
        for site_id, url in self.targets():
            origin = safe_url(url)
            try:
                doc = fetch_json(
                    self.session,
                    url,
                    headers={
                        "Accept": "application/json",
                        "User-Agent": f"fogwatch/{__version__}",
                        **self.source.headers,
                    },
                    timeout=(self.source.connect_timeout, self.source.read_timeout),
                    max_bytes=self.source.max_bytes,
                    retries=self.source.retries,
                )
                rows, units = self._rows(records_at(doc, self.source.records), site_id)
            except SourceUnavailable as exc:
                errors.append(f"{origin}: {exc}")
                continue
            default_site = site_id
            if default_site is None and len(self.sites) == 1:
                default_site = next(iter(self.sites))
            frame, rejections, notes = normalize(
                rows,
                sites=self.sites,
                now=now,
                origin=origin,
                source_id=self.id,
                default_kind=self.source.kind,
                default_site=default_site,
                lines=list(range(1, len(rows) + 1)),
                units=units,
            )
            frames.append(frame)
            result.rejections.extend(rejections)
            result.warnings.extend(notes)
        return result.finish(frames, errors)

    def _rows(self, records: list[Any], site_id: str | None) -> tuple[list[Any], dict[str, str]]:
        """Records → rows keyed by input column names, and the fields' units."""
        fields = self.source.fields
        keys = {col: spec if isinstance(spec, str) else spec.key for col, spec in fields.items()}
        units = {
            col: spec.unit
            for col, spec in fields.items()
            if isinstance(spec, FieldSpec) and spec.unit
        }
        found = dict.fromkeys(keys, 0)
        rows: list[Any] = []
        for record in records:
            if not isinstance(record, dict):
                rows.append(record)  # normalize rejects it, with its position
                continue
            row = {k: v for k, v in record.items() if k in INPUT_COLUMNS and k not in keys}
            for column, key in keys.items():
                value = _dig(record, key)
                if value is not _MISSING:
                    row[column] = value
                    found[column] += 1
            if site_id is not None:
                row["site"] = site_id
            elif "site" not in keys:
                site = _dig(record, self.source.site_key)
                if site is not _MISSING:
                    row["site"] = site
            rows.append(row)
        dicts = [r for r in rows if isinstance(r, dict)]
        if dicts:
            absent = [f"{c} (key {keys[c]!r})" for c, n in found.items() if n == 0]
            if absent:
                raise SourceUnavailable(
                    f"schema mismatch: no record has {', '.join(absent)} ({len(dicts)} records)"
                )
            default_site = site_id or (next(iter(self.sites)) if len(self.sites) == 1 else None)
            problems = missing_columns({k for r in dicts for k in r}, default_site=default_site)
            if problems:
                raise SourceUnavailable("schema mismatch: " + "; ".join(problems))
        return rows, units

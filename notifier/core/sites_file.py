"""Sites from a table: ``sites_file:`` in the config names a CSV file, a row per site.

A few dozen sites sit well in the config file itself; thousands do not. The YAML reader
that remembers every line is pure Python (12–15 s for 10,000 sites) and a config file is
capped at 2 MB, while a table of 100,000 sites is some 10 MB and reads in well under a
second. The table's first row names its columns, which are :class:`Site`'s fields
(``id``, ``name``, ``lat``, ``lon``, ``timezone`` and any of the others); an empty
cell leaves the field at its default. ``tags`` and ``water_temp_monthly_c`` hold their
values separated by ``;``. Blank lines and lines starting with ``#`` are skipped::

    id,name,lat,lon,timezone,exposure,use,tags
    north-quay,North Quay,51.02,-3.11,Europe/London,coast,port,harbour;pilots

Every problem is reported at once, by file, line and column, as for the config file.

A reload reads the table again; a row that is the same as at the last read (same
columns, same cells) keeps the site it gave then rather than being validated again, so
a reload of 100,000 unchanged sites costs the read and a comparison per row.
"""

from __future__ import annotations

import csv
import io
import threading
from dataclasses import dataclass
from pathlib import Path

from pydantic import ValidationError

from notifier.core.config import Site
from notifier.core.errors import ConfigProblem

__all__ = ["LIST_COLUMNS", "MAX_SITES_FILE_BYTES", "read_sites_file"]

#: a sites table larger than this is refused unread (100,000 sites are about 10 MB)
MAX_SITES_FILE_BYTES = 64 * 1024 * 1024
#: columns whose cell holds several values, separated by ";"
LIST_COLUMNS = ("tags", "water_temp_monthly_c")
_REQUIRED = tuple(name for name, field in Site.model_fields.items() if field.is_required())


@dataclass
class _LastRead:
    header: tuple[str, ...]
    sites: dict[tuple[str, ...], Site]  # a row's cells → the site it gave


_last: dict[Path, _LastRead] = {}  # the last good read of each table, by its path
_last_lock = threading.Lock()


def read_sites_file(path: Path) -> tuple[list[Site], list[ConfigProblem]]:
    """The sites of the table at ``path`` (absolute), and every problem found in it.

    With problems, the sites are those of the rows that validated (``fogwatch check``
    cross-checks them); the config is not usable until the problems are fixed."""
    where = str(path)
    try:
        size = path.stat().st_size
        if size > MAX_SITES_FILE_BYTES:
            return [], [
                ConfigProblem(
                    where,
                    None,
                    f"the sites table is {size:,} bytes, over the limit of "
                    f"{MAX_SITES_FILE_BYTES:,}",
                )
            ]
        text = path.read_text(encoding="utf-8-sig")  # a spreadsheet's byte-order mark
    except UnicodeDecodeError as exc:
        return [], [ConfigProblem(where, None, f"not UTF-8 text: {exc.reason}")]
    except OSError as exc:
        return [], [ConfigProblem(where, None, f"cannot read the sites table: {exc.strerror}")]
    reader = csv.reader(io.StringIO(text, newline=""))
    problems: list[ConfigProblem] = []
    header: tuple[str, ...] | None = None
    sites: list[Site] = []
    seen_at: dict[str, int] = {}  # site id → its line
    with _last_lock:
        last = _last.get(path)
    known: dict[tuple[str, ...], Site] = {}
    given: dict[tuple[str, ...], Site] = {}  # this read's rows, kept for the next
    for cells in reader:
        line = reader.line_num
        if not cells or not "".join(cells).strip() or cells[0].lstrip().startswith("#"):
            continue
        if header is None:
            header = tuple(c.strip() for c in cells)
            problems += _header_problems(where, line, header)
            if problems:
                return [], problems
            if last is not None and last.header == header:
                known = last.sites
            continue
        row = tuple(cells)
        if len(row) != len(header):
            problems.append(
                ConfigProblem(
                    where, line, f"{len(row)} cells where the header names {len(header)} columns"
                )
            )
            continue
        site = known.get(row)
        if site is None:
            site = _site(where, line, header, row, problems)
            if site is None:
                continue
        if site.id in seen_at:
            problems.append(
                ConfigProblem(
                    where, line, f"id: site {site.id!r} is already on line {seen_at[site.id]}"
                )
            )
            continue
        seen_at[site.id] = line
        sites.append(site)
        given[row] = site
    if header is None:
        problems.append(ConfigProblem(where, None, "the sites table has no header row"))
    if not problems and header is not None:
        with _last_lock:
            _last[path] = _LastRead(header, given)
    return sites, problems


def _header_problems(where: str, line: int, header: tuple[str, ...]) -> list[ConfigProblem]:
    fields = Site.model_fields
    problems = []
    for name in header:
        if name not in fields:
            problems.append(
                ConfigProblem(
                    where, line, f"unknown column {name!r} (the columns are: {', '.join(fields)})"
                )
            )
    repeated = sorted({n for n in header if header.count(n) > 1})
    problems += [ConfigProblem(where, line, f"column {n!r} is named twice") for n in repeated]
    missing = [n for n in _REQUIRED if n not in header]
    if missing:
        problems.append(ConfigProblem(where, line, f"missing column(s): {', '.join(missing)}"))
    return problems


def _site(
    where: str,
    line: int,
    header: tuple[str, ...],
    row: tuple[str, ...],
    problems: list[ConfigProblem],
) -> Site | None:
    data: dict[str, object] = {}
    for name, cell in zip(header, row, strict=True):
        cell = cell.strip()
        if not cell:
            continue  # the field's default
        if name in LIST_COLUMNS:
            data[name] = [part.strip() for part in cell.split(";") if part.strip()]
        else:
            data[name] = cell
    try:
        return Site.model_validate(data)
    except ValidationError as exc:
        for err in exc.errors(include_url=False):
            column = next((str(p) for p in err["loc"] if isinstance(p, str)), "")
            shown = data.get(column, "") if column else ""
            label = f"{column}: " if column else ""
            message = err["msg"].removeprefix("Value error, ")
            said = column and shown != "" and repr(shown) not in message
            got = f", got: {shown!r}" if said else ""
            problems.append(ConfigProblem(where, line, f"{label}{message}{got}"))
        return None

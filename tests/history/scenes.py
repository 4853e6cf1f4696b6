"""Invented sites for the replay tests: two open fields, a month of nights from 1 October."""

from __future__ import annotations

from datetime import date

# the store is a SQLite file beside the config (each test writes it to its own tmp folder)
TWO_FIELDS = """\
version: 1
sites:
  - {id: low-field, name: Low Field, lat: 52.3, lon: -1.8, timezone: Europe/London,
     exposure: open, use: farm}
  - {id: top-field, name: Top Field, lat: 52.4, lon: -1.9, timezone: Europe/London,
     exposure: open, use: farm}
store: {url: "sqlite:///replay.sqlite"}
"""

FIRST = date(2026, 10, 1)

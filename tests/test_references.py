"""docs/references.md is the project's own reference list, and every citation points into it.

Rules checked here (they are described at the top of docs/references.md):

- a citation ``docs/references.md [Key]`` (or ``[Key A], [Key B]``) names an entry that exists;
- an inline author-year citation ("Brutsaert (1975)", "Cho et al. 2000"), a ``WMO-No. N``
  and an ``RFC N`` each have an entry;
- no file outside docs/ cites the old outside reference document (its name in capitals);
- every entry has a status: checked, computed or from memory.

Each rule is a helper that returns the problems it finds, tested on the repository (no
problems) and on a made-up text that breaks it (the problem is found).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
REFERENCES_MD = ROOT / "docs" / "references.md"
THIS_FILE = Path(__file__).resolve()

# The old outside document's name, in capitals; built here so this file does not cite it.
OUTSIDE_NAME = "REFER" + "ENCES"
STATUS_WORDS = ("checked", "computed", "from memory")
MONTHS = {
    "January", "February", "March", "April", "May", "June", "July", "August",
    "September", "October", "November", "December",
    "Jan", "Feb", "Mar", "Apr", "Jun", "Jul", "Aug", "Sep", "Sept", "Oct", "Nov", "Dec",
}  # fmt: skip

_ENTRY_HEADING = re.compile(r"^### \[([^\]\n]+)\]\s*$", re.MULTILINE)
_CITATION = re.compile(r"docs/references\.md((?:\s*(?:,|and)?\s*\[[^\]\n]+\])+)")
_BRACKETED = re.compile(r"\[([^\]\n]+)\]")
_AUTHOR_YEAR = re.compile(r"\b([A-Z][a-z]+)(?: et al\.)? \(?((?:19|20)\d\d)\b(?![-:/]\d)")
_STANDARD = re.compile(r"\b(WMO-No\. \d+|RFC \d{3,5})\b")
_OUTSIDE = re.compile(rf"\b{OUTSIDE_NAME}\b")


# --- helpers ---------------------------------------------------------------------------


def entry_keys(doc: str) -> list[str]:
    """Keys of the entries (``### [Key]`` headings), in order."""
    return _ENTRY_HEADING.findall(doc)


def entry_statuses(doc: str) -> dict[str, str | None]:
    """Each entry's status text (after ``**Status:**``), or None where it has none."""
    headings = list(_ENTRY_HEADING.finditer(doc))
    statuses: dict[str, str | None] = {}
    for i, heading in enumerate(headings):
        end = headings[i + 1].start() if i + 1 < len(headings) else len(doc)
        body = doc[heading.end() : end]
        found = re.search(r"^- \*\*Status:\*\*\s*(.+)$", body, re.MULTILINE)
        statuses[heading.group(1)] = found.group(1).strip() if found else None
    return statuses


def entries_without_status(doc: str) -> list[str]:
    """Keys whose status is missing or does not begin with a known status word."""
    return [
        key
        for key, status in entry_statuses(doc).items()
        if status is None or not status.startswith(STATUS_WORDS)
    ]


def duplicate_keys(doc: str) -> list[str]:
    keys = entry_keys(doc)
    return sorted({key for key in keys if keys.count(key) > 1})


def cited_keys(text: str) -> set[str]:
    """Keys named in ``docs/references.md [Key]`` citations."""
    keys: set[str] = set()
    for citation in _CITATION.finditer(text):
        keys.update(_BRACKETED.findall(citation.group(1)))
    return keys


def missing_cited_keys(text: str, keys: set[str]) -> list[str]:
    return sorted(cited_keys(text) - keys)


def missing_author_year(text: str, keys: set[str]) -> list[str]:
    """Author-year citations with no entry whose key has that name and that year."""
    missing = set()
    for name, year in _AUTHOR_YEAR.findall(text):
        if name in MONTHS:
            continue
        if not any(name in key.split(" ") or f"-{name}" in key for key in keys if year in key):
            missing.add(f"{name} {year}")
    return sorted(missing)


def missing_standards(text: str, keys: set[str]) -> list[str]:
    return sorted(set(_STANDARD.findall(text)) - keys)


def outside_reference_lines(text: str) -> list[int]:
    """Line numbers (1-based) that cite the old outside reference document."""
    return [n for n, line in enumerate(text.splitlines(), 1) if _OUTSIDE.search(line)]


def scanned_files() -> list[Path]:
    """Every file whose citations must point into docs/references.md."""
    files = [*ROOT.glob("notifier/**/*.py"), *ROOT.glob("tests/**/*.py")]
    files += [*ROOT.glob("rules/**/*.yaml"), *ROOT.glob("bench/**/*.py")]
    files += [*ROOT.glob("bench/**/*.md"), ROOT / "README.md", ROOT / "DEVELOPERS.md"]
    return sorted(f for f in files if f.is_file() and f.resolve() != THIS_FILE)


def _doc() -> str:
    return REFERENCES_MD.read_text(encoding="utf-8")


def _problems(check) -> list[str]:
    keys = set(entry_keys(_doc()))
    problems = []
    for path in scanned_files():
        for problem in check(path.read_text(encoding="utf-8"), keys):
            problems.append(f"{path.relative_to(ROOT)}: {problem}")
    return problems


# --- the repository ----------------------------------------------------------------------


def test_reference_list_exists_and_has_entries():
    assert len(entry_keys(_doc())) >= 10


def test_every_entry_has_a_status():
    assert entries_without_status(_doc()) == []


def test_entry_keys_are_unique():
    assert duplicate_keys(_doc()) == []


def test_every_cited_key_has_an_entry():
    assert _problems(missing_cited_keys) == []


def test_every_author_year_citation_has_an_entry():
    assert _problems(missing_author_year) == []


def test_every_cited_standard_has_an_entry():
    assert _problems(missing_standards) == []


def test_no_file_outside_docs_cites_the_outside_document():
    found = [
        f"{path.relative_to(ROOT)}:{line}"
        for path in scanned_files()
        for line in outside_reference_lines(path.read_text(encoding="utf-8"))
    ]
    assert found == []


def test_the_scan_covers_the_cited_places():
    names = {str(path.relative_to(ROOT)) for path in scanned_files()}
    assert "notifier/physics/constants.py" in names
    assert "tests/physics/test_radiation.py" in names
    assert "rules/fog.yaml" in names
    assert "README.md" in names


# --- each check can fail -----------------------------------------------------------------

MADE_UP_DOC = """
### [Known 2001]
- **Source:** somebody.
- **Status:** checked, a stored copy.

### [No Status 1999]
- **Source:** nobody.

### [Odd Status 1998]
- **Status:** probably right.

### [Known 2001]
- **Status:** from memory.
"""


def test_missing_status_is_found():
    assert entries_without_status(MADE_UP_DOC) == ["No Status 1999", "Odd Status 1998"]


def test_duplicate_key_is_found():
    assert duplicate_keys(MADE_UP_DOC) == ["Known 2001"]


@pytest.mark.parametrize(
    ("text", "missing"),
    [
        ("# docs/references.md [Known 2001]: fine", []),
        ("# docs/references.md [Absent 2002]: gone", ["Absent 2002"]),
        ("# docs/references.md [Known 2001], [Absent 2002]", ["Absent 2002"]),
        ("# a bracket that is no citation [lo, hi]", []),
    ],
)
def test_missing_cited_key_is_found(text, missing):
    assert missing_cited_keys(text, {"Known 2001"}) == missing


@pytest.mark.parametrize(
    ("text", "missing"),
    [
        ("as in Known (2001)", []),
        ("as in Absent (2002) and Known 2001", ["Absent 2002"]),
        ("as in Absent et al. 2003", ["Absent 2003"]),
        ("clocks go back on 25 October 2026", []),
        ("Sydney 2024-06-21 10:00 UTC is a date, not a citation", []),
    ],
)
def test_missing_author_year_entry_is_found(text, missing):
    assert missing_author_year(text, {"Known 2001"}) == missing


def test_missing_standard_entry_is_found():
    text = "codes per WMO-No. 306 and RFC 5321; mail per RFC 9999"
    assert missing_standards(text, {"WMO-No. 306", "RFC 5321"}) == ["RFC 9999"]


def test_outside_document_citation_is_found():
    text = f"x = 1\n# {OUTSIDE_NAME} [computed]: 82.5 W/m2\n# docs/references.md [LW check]\n"
    assert outside_reference_lines(text) == [2]

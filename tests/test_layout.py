"""The package's layout: each folder is a stage, and imports run only downwards.

The order is the one DEVELOPERS.md draws (cli on top, physics at the bottom). Read from
the source with ``ast``, so an import inside a function or under TYPE_CHECKING counts too.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "notifier"

# higher number = higher stage; a module may import its own stage and the ones below
STAGES = {
    "physics": 0,
    "core": 1,
    "engine": 2,
    "storage": 3,
    "ingest": 4,
    "delivery": 4,
    "bot": 5,
    "web": 6,
    "service": 7,
    "history": 8,
    "demo": 8,
    "cli": 9,
}
# libraries that do IO: the pure stages must not touch them
IO_LIBRARIES = ("sqlalchemy", "requests", "smtplib", "socket", "urllib3", "http", "psycopg")


def _modules() -> list[Path]:
    return sorted(p for p in PACKAGE.rglob("*.py") if p.parent != PACKAGE)


def _imports(path: Path) -> list[tuple[int, str]]:
    found = []
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.append((node.lineno, node.module))
    return found


def _stage(path: Path) -> str:
    return path.relative_to(PACKAGE).parts[0]


def test_only_the_entry_points_sit_at_the_top_of_the_package():
    top = sorted(p.name for p in PACKAGE.glob("*.py"))
    assert top == ["__init__.py", "__main__.py"]
    assert {p.name for p in PACKAGE.iterdir() if p.is_dir() and p.name != "__pycache__"} == set(
        STAGES
    )


def climbs(stage: str, imports: list[tuple[int, str]]) -> list[str]:
    """The imports of a module in ``stage`` that reach a higher stage, or sideways into
    another folder of the same stage."""
    found = []
    for line, module in imports:
        parts = module.split(".")
        if parts[0] != "notifier" or len(parts) < 2 or parts[1] not in STAGES:
            continue
        other = parts[1]
        if STAGES[other] > STAGES[stage] or (STAGES[other] == STAGES[stage] and other != stage):
            found.append(f"{line}: {module}")
    return found


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_run_downwards(path: Path):
    assert climbs(_stage(path), _imports(path)) == []


def test_a_climb_or_a_sideways_step_is_seen():
    assert climbs("engine", [(3, "notifier.service.cycle")]) == ["3: notifier.service.cycle"]
    assert climbs("ingest", [(4, "notifier.delivery.routing")]) == ["4: notifier.delivery.routing"]
    assert climbs("service", [(5, "notifier.engine.assess"), (6, "notifier.service.cycle")]) == []


@pytest.mark.parametrize("stage", ["physics", "core", "engine"])
def test_the_pure_stages_import_no_io_library(stage: str):
    found = [
        f"{path.relative_to(PACKAGE)}:{line} imports {module}"
        for path in (PACKAGE / stage).rglob("*.py")
        for line, module in _imports(path)
        if module.split(".")[0] in IO_LIBRARIES
    ]
    assert found == []


def test_storage_knows_nothing_of_delivery():
    found = [
        f"{path.name}:{line}"
        for path in (PACKAGE / "storage").rglob("*.py")
        for line, module in _imports(path)
        if module.startswith("notifier.delivery")
    ]
    assert found == []

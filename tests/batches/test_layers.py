"""No import runs against the layers: the store never imports the batch wing, the batch wing
never imports HTTP server code, the API or the worker process, and the engine imports nothing
of the service. Read from the source (every `import` and `from` statement, also inside
functions), so a lazy import cannot hide."""

from __future__ import annotations

import ast
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent.parent

FORBIDDEN = {
    "service/store": ("service.batches", "service.api", "service.cli", "worker", "fastapi"),
    "service/batches": ("service.api", "service.cli", "worker", "fastapi", "starlette"),
    "worker": ("service.api.routes", "service.cli"),
}


def imports_of(path: Path) -> set[str]:
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module)
    return found


def violations(folder: str, banned: tuple[str, ...]) -> list[str]:
    return [
        f"{path.relative_to(REPO)} imports {name}"
        for path in sorted((REPO / folder).rglob("*.py"))
        for name in sorted(imports_of(path))
        if any(name == b or name.startswith(b + ".") for b in banned)
    ]


def test_no_import_runs_against_the_layers():
    assert [v for folder, banned in FORBIDDEN.items() for v in violations(folder, banned)] == []


def test_the_engine_imports_nothing_of_the_service():
    outside = [
        v
        for v in violations("service/engine", ("service", "worker"))
        if not v.split(" imports ")[1].startswith("service.engine")
    ]
    assert outside == []


def test_the_check_sees_a_forbidden_import(tmp_path, monkeypatch):
    """The check is not vacuous: a lazy import inside a function is found."""
    (tmp_path / "service" / "store").mkdir(parents=True)
    (tmp_path / "service" / "store" / "bad.py").write_text(
        "def f():\n    from service.batches.status import BatchCounts\n", encoding="utf-8"
    )
    monkeypatch.setattr(__import__(__name__, fromlist=["REPO"]), "REPO", tmp_path)
    assert violations("service/store", FORBIDDEN["service/store"]) == [
        "service/store/bad.py imports service.batches.status"
    ]


def test_batch_wing_spells_out_no_route_path():
    """Links are named by the API (status.py takes the batch's URL)."""
    for path in (REPO / "service" / "batches").rglob("*.py"):
        assert "/v1/" not in path.read_text(encoding="utf-8"), path

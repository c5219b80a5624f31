"""The served OpenAPI document as a lookup table: what each path and method accepts.

The request guard (415 for undeclared media types) and the 405 handler (the
`Allow` header) read the same document clients read, so what the API enforces
and what it publishes cannot drift apart.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

_PARAMETER = re.compile(r"\\\{[^/]+?\\\}")


@dataclass(frozen=True)
class Operation:
    method: str
    pattern: re.Pattern[str]
    body_media: frozenset[str]


def _compile(path: str) -> re.Pattern[str]:
    return re.compile("^" + _PARAMETER.sub("[^/]+", re.escape(path)) + "$")


def operations(app: Any) -> list[Operation]:
    """Every documented operation of `app`, built once from its OpenAPI document."""
    table: list[Operation] | None = getattr(app.state, "contract_operations", None)
    if table is None:
        table = []
        for path, entries in app.openapi().get("paths", {}).items():
            pattern = _compile(path)
            for method, operation in entries.items():
                if not isinstance(operation, dict):
                    continue
                content = operation.get("requestBody", {}).get("content", {})
                table.append(Operation(method.upper(), pattern, frozenset(content)))
        app.state.contract_operations = table
    return table


def find(app: Any, method: str, path: str) -> Operation | None:
    """The documented operation for `method` on `path`, if there is one."""
    for operation in operations(app):
        if operation.method == method and operation.pattern.match(path):
            return operation
    return None


def allowed_methods(app: Any, path: str) -> list[str]:
    """The methods documented for `path` (for a 405's Allow header)."""
    return sorted({op.method for op in operations(app) if op.pattern.match(path)})

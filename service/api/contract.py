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


NUL_FREE = "^[^\\x00]*$"
# Any JSON value without a NUL character in a string or a member name.
JSON_VALUE: dict[str, Any] = {
    "description": "Any JSON value; no string or member name holds U+0000.",
    "anyOf": [
        {"type": "string", "pattern": NUL_FREE},
        {"type": ["number", "boolean", "null"]},
        {"type": "array", "items": {"$ref": "#/components/schemas/JsonValue"}},
        {
            "type": "object",
            "propertyNames": {"pattern": NUL_FREE},
            "additionalProperties": {"$ref": "#/components/schemas/JsonValue"},
        },
    ],
}


def forbid_nul(schema: dict[str, Any]) -> None:
    """State in an OpenAPI document what the request guard enforces: no NUL in any string.

    Strings without a pattern get one; free-form objects get NUL-free member
    names and values. Patterned strings already exclude NUL where they are declared.
    """
    schema.setdefault("components", {}).setdefault("schemas", {})["JsonValue"] = JSON_VALUE

    def visit(node: Any, members: bool = False) -> None:
        """`members`: `node` maps property names to schemas (any name is a schema)."""
        if isinstance(node, list):
            for item in node:
                visit(item)
            return
        if not isinstance(node, dict):
            return
        if members:
            for value in node.values():
                visit(value)
            return
        kind = node.get("type")
        if (kind == "string" or (isinstance(kind, list) and "string" in kind)) and (
            "pattern" not in node and "enum" not in node and "format" not in node
        ):
            node["pattern"] = NUL_FREE
        if kind == "object" and "properties" not in node and node.get("additionalProperties") in (
            None,
            True,
        ):
            node["propertyNames"] = {"pattern": NUL_FREE}
            node["additionalProperties"] = {"$ref": "#/components/schemas/JsonValue"}
        for key, value in node.items():
            if key not in ("example", "examples", "default", "const", "enum"):
                visit(value, members=key in ("properties", "schemas"))

    visit(schema.get("paths", {}))
    visit({k: v for k, v in schema["components"]["schemas"].items() if k != "JsonValue"}, True)

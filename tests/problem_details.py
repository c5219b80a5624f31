"""An RFC 9457 checker used by the API tests.

RFC 9457 section 3.1 defines the members: "type" (a URI reference, default
"about:blank"), "status" (the HTTP status code, a JSON number), "title" (a
short human-readable summary), "detail" (specific to this occurrence) and
"instance" (a URI reference); section 3 gives the media type
application/problem+json.
"""

from __future__ import annotations

from typing import Any
from urllib.parse import urlsplit


def assert_problem(response: Any, status: int) -> dict[str, Any]:
    """Check `response` is a problem document for `status`, member by member."""
    assert response.status_code == status, response.text
    assert response.headers["content-type"].startswith("application/problem+json")
    body = response.json()
    assert isinstance(body, dict)
    assert isinstance(body["type"], str) and urlsplit(body["type"]).scheme in ("https", "")
    assert body["status"] == status and isinstance(body["status"], int)
    assert isinstance(body["title"], str) and body["title"]
    assert isinstance(body["detail"], str) and body["detail"]
    if "instance" in body:
        assert isinstance(body["instance"], str) and body["instance"].startswith("/")
    return body

"""`GET /`: a small landing page, so a newcomer opening the address sees where to go."""

from __future__ import annotations

from fastapi import APIRouter
from fastapi.responses import HTMLResponse

from service import __version__

router = APIRouter()

PAGE = """<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>whichsense</title>
<style>
  body {{ font: 16px/1.5 system-ui, sans-serif; color: #1d2430; background: #fbfbf8;
         max-width: 40rem; margin: 3rem auto; padding: 0 1rem; }}
  h1 {{ font-size: 1.6rem; margin-bottom: 0.25rem; }}
  p.lead {{ color: #4a5260; margin-top: 0; }}
  ul {{ list-style: none; padding: 0; }}
  li {{ padding: 0.6rem 0; border-top: 1px solid #e2e2dc; }}
  a {{ color: #1f4f8a; font-weight: 600; }}
  a:focus {{ outline: 3px solid #f2b134; outline-offset: 2px; }}
  small {{ color: #5d6470; }}
</style>
</head>
<body>
<main>
<h1>whichsense</h1>
<p class="lead">Which sense of an ambiguous term each occurrence in your documents carries.
Version {version}.</p>
<nav aria-label="Where to go">
<ul>
  <li><a href="/review">Review queue</a><br>
      <small>occurrences the service was unsure of, for a person to decide</small></li>
  <li><a href="/docs">API documentation</a><br>
      <small>every operation, interactive; send
      <code>Authorization: Bearer &lt;key&gt;</code></small></li>
  <li><a href="/openapi.json">OpenAPI document</a><br>
      <small>the same, machine-readable (OpenAPI 3.1)</small></li>
  <li><a href="/readyz">Readiness</a> &middot; <a href="/metrics">Metrics</a><br>
      <small>for operators and load balancers</small></li>
</ul>
</nav>
</main>
</body>
</html>
"""


@router.get("/", include_in_schema=False, response_class=HTMLResponse)
def home() -> HTMLResponse:
    return HTMLResponse(PAGE.format(version=__version__))

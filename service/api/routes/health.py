"""Liveness and readiness, for orchestrators and load balancers."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse
from sqlalchemy import text

from service.api.problems import problem_response
from service.config import resolve_model_dir
from service.engine.model_files import model_dir_problem
from service.store.database import DatabaseNotMigrated, require_migrated

router = APIRouter(tags=["operations"])


@router.get("/healthz", summary="The process is up")
def healthz() -> dict[str, str]:
    return {"status": "ok"}


@router.get("/readyz", summary="Database reachable and migrated, model loadable")
def readyz(request: Request) -> JSONResponse:
    settings = request.app.state.settings
    checks: dict[str, str] = {}
    try:
        with request.app.state.read_sessions() as session:
            session.execute(text("SELECT 1"))
        require_migrated(settings.database_url)
        checks["database"] = "ok"
    except DatabaseNotMigrated as exc:
        checks["database"] = str(exc)
    except Exception as exc:  # any driver error means "not ready", never a crash
        checks["database"] = f"unreachable: {type(exc).__name__}"
    problem = model_dir_problem(resolve_model_dir(settings))
    checks["model"] = problem or "ok"
    if all(value == "ok" for value in checks.values()):
        return JSONResponse({"status": "ready", "checks": checks})
    failing = ", ".join(f"{k}: {v}" for k, v in checks.items() if v != "ok")
    return problem_response(request, 503, failing, checks=checks)

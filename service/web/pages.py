"""The review pages: sign-in, queue, one item, new senses, quality figures.

Every page needs a signed-in reviewer (otherwise 303 to the sign-in page); every
POST carries the session's CSRF token in a hidden field, and a missing or wrong
token is refused with 403 before anything is read or written. Document text only
ever reaches a template as data (Jinja2 autoescaping, no `|safe`), and the pages
send a Content-Security-Policy that allows no inline script or style.
"""

from __future__ import annotations

import hmac
import secrets
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any
from urllib.parse import parse_qs, urlencode

from fastapi import APIRouter, Depends, FastAPI, Request
from fastapi import Path as UrlPath
from fastapi.responses import RedirectResponse, Response
from fastapi.staticfiles import StaticFiles
from fastapi.templating import Jinja2Templates
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.api.deps import get_session, get_settings_dep
from service.api.problems import ProblemError
from service.api.routes.review import MAX_ID, run_decision, run_undo
from service.config import Settings
from service.review import quality as review_quality
from service.review import senses as review_senses
from service.review.decisions import rescore_term
from service.review.queue import (
    CLAIM_SECONDS,
    ORDERS,
    Order,
    QueueFilter,
    claim_items,
    get_item,
    list_queue,
    queue_counts,
    release_claim,
    sync_queue,
    team_inventories,
)
from service.review.views import item_view, snippet
from service.store.clock import database_now
from service.store.errors import Conflict, NotFound
from service.store.keys import authenticate, grants
from service.store.models import (
    BatchDocument,
    BatchResult,
    Inventory,
    ReviewDecision,
    ReviewItem,
)
from service.web import sessions
from service.web.figures import bar_chart, line_chart

HERE = Path(__file__).parent
templates = Jinja2Templates(directory=str(HERE / "templates"))
router = APIRouter(prefix="/review", include_in_schema=False)
MAX_FORM_BYTES = 64_000
CSP = (
    "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "form-action 'self'; frame-ancestors 'none'; base-uri 'none'"
)


class SignInRequired(Exception):
    """No live session: pages answer with a redirect to the sign-in page."""


def _html(request: Request, name: str, context: dict[str, Any], status: int = 200) -> Response:
    response = templates.TemplateResponse(request, name, context, status_code=status)
    response.headers["Content-Security-Policy"] = CSP
    response.headers["X-Content-Type-Options"] = "nosniff"
    response.headers["Referrer-Policy"] = "same-origin"
    response.headers["Cache-Control"] = "no-store"
    return response


def reviewer(request: Request, session: Session = Depends(get_session)) -> sessions.Reviewer:
    found = sessions.load_session(session, request.cookies.get(sessions.COOKIE_NAME))
    session.commit()
    if found is None:
        raise SignInRequired()
    return found


async def form(request: Request) -> dict[str, str]:
    """An application/x-www-form-urlencoded body as single values (first of each name)."""
    body = await request.body()
    if len(body) > MAX_FORM_BYTES:
        raise ProblemError(413, f"a form post is at most {MAX_FORM_BYTES} bytes")
    try:
        parsed = parse_qs(body.decode("utf-8"), keep_blank_values=True, strict_parsing=False)
    except UnicodeDecodeError:
        raise ProblemError(400, "the form is not UTF-8") from None
    return {name: values[0] for name, values in parsed.items()}


def _refused(request: Request) -> Response:
    return _html(
        request,
        "message.html",
        {
            "title": "Form refused",
            "message": "The form's security token is missing or stale. "
            "Reload the page and try again.",
            "reviewer": None,
        },
        status=403,
    )


class FormRefused(Exception):
    """A form post without the session's CSRF token: 403 before anything is read or written."""


@dataclass(frozen=True)
class Posted:
    """A form post of a signed-in reviewer whose CSRF token matched."""

    fields: dict[str, str]
    who: sessions.Reviewer


def posted(
    fields: dict[str, str] = Depends(form), who: sessions.Reviewer = Depends(reviewer)
) -> Posted:
    if not sessions.csrf_ok(who, fields.get("csrf")):
        raise FormRefused()
    return Posted(fields, who)


def _filter_from(values: dict[str, str] | Any) -> tuple[QueueFilter, Order]:
    def pick(name: str) -> str | None:
        value = values.get(name)
        # a value no stored name can have (NUL, over-long) would only reach the database
        if not value or "\x00" in value or len(value) > 200:
            return None
        return value

    order = values.get("order") or "useful"
    if order not in ORDERS:
        order = "useful"
    return QueueFilter(pick("inventory"), pick("term"), pick("batch")), order  # type: ignore[return-value]


def _query(chosen: QueueFilter, order: str) -> str:
    values = {
        "inventory": chosen.inventory,
        "term": chosen.term,
        "batch": chosen.batch,
        "order": order,
    }
    return urlencode({k: v for k, v in values.items() if v})


def _see_other(url: str) -> RedirectResponse:
    return RedirectResponse(url, status_code=303)


# -- sign-in -----------------------------------------------------------------------------------


@router.get("/sign-in")
def sign_in_page(request: Request, error: str | None = None) -> Response:
    token = request.cookies.get(sessions.SIGN_IN_COOKIE) or secrets.token_urlsafe(24)
    response = _html(request, "sign_in.html", {"csrf": token, "error": error, "reviewer": None})
    response.set_cookie(
        sessions.SIGN_IN_COOKIE,
        token,
        httponly=True,
        samesite="strict",
        secure=request.url.scheme == "https",
        path="/review",
    )
    return response


@router.post("/sign-in")
def sign_in(
    request: Request,
    fields: dict[str, str] = Depends(form),
    session: Session = Depends(get_session),
) -> Response:
    expected = request.cookies.get(sessions.SIGN_IN_COOKIE) or ""
    if not expected or not hmac.compare_digest(expected, fields.get("csrf", "")):
        return _refused(request)
    key = authenticate(session, fields.get("api_key", "").strip())
    if key is None or not grants(key.scope, "review"):
        message = (
            "That key is unknown or revoked."
            if key is None
            else f"A key of scope '{key.scope}' cannot review; use a review or admin key."
        )
        return _html(
            request,
            "sign_in.html",
            {"csrf": expected, "error": message, "reviewer": None},
            status=401 if key is None else 403,
        )
    cookie, _row = sessions.start_session(session, key, key.team_id)
    session.commit()
    response = _see_other("/review")
    response.set_cookie(
        sessions.COOKIE_NAME,
        cookie,
        max_age=sessions.SESSION_SECONDS,
        httponly=True,
        samesite="strict",
        secure=request.url.scheme == "https",
        path="/review",
    )
    response.delete_cookie(sessions.SIGN_IN_COOKIE, path="/review")
    return response


@router.post("/sign-out")
def sign_out(
    request: Request,
    post: Posted = Depends(posted),
    session: Session = Depends(get_session),
) -> Response:
    who = post.who
    sessions.end_session(session, who.session_id)
    session.commit()
    response = _see_other("/review/sign-in")
    response.delete_cookie(sessions.COOKIE_NAME, path="/review")
    return response


# -- queue -------------------------------------------------------------------------------------


@router.get("")
def queue_page(
    request: Request,
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    who: sessions.Reviewer = Depends(reviewer),
) -> Response:
    sync_queue(session, settings, who.team_id)
    session.commit()
    chosen, order = _filter_from(request.query_params)
    counts = queue_counts(session, who.team_id, chosen)
    items = list_queue(session, who.team_id, chosen, order, limit=40)
    # The filter menus list every term and batch of the chosen inventory, not only the shown ones.
    menus = queue_counts(session, who.team_id, QueueFilter(chosen.inventory))
    terms = sorted({(i, t) for i, t, _ in menus.per_term})
    batches = [b for b, _, _ in menus.per_batch]
    return _html(
        request,
        "queue.html",
        {
            "reviewer": who,
            "chosen": chosen,
            "order": order,
            "orders": ORDERS,
            "counts": counts,
            "items": items,
            "inventories": team_inventories(session, who.team_id),
            "inventory_names": dict(
                session.execute(
                    select(Inventory.id, Inventory.name).where(Inventory.team_id == who.team_id)
                ).all()
            ),
            "terms": sorted({t for _, t in terms}),
            "batches": sorted(batches),
            "query": _query(chosen, order),
            "progress": _progress(session, who, chosen),
            "notice": request.query_params.get("notice"),
        },
    )


def _progress(session: Session, who: sessions.Reviewer, chosen: QueueFilter) -> dict[str, int]:
    now = database_now(session)
    start = now.replace(hour=0, minute=0, second=0, microsecond=0)
    decided = session.scalar(
        select(func.count())
        .select_from(ReviewDecision)
        .where(
            ReviewDecision.team_id == who.team_id,
            ReviewDecision.key_id == who.key_id,
            ReviewDecision.undone_at.is_(None),
            ReviewDecision.created_at >= start,
        )
    )
    return {
        "decided_today": int(decided or 0),
        "pending": queue_counts(session, who.team_id, chosen).total,
    }


def _next_item(
    session: Session, who: sessions.Reviewer, chosen: QueueFilter, order: Order
) -> Response:
    items = claim_items(
        session,
        who.team_id,
        who.key_id,
        chosen,
        order=order,
        count=1,
        exclude=sessions.skipped(session, who.session_id),
    )
    session.commit()
    query = _query(chosen, order)
    if not items:
        return _see_other("/review?" + "&".join(filter(None, ["notice=done", query])))
    return _see_other(f"/review/items/{items[0].id}" + (f"?{query}" if query else ""))


@router.post("/next")
def next_item(
    request: Request,
    post: Posted = Depends(posted),
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
) -> Response:
    fields, who = post.fields, post.who
    sync_queue(session, settings, who.team_id)
    sessions.forget_skips(session, who.session_id)
    session.commit()
    chosen, order = _filter_from(fields)
    return _next_item(session, who, chosen, order)


# -- one item ----------------------------------------------------------------------------------


def _not_found(request: Request, who: sessions.Reviewer, what: str) -> Response:
    return _html(
        request,
        "message.html",
        {"title": "Not found", "message": what, "reviewer": who},
        status=404,
    )


@router.get("/items/{item_id}")
def item_page(
    item_id: Annotated[int, UrlPath(ge=1, le=MAX_ID)],
    request: Request,
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    who: sessions.Reviewer = Depends(reviewer),
) -> Response:
    started = time.perf_counter()
    try:
        item = get_item(session, who.team_id, item_id)
    except NotFound as exc:
        return _not_found(request, who, str(exc))
    view = item_view(session, settings, item)
    session.commit()
    chosen, order = _filter_from(request.query_params)
    response = _html(
        request,
        "item.html",
        {
            "reviewer": who,
            "view": view,
            "item": item,
            "chosen": chosen,
            "order": order,
            "query": _query(chosen, order),
            "progress": _progress(session, who, chosen),
            "claimed": item.claimed_by == who.key_id,
            "claim_minutes": CLAIM_SECONDS // 60,
            "rationale_view": "rollout"
            if request.query_params.get("view") == "rollout"
            else "attention",
        },
    )
    response.headers["Server-Timing"] = f"app;dur={(time.perf_counter() - started) * 1000:.1f}"
    return response


@router.post("/items/{item_id}/decide")
def decide(
    item_id: Annotated[int, UrlPath(ge=1, le=MAX_ID)],
    request: Request,
    post: Posted = Depends(posted),
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
) -> Response:
    fields, who = post.fields, post.who
    choice = fields.get("sense", "")
    chosen, order = _filter_from(fields)
    try:
        run_decision(
            session,
            settings,
            who.team_id,
            who.key_id,
            item_id,
            None if choice == "none" else choice,
        )
    except NotFound as exc:
        return _not_found(request, who, str(exc))
    except (Conflict, ProblemError) as exc:
        session.rollback()
        return _html(
            request,
            "message.html",
            {"title": "Not recorded", "message": str(exc), "reviewer": who},
            status=409 if isinstance(exc, Conflict) else 422,
        )
    return _next_item(session, who, chosen, order)


@router.post("/items/{item_id}/skip")
def skip(
    item_id: Annotated[int, UrlPath(ge=1, le=MAX_ID)],
    request: Request,
    post: Posted = Depends(posted),
    session: Session = Depends(get_session),
) -> Response:
    fields, who = post.fields, post.who
    try:
        item = get_item(session, who.team_id, item_id)
    except NotFound as exc:
        return _not_found(request, who, str(exc))
    release_claim(session, item, who.key_id)
    sessions.remember_skip(session, who.session_id, item_id)
    session.commit()
    chosen, order = _filter_from(fields)
    return _next_item(session, who, chosen, order)


@router.post("/undo")
def undo(
    request: Request,
    post: Posted = Depends(posted),
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
) -> Response:
    fields, who = post.fields, post.who
    chosen, order = _filter_from(fields)
    try:
        outcome = run_undo(session, settings, who.team_id, who.key_id)
    except NotFound as exc:
        return _not_found(request, who, str(exc))
    query = _query(chosen, order)
    return _see_other(
        f"/review/items/{outcome['decision']['item_id']}" + (f"?{query}" if query else "")
    )


# -- new senses --------------------------------------------------------------------------------


def _inventory(session: Session, who: sessions.Reviewer, name: str | None) -> Inventory | None:
    names = team_inventories(session, who.team_id)
    chosen = name if name in names else (names[0] if names else None)
    if chosen is None:
        return None
    return session.scalars(
        select(Inventory).where(Inventory.name == chosen, Inventory.team_id == who.team_id)
    ).one_or_none()


def _context_of(session: Session, item: ReviewItem) -> tuple[str, str, str]:
    row = session.get(BatchResult, item.result_id)
    if row is None:
        return ("", "", "")
    document = session.scalars(
        select(BatchDocument).where(
            BatchDocument.batch_id == row.batch_id, BatchDocument.document_id == row.document_id
        )
    ).one()
    text = next((t for n, t in document.fields if n == row.field), "")
    return snippet(text, int(row.result["start"]), int(row.result["end"]))


@router.get("/senses")
def senses_page(
    request: Request,
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
    who: sessions.Reviewer = Depends(reviewer),
) -> Response:
    sync_queue(session, settings, who.team_id)
    session.commit()
    inventory = _inventory(session, who, request.query_params.get("inventory"))
    clusters = []
    if inventory is not None:
        for cluster in review_senses.find_clusters(session, who.team_id, inventory):
            members = [session.get(ReviewItem, i) for i in cluster.item_ids]
            clusters.append(
                {
                    "cluster": cluster,
                    "contexts": [
                        _context_of(session, m) for m in members[: review_senses.CENTRAL_SHOWN] if m
                    ],
                    "ids": ",".join(str(i) for i in cluster.item_ids),
                }
            )
    return _html(
        request,
        "senses.html",
        {
            "reviewer": who,
            "inventory": inventory,
            "inventories": team_inventories(session, who.team_id),
            "clusters": clusters,
            "can_edit": grants(who.scope, "admin"),
            "notice": request.query_params.get("notice"),
        },
    )


@router.post("/senses")
def create_sense(
    request: Request,
    post: Posted = Depends(posted),
    session: Session = Depends(get_session),
    settings: Settings = Depends(get_settings_dep),
) -> Response:
    fields, who = post.fields, post.who
    if not grants(who.scope, "admin"):
        return _html(
            request,
            "message.html",
            {
                "title": "Not allowed",
                "message": "Adding a sense edits the inventory: sign in with an admin key.",
                "reviewer": who,
            },
            status=403,
        )
    inventory = _inventory(session, who, fields.get("inventory"))
    if inventory is None:
        return _not_found(request, who, "no such inventory")
    try:
        ids = [int(i) for i in fields.get("items", "").split(",") if i.strip()]
        if any(not 1 <= i <= MAX_ID for i in ids):
            raise ValueError("an item id is out of range")
        decisions = review_senses.create_sense(
            session,
            who.team_id,
            who.key_id,
            inventory,
            fields.get("term", ""),
            fields.get("sense_id", "").strip(),
            fields.get("gloss", ""),
            ids,
        )
    except (ValueError, Conflict) as exc:
        session.rollback()
        return _html(
            request,
            "message.html",
            {"title": "Sense not added", "message": str(exc), "reviewer": who},
            status=422,
        )
    except NotFound as exc:
        session.rollback()
        return _not_found(request, who, str(exc))
    session.commit()
    if decisions:
        item = session.get(ReviewItem, decisions[0].item_id)
        if item is not None:
            rescore_term(session, settings, item, decisions[0].id)
            session.commit()
    return _see_other(
        "/review/senses?"
        + urlencode({"inventory": inventory.name, "notice": f"added {fields.get('sense_id', '')}"})
    )


# -- quality -----------------------------------------------------------------------------------


@router.get("/quality")
def quality_page(
    request: Request,
    session: Session = Depends(get_session),
    who: sessions.Reviewer = Depends(reviewer),
) -> Response:
    inventory = _inventory(session, who, request.query_params.get("inventory"))
    figures = None
    if inventory is not None:
        found = review_quality.quality(session, who.team_id, inventory.id)
        figures = {
            "quality": found,
            "per_day": bar_chart([(d.isoformat(), n) for d, n in found.per_day]),
            "share": line_chart(found.share_points),
        }
    return _html(
        request,
        "quality.html",
        {
            "reviewer": who,
            "inventory": inventory,
            "inventories": team_inventories(session, who.team_id),
            "figures": figures,
        },
    )


def install(app: FastAPI) -> None:
    """Add the pages, their assets and the sign-in redirect to the API's app."""
    app.include_router(router)
    app.mount("/review/assets", StaticFiles(directory=str(HERE / "static")), name="review-assets")

    @app.exception_handler(FormRefused)
    async def _form_refused(request: Request, exc: FormRefused) -> Response:
        return _refused(request)

    @app.exception_handler(SignInRequired)
    async def _sign_in(request: Request, exc: SignInRequired) -> Response:
        return _see_other("/review/sign-in")

    @app.get("/review/", include_in_schema=False)
    def _slash() -> Response:
        return _see_other("/review")

"""The HTTP routes: lookups for bidders, models for data scientists.

Lookups parse their bodies with the same code as the CLI and answer with orjson,
bypassing pydantic on the hot path; writes are rare and validate with pydantic.
Every error a client can cause is answered as ``{"error": {"field", "reason"}}`` with
422 (bad field), 404 (unknown model), 401 (no or wrong token), 413 (body over its
endpoint's limit, see ``limits``) or 503 (store down on a write), never 500.
"""

from __future__ import annotations

import asyncio
import hmac
import os
import time
from typing import Any

import orjson
from fastapi import APIRouter, Depends, FastAPI, Query, Request, Response
from fastapi.exceptions import RequestValidationError
from starlette.exceptions import HTTPException

from windvane.errors import (
    BadRequest,
    NotAuthorized,
    StoreError,
    UnknownModel,
    WindvaneError,
)
from windvane.ingest.event_stream import decode_body, prepare
from windvane.inputs.deadline import DEADLINE_HEADER, header_deadline_ms
from windvane.inputs.json_body import loads
from windvane.inputs.openrtb import lookups_from_bid_request
from windvane.inputs.rtb_objects import identifier
from windvane.models.registry import Arm
from windvane.serving.fast_path import answer_lookup
from windvane.serving.http_errors import JSON, error_answer, fault_answer
from windvane.serving.schema import (
    LOOKUP_BODY,
    ActivateBody,
    ErrorBody,
    LookupAnswer,
    OpenRtbAnswer,
    parse_activation,
)
from windvane.serving.state import ServiceState

router = APIRouter()

ACTOR_HEADER = "x-windvane-actor"
ERRORS: dict[int | str, dict[str, Any]] = {
    401: {"model": ErrorBody, "description": "missing or wrong bearer token"},
    404: {"model": ErrorBody, "description": "unknown model or version"},
    422: {"model": ErrorBody, "description": "a field is missing or wrong; the body names it"},
}
BODY_ERRORS: dict[int | str, dict[str, Any]] = {
    **ERRORS,
    413: {"model": ErrorBody, "description": "the body is larger than this endpoint's limit"},
}


def _json_body(schema: str) -> dict[str, Any]:
    return {
        "requestBody": {
            "required": True,
            "content": {"application/json": {"schema": {"$ref": f"#/components/schemas/{schema}"}}},
        }
    }


def _state(request: Request) -> ServiceState:
    return request.app.state.windvane


def _json(data: Any, status: int = 200) -> Response:
    return Response(orjson.dumps(data), status_code=status, media_type="application/json")


async def _decode(request: Request) -> Any:
    return loads(await request.body(), BadRequest)


def _model(raw: object) -> str | None:
    if raw is None:
        return None
    if not isinstance(raw, str) or not raw:
        raise BadRequest("model", "must be a model name")
    return raw


@router.post(
    "/v1/lookup",
    summary="Features, model version and scores for one auction",
    response_model=LookupAnswer,
    responses=BODY_ERRORS,
    openapi_extra=_json_body(LOOKUP_BODY),
    tags=["lookup"],
)
async def lookup(request: Request) -> Response:
    # Served by FastLookup in front of the framework; this route documents it and serves
    # the same answer when the application is mounted without that wrapper.
    started = time.perf_counter()
    header = request.headers.get(DEADLINE_HEADER)
    body = await answer_lookup(
        _state(request).lookups, await request.body(), header.encode() if header else None, started
    )
    return Response(body, media_type=JSON)


@router.post(
    "/v1/lookup/openrtb",
    summary="Features and scores for each imp of an OpenRTB 2.5/2.6 BidRequest",
    response_model=OpenRtbAnswer,
    responses=ERRORS,
    openapi_extra={
        "requestBody": {
            "required": True,
            "description": "the BidRequest exactly as the exchange sent it (OpenRTB 2.5 or 2.6)",
            "content": {"application/json": {"schema": {"type": "object"}}},
        }
    },
    tags=["lookup"],
)
async def lookup_openrtb(
    request: Request,
    campaigns: str = Query("", description="candidate campaigns, comma-separated"),
    model: str | None = Query(None, description="model to score with"),
) -> Response:
    started = time.perf_counter()
    body = await _decode(request)
    deadline_ms = header_deadline_ms(request.headers.get(DEADLINE_HEADER))
    candidates = tuple(
        identifier(c, "campaigns", BadRequest) or "" for c in campaigns.split(",") if c
    )
    pairs = lookups_from_bid_request(body, candidates)
    # One read for every imp: they share the user and app, and must share what was stored.
    answers = await _state(request).lookups.lookup_many(
        [one for _, one in pairs], _model(model), deadline_ms, started
    )
    imps = [{"imp": imp_id, **answer} for (imp_id, _), answer in zip(pairs, answers, strict=True)]
    elapsed = round((time.perf_counter() - started) * 1000, 3)
    return _json({"id": body["id"], "imps": imps, "elapsed_ms": elapsed})


def require_writer(request: Request) -> str:
    """The bearer token guards every write; returns who is writing, for the audit trail."""
    state = _state(request)
    config = state.config
    if config.read_only:
        raise NotAuthorized("this service is read-only: writes are disabled")
    if not config.insecure_dev:
        header = request.headers.get("authorization", "")
        scheme, _, token = header.partition(" ")
        expected = config.token or ""
        if (
            scheme.lower() != "bearer"
            or not expected
            or not hmac.compare_digest(token.strip().encode(), expected.encode())
        ):
            raise NotAuthorized("send Authorization: Bearer <token> to write")
    return request.headers.get(ACTOR_HEADER) or "api"


@router.get("/v1/models", summary="Every model with its active split", tags=["models"])
async def list_models(request: Request) -> Response:
    registry = _state(request).registry
    names = await asyncio.to_thread(registry.models)
    result = []
    for name in names:
        split = await asyncio.to_thread(registry.active, name)
        result.append({"name": name, "active": None if split is None else split.to_dict()})
    return _json({"models": result})


@router.get(
    "/v1/models/{name}",
    summary="The active coefficients of a model, for bidders that score on their side",
    responses=ERRORS,
    tags=["models"],
)
async def get_model(request: Request, name: str) -> Response:
    registry = _state(request).registry
    split = await asyncio.to_thread(registry.active, name)
    if split is None:
        raise UnknownModel(f"no active model named {name!r}")
    arms = []
    for arm in split.arms:
        snapshot = await asyncio.to_thread(registry.snapshot, name, arm.version)
        arms.append({"version": arm.version, "weight": arm.weight,
                     "snapshot": snapshot.model_dump(mode="json", exclude_none=True)})  # fmt: skip
    return _json({"name": name, "split": split.to_dict(), "arms": arms})


@router.get(
    "/v1/models/{name}/history",
    summary="Published versions (when, checksum, who) and the audit trail",
    responses=ERRORS,
    tags=["models"],
)
async def model_history(request: Request, name: str) -> Response:
    registry = _state(request).registry
    versions = await asyncio.to_thread(registry.history, name)
    audit = await asyncio.to_thread(registry.audit, name)
    split = await asyncio.to_thread(registry.active, name)
    return _json({"name": name, "versions": versions, "active": split and split.to_dict(),
                  "audit": audit})  # fmt: skip


@router.post(
    "/v1/models/{name}/snapshots",
    summary="Publish a new version (validated first; a refused snapshot changes nothing)",
    responses=BODY_ERRORS,
    status_code=201,
    openapi_extra={
        "requestBody": {
            "required": True,
            "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Snapshot"}}},
        }
    },
    tags=["models"],
)
async def publish(
    request: Request,
    name: str,
    activate: bool = Query(False, description="also make it the only active arm"),
    actor: str = Depends(require_writer),
) -> Response:
    state = _state(request)
    body = await request.body()
    meta = await asyncio.to_thread(state.registry.publish, name, body, actor, activate)
    await state.refresh_models()
    return _json({"name": name, **meta, "active": activate}, status=201)


@router.post(
    "/v1/models/{name}/activate",
    summary="Set the traffic split: versions and weights, the first is the control",
    responses=BODY_ERRORS,
    openapi_extra=_json_body(ActivateBody.__name__),
    tags=["models"],
)
async def activate(request: Request, name: str, actor: str = Depends(require_writer)) -> Response:
    # The body is read here, after the token is checked, not as a parameter: FastAPI
    # parses body parameters before dependencies, telling a stranger what it thinks of it.
    state = _state(request)
    body = parse_activation(await request.body())
    arms = [Arm(a.version, a.weight) for a in body.arms]
    split = await asyncio.to_thread(state.registry.activate, name, arms, actor)
    await state.refresh_models()
    return _json({"name": name, "active": split.to_dict()})


@router.post(
    "/v1/models/{name}/rollback",
    summary="Restore the split that was active before the current one",
    responses=ERRORS,
    tags=["models"],
)
async def rollback(request: Request, name: str, actor: str = Depends(require_writer)) -> Response:
    state = _state(request)
    split = await asyncio.to_thread(state.registry.rollback, name, actor)
    await state.refresh_models()
    return _json({"name": name, "active": split.to_dict()})


@router.post(
    "/v1/events",
    summary="Append events to the stream (a JSON array or JSON Lines); bad ones are listed",
    responses=BODY_ERRORS,
    openapi_extra={
        "requestBody": {
            "required": True,
            "description": "events as in the log format: a JSON array, or one JSON object per line",
            "content": {
                "application/json": {"schema": {"type": "array", "items": {"type": "object"}}},
                "application/x-ndjson": {"schema": {"type": "string"}},
            },
        }
    },
    tags=["events"],
)
async def post_events(request: Request, actor: str = Depends(require_writer)) -> Response:
    state = _state(request)
    if state.stream is None:
        raise BadRequest("", "this service has no event stream: start it with --stream redis://...")
    items = decode_body(await request.body())
    accepted, rejected = prepare(items, state.stream.shards)
    if accepted:
        await state.stream.append(accepted)
    body = {"accepted": len(accepted), "rejected": [r.to_dict() for r in rejected]}
    return _json(body, status=200 if accepted or not rejected else 422)


@router.get("/v1/health", summary="Whether the store answers, and what is loaded", tags=["ops"])
async def health(request: Request) -> Response:
    state = _state(request)
    try:
        async with asyncio.timeout(0.5):
            reachable = await state.async_store.ping()
    except (TimeoutError, StoreError):
        reachable = False
    body = {
        "status": "ok" if reachable else "degraded",
        "store": "ok" if reachable else "unreachable",
        "generation": state.generation,
        "pid": os.getpid(),
        "features": state.plan.feature_names(),
        "models": state.models.names(),
        "lookups_without_store": state.lookups.store_misses,
    }
    if state.stream is not None:
        try:
            body["ingest"] = await asyncio.to_thread(state.stream.statuses)
        except StoreError:
            body["ingest"] = None
    return _json(body, status=200 if reachable else 503)


def install_error_handlers(app: FastAPI) -> None:
    """Route the framework's exceptions through ``http_errors``, the one mapping.

    That covers its own 404 and 405 and, last, any other exception: a 500 in the same
    shape, which the framework then re-raises for the server to log.
    """

    async def mapped(request: Request, exc: Exception) -> Response:
        answer = error_answer(exc)
        if answer is None:
            raise exc
        return _error_response(*answer)

    async def fault(request: Request, exc: Exception) -> Response:
        return _error_response(*fault_answer())

    app.add_exception_handler(WindvaneError, mapped)
    app.add_exception_handler(HTTPException, mapped)
    app.add_exception_handler(Exception, fault)

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError) -> Response:
        first = exc.errors()[0]
        field = ".".join(str(p) for p in first.get("loc", ()) if p != "body")
        return await mapped(request, BadRequest(field, str(first.get("msg", "invalid"))))

    del _validation


def _error_response(status: int, body: bytes, headers: dict[str, str]) -> Response:
    return Response(body, status_code=status, media_type=JSON, headers=headers)


__all__ = ["install_error_handlers", "router"]

"""The FastAPI application: routes from ``api``, state from ``service_state``, docs at /docs."""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from importlib import metadata
from typing import Any

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi
from pydantic.json_schema import models_json_schema

from windvane.models.snapshot import Snapshot
from windvane.serving.config import ServiceConfig
from windvane.serving.fast_path import FastLookup
from windvane.serving.limits import BodyLimit
from windvane.serving.routes import install_error_handlers, router
from windvane.serving.schema import ActivateBody, lookup_body_schemas
from windvane.serving.state import ServiceState

DESCRIPTION = """\
Behavioural features, model coefficients and scores for a real-time bidder.

`POST /v1/lookup` answers one auction within its deadline (here {deadline_ms:g} ms unless
the call says otherwise): features shared by all candidates, per-campaign features, the
model version and traffic arm used, and a score per candidate. When the store is slow
or down, the answer still arrives in time with `"stored": "missing"` and scores from
the snapshot's defaults.
Writes (publishing, activating, rolling back) need `Authorization: Bearer <token>`.
Every error is `{{"error": {{"field", "reason"}}}}`; a body over its endpoint's limit is a 413.
"""


def create_app(config: ServiceConfig) -> FastAPI:
    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        state = await ServiceState.start(config)
        app.state.windvane = state
        try:
            yield
        finally:
            await state.close()

    app = FastAPI(
        title="windvane",
        version=metadata.version("windvane"),
        description=DESCRIPTION.format(deadline_ms=config.deadline_ms),
        lifespan=lifespan,
    )
    app.include_router(router)
    install_error_handlers(app)
    app.add_middleware(BodyLimit, routes=config.body_limits.by_route())

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is None:
            schema = get_openapi(
                title=app.title, version=app.version, description=app.description,
                routes=app.routes,
            )  # fmt: skip
            _, definitions = models_json_schema(
                [(Snapshot, "validation"), (ActivateBody, "validation")],
                ref_template="#/components/schemas/{model}",
            )
            components = schema.setdefault("components", {}).setdefault("schemas", {})
            components.update(definitions.get("$defs", {}))
            components.update(lookup_body_schemas("#/components/schemas/{name}"))
            app.openapi_schema = schema
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]
    return app


def create_asgi(config: ServiceConfig) -> FastLookup:
    """What uvicorn serves: the application behind the lookup fast path."""
    return FastLookup(create_app(config), config.body_limits.lookup)


def app_from_environment() -> FastLookup:
    """The factory uvicorn calls in each worker process (``--workers N``)."""
    return create_asgi(ServiceConfig.from_environment())

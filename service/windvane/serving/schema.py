"""Bodies of the HTTP API for the OpenAPI document, each written once.

The lookup body is the msgspec struct the fast path decodes with
(``inputs.lookup_request.LookupBody``); its JSON Schema is generated from it, so the
documented limits are the enforced ones. The answers and the rare write bodies are
pydantic models here; write endpoints validate with them, after their token is checked.
"""

from __future__ import annotations

from typing import Any

import msgspec
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from windvane.errors import BadSnapshot
from windvane.inputs.json_body import loads
from windvane.inputs.lookup_request import LookupBody

LOOKUP_BODY = LookupBody.__name__


class ModelUsed(BaseModel):
    name: str
    version: str
    arm: int = Field(description="index of the traffic arm; 0 is the control")
    weight: float


class LookupAnswer(BaseModel):
    ts: float
    user: str | None
    app: str | None
    restricted: bool = Field(description="lmt or coppa: no per-user features were read")
    stored: str = Field(description="ok, or missing when the store did not answer in time")
    features: dict[str, Any] = Field(description="features shared by every candidate")
    campaigns: dict[str, dict[str, Any]] = Field(description="per-campaign features")
    model: ModelUsed | None = None
    scores: dict[str, float] | None = Field(None, description="score per candidate campaign")
    score: float | None = Field(None, description="score when no candidates were given")
    elapsed_ms: float = Field(description="server-side time for this lookup")


class ImpAnswer(LookupAnswer):
    imp: str = Field(description="the OpenRTB imp.id")


class OpenRtbAnswer(BaseModel):
    id: str = Field(description="the BidRequest id")
    imps: list[ImpAnswer]
    elapsed_ms: float


class ArmBody(BaseModel):
    model_config = ConfigDict(extra="forbid")

    version: str
    weight: float = Field(gt=0, allow_inf_nan=False)


class ActivateBody(BaseModel):
    """The new traffic split; the first arm is the control."""

    model_config = ConfigDict(extra="forbid")

    arms: list[ArmBody] = Field(min_length=1)


def parse_activation(body: bytes) -> ActivateBody:
    """Validate an activation body, or raise ``BadSnapshot`` naming the field (``arms.0.weight``).

    Called by the route after the token check, never by the framework before it.
    """
    try:
        return ActivateBody.model_validate(loads(body, BadSnapshot))
    except ValidationError as exc:
        first = exc.errors(include_url=False)[0]
        raise BadSnapshot(".".join(str(p) for p in first["loc"]), first["msg"]) from None


class ErrorDetail(BaseModel):
    field: str = Field(description="dotted path of the bad field, empty for the whole body")
    reason: str


class ErrorBody(BaseModel):
    error: ErrorDetail


def lookup_body_schemas(ref_template: str) -> dict[str, Any]:
    """JSON Schemas of the lookup body and the objects it holds, keyed by name."""
    _, components = msgspec.json.schema_components((LookupBody,), ref_template=ref_template)
    return components

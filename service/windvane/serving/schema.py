"""Bodies of the HTTP API as pydantic models, for the OpenAPI document.

The lookup endpoints do not validate through these models (they parse with the same
plain-Python code as the CLI, which is faster); the models describe the bodies for
bidder engineers and generated clients. Write endpoints, which are rare, do validate
with them.
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field


class DeviceBody(BaseModel):
    """OpenRTB 2.5 Device fields windvane reads; w/h physical pixels."""

    ua: str | None = None
    model: str | None = None
    os: str | None = None
    w: float | None = Field(None, gt=0, description="screen width, physical pixels")
    h: float | None = Field(None, gt=0, description="screen height, physical pixels")
    pxratio: float | None = Field(None, gt=0, description="physical per device-independent pixel")
    lmt: int | None = Field(None, ge=0, le=1, description="1: limit ad tracking")


class GeoBody(BaseModel):
    country: str | None = Field(None, description="ISO 3166-1 alpha-3, e.g. DEU")
    lat: float | None = Field(None, ge=-90, le=90)
    lon: float | None = Field(None, ge=-180, le=180)
    utcoffset: int | None = Field(None, description="minutes east of UTC")


class SlotBody(BaseModel):
    w: float = Field(gt=0, description="creative width, device-independent pixels")
    h: float = Field(gt=0, description="creative height, device-independent pixels")


class LookupBody(BaseModel):
    """A lookup: who, when, on what device and slot, for which candidate campaigns."""

    user: str | None = Field(None, description="hashed device or user id")
    app: str | None = Field(None, description="app bundle id")
    ts: float | str | None = Field(
        None, description="epoch seconds or RFC 3339 with offset; default now"
    )
    device: DeviceBody | None = None
    geo: GeoBody | None = None
    slot: SlotBody | None = None
    campaigns: list[str] = Field(default_factory=list, description="candidate campaigns")
    coppa: int | None = Field(None, ge=0, le=1)
    model: str | None = Field(None, description="model to score with; default: the service's")
    deadline_ms: float | None = Field(
        None, gt=0, description="answer within this many ms (default 5); header X-Deadline-Ms"
    )


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


class ErrorDetail(BaseModel):
    field: str = Field(description="dotted path of the bad field, empty for the whole body")
    reason: str


class ErrorBody(BaseModel):
    error: ErrorDetail

"""The lookup service's settings: flags over environment over the configuration file over defaults.

The configuration file is TOML (``--config windvane.toml``) with the same names as the
flags, for example::

    store = "redis://10.0.0.5:6379/0"
    defs = "/etc/windvane/featuredefs"
    token = "..."               # or WINDVANE_TOKEN in the environment
    deadline_ms = 5
    default_model = "ctr"
    max_events_bytes = 8388608  # request body limits, see serving/limits.py

The service refuses to start with write endpoints enabled and no token, or a token no
``Authorization`` header can carry (blank, padded with whitespace, not printable
ASCII), unless it is started read-only or with ``insecure_dev`` for a local demo.
"""

from __future__ import annotations

import dataclasses
import os
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import orjson

from windvane.errors import BadRequest, UsageError
from windvane.inputs.deadline import DEFAULT_DEADLINE_MS, check_deadline_ms
from windvane.serving.limits import (
    DEFAULT_MAX_EVENTS_BYTES,
    DEFAULT_MAX_LOOKUP_BYTES,
    DEFAULT_MAX_MODEL_BYTES,
    DEFAULT_MAX_OPENRTB_BYTES,
    BodyLimits,
    check_limit,
)
from windvane.serving.reply_cache import MAX_AGE_LIMIT_S
from windvane.store.url import parse_store_url

ENVIRONMENT_KEY = "WINDVANE_SERVICE_CONFIG"


@dataclass(frozen=True)
class ServiceConfig:
    store: str = "memory://"
    defs: str = "featuredefs"
    # None follows the active generation (``windvane generations activate``).
    generation: str | None = None
    stream: str | None = None  # default: the store, when it is a Redis server
    shards: int | None = None
    host: str = "127.0.0.1"
    port: int = 8700
    workers: int = 1
    token: str | None = None
    read_only: bool = False
    insecure_dev: bool = False
    deadline_ms: float = DEFAULT_DEADLINE_MS
    default_model: str | None = None
    cache_ms: float = 500.0
    refresh_ms: float = 250.0
    replay: tuple[str, ...] = ()
    rejects: str = "windvane-rejects.jsonl"
    log_level: str = "info"
    max_lookup_bytes: int = DEFAULT_MAX_LOOKUP_BYTES
    max_openrtb_bytes: int = DEFAULT_MAX_OPENRTB_BYTES
    max_events_bytes: int = DEFAULT_MAX_EVENTS_BYTES
    max_model_bytes: int = DEFAULT_MAX_MODEL_BYTES

    @property
    def writes_enabled(self) -> bool:
        return not self.read_only

    @property
    def stream_url(self) -> str | None:
        if self.stream is not None:
            return self.stream
        return None if parse_store_url(self.store).embedded else self.store

    @property
    def body_limits(self) -> BodyLimits:
        return BodyLimits(
            self.max_lookup_bytes, self.max_openrtb_bytes, self.max_events_bytes,
            self.max_model_bytes,
        )  # fmt: skip

    def check(self) -> ServiceConfig:
        """Refuse settings that would be unsafe or cannot work, with how to fix them."""
        if self.writes_enabled and not self.insecure_dev:
            _check_token(self.token)
        for field in ("max_lookup_bytes", "max_openrtb_bytes", "max_events_bytes",
                      "max_model_bytes"):  # fmt: skip
            check_limit(getattr(self, field), "--" + field.replace("_", "-"))
        if self.workers < 1:
            raise UsageError("--workers must be at least 1")
        embedded = parse_store_url(self.store).embedded
        if self.workers > 1 and embedded:
            raise UsageError(
                "the embedded memory:// store lives inside one process: use --workers 1, or a "
                "redis:// store for several workers"
            )
        if self.replay and not embedded:
            raise UsageError(
                "--replay loads the embedded store; use `windvane replay` for redis://"
            )
        if not 0 <= self.cache_ms <= MAX_AGE_LIMIT_S * 1000:
            raise UsageError("--cache-ms must lie between 0 and 1000: cached app state may lag 1 s")
        if not 0 < self.refresh_ms <= 1000:
            raise UsageError("--refresh-ms must lie between 1 and 1000 so activations land in 1 s")
        try:
            check_deadline_ms(self.deadline_ms, "--deadline-ms")
        except BadRequest as exc:
            raise UsageError(str(exc)) from None
        return self

    def to_environment(self) -> str:
        return orjson.dumps(dataclasses.asdict(self)).decode()

    @classmethod
    def from_environment(cls) -> ServiceConfig:
        raw = os.environ.get(ENVIRONMENT_KEY)
        if not raw:
            raise UsageError(f"{ENVIRONMENT_KEY} is not set: start it with `windvane serve`")
        data = orjson.loads(raw)
        data["replay"] = tuple(data.get("replay", ()))
        return cls(**data)


_TOKEN_FIXES = (
    "Set WINDVANE_TOKEN or `token` in the configuration file, start with --read-only, or use "
    "--insecure-dev on a machine nobody else can reach"
)


def _check_token(token: str | None) -> None:
    """Refuse a write token that no request could ever present, as if there were none.

    The Authorization header arrives with surrounding whitespace stripped and is read as
    Latin-1, so a blank token, one padded with whitespace or one outside printable ASCII
    would start a service whose writes nobody can make.
    """
    if not token:
        raise UsageError(
            f"refusing to start: write endpoints are enabled but no token is set. {_TOKEN_FIXES}"
        )
    if not token.strip():
        raise UsageError(
            "refusing to start: write endpoints are enabled but the token is only whitespace, "
            f"which no request can send. {_TOKEN_FIXES}"
        )
    if token != token.strip() or not all(" " <= c <= "~" for c in token):
        raise UsageError(
            "refusing to start: the token must be printable ASCII without leading or trailing "
            "whitespace, or no Authorization header can carry it; fix WINDVANE_TOKEN or "
            "`token` in the configuration file"
        )


def load_config(path: str | None, overrides: dict[str, Any]) -> ServiceConfig:
    """Defaults, then the file, then WINDVANE_TOKEN, then flags that were given."""
    values: dict[str, Any] = {}
    if path is not None:
        try:
            values = tomllib.loads(Path(path).read_text(encoding="utf-8"))
        except OSError as exc:
            raise UsageError(f"cannot read configuration {path}: {exc.strerror}") from None
        except tomllib.TOMLDecodeError as exc:
            raise UsageError(f"configuration {path} is not valid TOML: {exc}") from None
        known = {f.name for f in dataclasses.fields(ServiceConfig)}
        unknown = sorted(set(values) - known)
        if unknown:
            raise UsageError(f"configuration {path}: unknown setting(s) {', '.join(unknown)}")
    if os.environ.get("WINDVANE_TOKEN"):
        values["token"] = os.environ["WINDVANE_TOKEN"]
    values.update({k: v for k, v in overrides.items() if v is not None})
    if "replay" in values:
        values["replay"] = tuple(values["replay"])
    try:
        return ServiceConfig(**values)
    except TypeError as exc:
        raise UsageError(f"bad service settings: {exc}") from None

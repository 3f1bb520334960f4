"""The model registry in Redis: published snapshots, their history, and the active traffic split.

Publishing, activating and rolling back each run as one Lua script over the model's
keys (one hash slot), so a half-done change is impossible: a version is stored with
its metadata or not at all, and the active split changes in one step. Serving
processes poll the active split (see ``ModelCache``), which is how every one of them
sees an activation within a second.

Per model:

    snap:<version>   the snapshot document (JSON), immutable once published
    meta             hash version -> {version, published_at, by, checksum}
    order            list of versions in publish order
    active           {"arms": [{"version", "weight"}], "activated_at", "by", "action"}
    previous         list of earlier active values, for rollback
    audit            list of every publish, activation and rollback
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import orjson

from windvane.errors import BadSnapshot, UnknownModel
from windvane.keys import MODELS_KEY, model_key
from windvane.models.snapshot import (
    MODEL_NAME,
    Snapshot,
    check_against_features,
    checksum,
    parse_snapshot,
)
from windvane.store.base import StateStore
from windvane.store.redis_errors import store_errors

AUDIT_LENGTH = 1000

_PUBLISH = """
if redis.call('HEXISTS', KEYS[2], ARGV[1]) == 1 then return 0 end
redis.call('SET', KEYS[1], ARGV[2])
redis.call('HSET', KEYS[2], ARGV[1], ARGV[3])
redis.call('RPUSH', KEYS[3], ARGV[1])
redis.call('RPUSH', KEYS[4], ARGV[4])
redis.call('LTRIM', KEYS[4], -tonumber(ARGV[5]), -1)
return 1
"""

_ACTIVATE = """
for i = 4, #ARGV do
  if redis.call('HEXISTS', KEYS[3], ARGV[i]) == 0 then return 'unknown:' .. ARGV[i] end
end
local current = redis.call('GET', KEYS[1])
if current then
  redis.call('RPUSH', KEYS[2], current)
  redis.call('LTRIM', KEYS[2], -tonumber(ARGV[3]), -1)
end
redis.call('SET', KEYS[1], ARGV[1])
redis.call('RPUSH', KEYS[4], ARGV[2])
redis.call('LTRIM', KEYS[4], -tonumber(ARGV[3]), -1)
return 'ok'
"""

_ROLLBACK = """
local previous = redis.call('RPOP', KEYS[2])
if not previous then return false end
redis.call('SET', KEYS[1], previous)
redis.call('RPUSH', KEYS[3], ARGV[1])
redis.call('LTRIM', KEYS[3], -tonumber(ARGV[2]), -1)
return previous
"""


@dataclass(frozen=True)
class Arm:
    version: str
    weight: float


@dataclass(frozen=True)
class ActiveSplit:
    arms: tuple[Arm, ...]
    activated_at: float
    by: str
    action: str

    @classmethod
    def from_json(cls, raw: bytes) -> ActiveSplit:
        data = orjson.loads(raw)
        arms = tuple(Arm(a["version"], float(a["weight"])) for a in data["arms"])
        return cls(arms, float(data["activated_at"]), str(data["by"]), str(data["action"]))

    def to_dict(self) -> dict[str, Any]:
        return {
            "arms": [{"version": a.version, "weight": a.weight} for a in self.arms],
            "activated_at": self.activated_at,
            "by": self.by,
            "action": self.action,
        }


class ModelRegistry:
    """Publishes, activates and rolls back model versions; validates before it writes."""

    def __init__(self, store: StateStore, features: dict[str, str]) -> None:
        self.client = store.client
        self.url = store.url
        self.features = features
        self._publish = self.client.register_script(_PUBLISH)
        self._activate = self.client.register_script(_ACTIVATE)
        self._rollback = self.client.register_script(_ROLLBACK)

    def publish(
        self, model: str, document: bytes | str | dict[str, Any], by: str, activate: bool = False
    ) -> dict[str, Any]:
        """Validate and store a new version; refused whole (BadSnapshot) when anything is wrong."""
        snapshot = parse_snapshot(document)
        if snapshot.model is not None and snapshot.model != model:
            raise BadSnapshot(
                "model", f"the document is for model {snapshot.model!r}, not {model!r}"
            )
        _check_model_name(model)
        check_against_features(snapshot, self.features)
        meta = {
            "version": snapshot.version,
            "published_at": time.time(),
            "by": by,
            "checksum": checksum(snapshot),
        }
        body = snapshot.model_copy(update={"model": model}).model_dump_json(exclude_none=True)
        audit = orjson.dumps({"action": "publish", **meta})
        keys = [model_key(model, f"snap:{snapshot.version}"), model_key(model, "meta"),
                model_key(model, "order"), model_key(model, "audit")]  # fmt: skip
        args = [snapshot.version, body, orjson.dumps(meta), audit, AUDIT_LENGTH]
        with store_errors(self.url):
            stored = self._publish(keys=keys, args=args)
            if not stored:
                raise BadSnapshot(
                    "version", f"version {snapshot.version!r} of model {model!r} already exists"
                )
            self.client.sadd(MODELS_KEY, model)
        if activate:
            self.activate(model, [Arm(snapshot.version, 100.0)], by)
        return meta

    def activate(self, model: str, arms: Sequence[Arm], by: str) -> ActiveSplit:
        """Make ``arms`` the model's traffic split in one step; the first arm is the control."""
        if not arms:
            raise BadSnapshot("arms", "name at least one version")
        versions = [a.version for a in arms]
        if len(set(versions)) != len(versions):
            raise BadSnapshot("arms", "a version appears twice")
        for index, arm in enumerate(arms):
            if not (math.isfinite(arm.weight) and arm.weight > 0):
                raise BadSnapshot(f"arms[{index}].weight", "must be a finite number above zero")
        split = ActiveSplit(tuple(arms), time.time(), by, "activate")
        audit = orjson.dumps({"action": "activate", **split.to_dict()})
        keys = [model_key(model, "active"), model_key(model, "previous"),
                model_key(model, "meta"), model_key(model, "audit")]  # fmt: skip
        with store_errors(self.url):
            if not self.client.sismember(MODELS_KEY, model):
                raise UnknownModel(f"no model named {model!r} has been published")
            result = self._activate(
                keys=keys, args=[orjson.dumps(split.to_dict()), audit, AUDIT_LENGTH, *versions]
            )
        result = result.decode() if isinstance(result, bytes) else str(result)
        if result.startswith("unknown:"):
            raise UnknownModel(f"model {model!r} has no version {result[8:]!r}")
        return split

    def rollback(self, model: str, by: str) -> ActiveSplit:
        """Restore the split that was active before the current one."""
        audit = orjson.dumps({"action": "rollback", "at": time.time(), "by": by})
        keys = [model_key(model, "active"), model_key(model, "previous"), model_key(model, "audit")]
        with store_errors(self.url):
            if not self.client.sismember(MODELS_KEY, model):
                raise UnknownModel(f"no model named {model!r} has been published")
            restored = self._rollback(keys=keys, args=[audit, AUDIT_LENGTH])
        if not restored:
            raise BadSnapshot("model", f"model {model!r} has no earlier activation to roll back to")
        return ActiveSplit.from_json(restored)

    def models(self) -> list[str]:
        with store_errors(self.url):
            return sorted(m.decode() for m in self.client.smembers(MODELS_KEY))

    def active(self, model: str) -> ActiveSplit | None:
        with store_errors(self.url):
            raw = self.client.get(model_key(model, "active"))
        return None if raw is None else ActiveSplit.from_json(raw)

    def snapshot(self, model: str, version: str) -> Snapshot:
        with store_errors(self.url):
            raw = self.client.get(model_key(model, f"snap:{version}"))
        if raw is None:
            raise UnknownModel(f"model {model!r} has no version {version!r}")
        return Snapshot.model_validate_json(raw)

    def history(self, model: str) -> list[dict[str, Any]]:
        """Versions in publish order with when, by whom and their checksum."""
        with store_errors(self.url):
            pipe = self.client.pipeline(transaction=False)
            pipe.lrange(model_key(model, "order"), 0, -1)
            pipe.hgetall(model_key(model, "meta"))
            order, meta = pipe.execute()
        if not order:
            raise UnknownModel(f"no model named {model!r} has been published")
        return [orjson.loads(meta[v]) for v in order]

    def audit(self, model: str) -> list[dict[str, Any]]:
        with store_errors(self.url):
            return [orjson.loads(x) for x in self.client.lrange(model_key(model, "audit"), 0, -1)]


def _check_model_name(model: str) -> None:
    if not MODEL_NAME.match(model):
        raise BadSnapshot(
            "model", f"{model!r} is not a model name: use 1-64 lowercase letters, digits, - or _"
        )

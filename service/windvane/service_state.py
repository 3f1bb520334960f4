"""What one serving process holds: the plan, the stores, the registry, the caches."""

from __future__ import annotations

import asyncio
import logging
from dataclasses import dataclass, field

from windvane import local_time
from windvane.engine import Engine
from windvane.lookup_service import LookupService
from windvane.model_cache import ModelCache
from windvane.model_registry import SnapshotStore
from windvane.plan import Plan, load_plan
from windvane.rejects import RejectsFile
from windvane.replay import replay
from windvane.reply_cache import ReplyCache
from windvane.service_config import ServiceConfig
from windvane.store import open_store
from windvane.store.async_reader import AsyncStateReader
from windvane.store.redis_store import RedisStateStore

log = logging.getLogger("windvane.service")


def feature_shapes(plan: Plan) -> dict[str, str]:
    """Each feature the definitions produce: valued once (shared) or per candidate campaign."""
    return {
        f.name: "per_campaign" if "campaign" in f.key_fields else "shared" for f in plan.features
    }


@dataclass
class ServiceState:
    config: ServiceConfig
    plan: Plan
    engine: Engine
    reader: AsyncStateReader
    registry: SnapshotStore
    models: ModelCache
    lookups: LookupService
    tasks: list[asyncio.Task[None]] = field(default_factory=list)

    @classmethod
    async def start(cls, config: ServiceConfig) -> ServiceState:
        plan = load_plan(config.defs)
        store = open_store(config.store)
        if not isinstance(store, RedisStateStore):
            raise TypeError("the service needs a Redis-compatible store")
        engine = Engine(plan, store, config.generation)
        if config.replay:
            with RejectsFile(config.rejects) as rejects:
                stats = await asyncio.to_thread(replay, engine, list(config.replay), rejects)
            log.info(
                "replayed %d events (%d rejected, see %s)", stats.applied, stats.rejected,
                config.rejects,
            )  # fmt: skip
        shapes = feature_shapes(plan)
        registry = SnapshotStore(store.client, shapes, config.store)
        per_campaign = frozenset(n for n, shape in shapes.items() if shape == "per_campaign")
        models = ModelCache(registry, per_campaign, config.refresh_ms / 1000)
        reader = AsyncStateReader.open(config.store)
        lookups = LookupService(
            engine.reader,
            reader,
            ReplyCache(config.cache_ms / 1000),
            models,
            config.deadline_ms,
            config.default_model,
        )
        await asyncio.to_thread(local_time.warm_up)
        state = cls(config, plan, engine, reader, registry, models, lookups)
        try:
            await state.refresh_models()
        except Exception as exc:  # the refresher keeps trying; serve without models meanwhile
            log.warning("model registry not read at start: %s", exc)
        state.tasks.append(asyncio.create_task(models.run()))
        return state

    async def refresh_models(self) -> None:
        await asyncio.to_thread(self.models.refresh)

    async def close(self) -> None:
        for task in self.tasks:
            task.cancel()
        await asyncio.gather(*self.tasks, return_exceptions=True)
        await self.reader.close()
        self.engine.close()

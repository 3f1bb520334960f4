"""What one serving process holds: the plan, the stores, the registry, the caches."""

from __future__ import annotations

import asyncio
import gc
import logging
from dataclasses import dataclass, field

from windvane.definitions.plan import Plan, load_plan
from windvane.engine import Engine
from windvane.errors import WindvaneError
from windvane.ingest.event_stream import EventStream
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.keys import KeyLayout
from windvane.kinds import local_time
from windvane.models.cache import ModelCache
from windvane.models.registry import ModelRegistry
from windvane.serving.config import ServiceConfig
from windvane.serving.lookup_service import LookupService
from windvane.serving.reply_cache import ReplyCache
from windvane.state.lookup_reader import LookupReader
from windvane.store import StateStore, open_store
from windvane.store.async_store import AsyncStateStore
from windvane.store.generations import Generations

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
    async_store: AsyncStateStore
    registry: ModelRegistry
    models: ModelCache
    lookups: LookupService
    generations: Generations
    stream: EventStream | None = None
    tasks: list[asyncio.Task[None]] = field(default_factory=list)

    @property
    def generation(self) -> str:
        return self.lookups.reader.layout.generation

    @classmethod
    async def start(cls, config: ServiceConfig) -> ServiceState:
        plan = load_plan(config.defs)
        store = open_store(config.store)
        try:
            return await cls._start(config, plan, store)
        except BaseException:
            store.close()
            raise

    @classmethod
    async def _start(cls, config: ServiceConfig, plan: Plan, store: StateStore) -> ServiceState:
        generations = Generations(store)
        generation = config.generation or await asyncio.to_thread(generations.active)
        engine = Engine(plan, store, generation)
        if config.replay:
            with RejectsFile(config.rejects) as rejects:
                stats = await asyncio.to_thread(replay, engine, list(config.replay), rejects)
            log.info(
                "replayed %d events (%d rejected, see %s)", stats.applied, stats.rejected,
                config.rejects,
            )  # fmt: skip
        stream = None
        if config.stream_url:
            stream = await asyncio.to_thread(EventStream.open, config.stream_url, config.shards)
        shapes = feature_shapes(plan)
        registry = ModelRegistry(store, shapes)
        per_campaign = frozenset(n for n, shape in shapes.items() if shape == "per_campaign")
        models = ModelCache(registry, per_campaign, config.refresh_ms / 1000)
        async_store = AsyncStateStore.open(config.store)
        lookups = LookupService(
            engine.reader,
            async_store,
            ReplyCache(config.cache_ms / 1000),
            models,
            config.deadline_ms,
            config.default_model,
        )
        await asyncio.to_thread(local_time.warm_up)
        state = cls(
            config, plan, engine, async_store, registry, models, lookups, generations, stream
        )
        try:
            await state.refresh_models()
        except Exception as exc:  # the refresher keeps trying; serve without models meanwhile
            log.warning("model registry not read at start: %s", exc)
        state.tasks.append(asyncio.create_task(models.run()))
        if config.generation is None:
            state.tasks.append(asyncio.create_task(state._follow_generation()))
        # Everything loaded so far lives as long as the process: keep it out of the cycle
        # collector's full passes, which otherwise stall lookups for tens of milliseconds.
        gc.collect()
        gc.freeze()
        return state

    async def refresh_models(self) -> None:
        await asyncio.to_thread(self.models.refresh)

    async def _follow_generation(self) -> None:
        """Switch lookups to the active generation within a second of its activation."""
        while True:
            await asyncio.sleep(self.config.refresh_ms / 1000)
            try:
                active = await asyncio.to_thread(self.generations.active)
            except WindvaneError:
                continue
            if active != self.generation:
                self.switch_generation(active)

    def switch_generation(self, generation: str) -> None:
        """One assignment: every lookup that starts after it reads the new generation."""
        self.lookups.reader = LookupReader(self.plan, KeyLayout(generation))
        self.lookups.cache.clear()
        log.warning("lookups now read generation %s", generation)

    async def close(self) -> None:
        for task in self.tasks:
            task.cancel()
        await asyncio.gather(*self.tasks, return_exceptions=True)
        await self.async_store.close()
        if self.stream is not None:
            await self.stream.close()
        self.engine.close()

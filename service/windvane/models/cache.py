"""Each serving process's copy of the active models: splits and compiled scorers.

A background task polls the registry every ``refresh_s`` (a quarter second by
default), so an activation or rollback reaches every process within a second without
any call on the lookup path. Snapshot versions are immutable, so each is fetched and
compiled once.
"""

from __future__ import annotations

import asyncio
import logging
from dataclasses import dataclass

from windvane.errors import UnknownModel, WindvaneError
from windvane.models.registry import ActiveSplit, ModelRegistry
from windvane.models.scoring import Scorer
from windvane.models.traffic_split import choose_arm

log = logging.getLogger("windvane.models")


@dataclass(frozen=True)
class ActiveModel:
    name: str
    split: ActiveSplit
    scorers: tuple[Scorer, ...]

    def arm_for(self, user: str | None) -> int:
        return choose_arm(self.name, user, [arm.weight for arm in self.split.arms])


class ModelCache:
    def __init__(
        self, registry: ModelRegistry, per_campaign: frozenset[str], refresh_s: float = 0.25
    ) -> None:
        self.registry = registry
        self.per_campaign = per_campaign
        self.refresh_s = refresh_s
        self._active: dict[str, ActiveModel] = {}
        self._scorers: dict[tuple[str, str], Scorer] = {}
        self._failing = False

    def get(self, name: str) -> ActiveModel:
        model = self._active.get(name)
        if model is None:
            raise UnknownModel(f"no active model named {name!r}")
        return model

    def names(self) -> list[str]:
        return sorted(self._active)

    def refresh(self) -> None:
        """Read every model's active split; compile scorers for versions not seen yet."""
        active: dict[str, ActiveModel] = {}
        for name in self.registry.models():
            split = self.registry.active(name)
            if split is None:
                continue
            current = self._active.get(name)
            if current is not None and current.split == split:
                active[name] = current
                continue
            scorers = []
            for arm in split.arms:
                key = (name, arm.version)
                if key not in self._scorers:
                    self._scorers[key] = Scorer(
                        self.registry.snapshot(name, arm.version), self.per_campaign
                    )
                scorers.append(self._scorers[key])
            active[name] = ActiveModel(name, split, tuple(scorers))
        self._active = active

    async def run(self) -> None:
        """Refresh forever; a store outage keeps the last known models and logs once."""
        while True:
            try:
                await asyncio.to_thread(self.refresh)
                if self._failing:
                    log.warning("model registry reachable again")
                self._failing = False
            except WindvaneError as exc:
                if not self._failing:
                    log.warning("model registry refresh failed, serving last known models: %s", exc)
                self._failing = True
            await asyncio.sleep(self.refresh_s)

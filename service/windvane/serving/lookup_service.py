"""The service's lookup: the engine's read path plus a deadline, a reply cache and scoring.

The features come from ``LookupReader`` (the one read path); this module only decides
where replies come from (the per-app cache or one pipelined round trip) and how long
to wait for them. When the store does not answer before the deadline (the store stops
waiting then, whatever the server does), the answer goes out anyway: request-time
features, cached app features, null stored features, ``"stored": "missing"``, and
scores from the snapshot's defaults for missing values.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from typing import Any

from windvane.errors import StoreError
from windvane.inputs.deadline import DEFAULT_DEADLINE_MS
from windvane.inputs.lookup_request import LookupRequest
from windvane.models.cache import ActiveModel, ModelCache
from windvane.serving.reply_cache import ReplyCache
from windvane.state.lookup_reader import MISSING, LookupReader, PreparedLookup
from windvane.store.async_store import AsyncStateStore


class LookupService:
    def __init__(
        self,
        reader: LookupReader,
        store: AsyncStateStore,
        cache: ReplyCache,
        models: ModelCache,
        deadline_ms: float = DEFAULT_DEADLINE_MS,
        default_model: str | None = None,
    ) -> None:
        self.reader = reader
        self.store = store
        self.cache = cache
        self.models = models
        self.deadline_ms = deadline_ms
        self.default_model = default_model
        #: Lookups whose store read failed or ran out of time (shown by /v1/health).
        self.store_misses = 0

    async def lookup(
        self,
        request: LookupRequest,
        model: str | None = None,
        deadline_ms: float | None = None,
        started_s: float | None = None,
    ) -> dict[str, Any]:
        """Features, and scores when a model is named or configured, before the deadline.

        ``started_s`` (``time.perf_counter()``) is when the request reached the service,
        so time spent reading the body counts against the deadline too.
        """
        return (await self.lookup_many((request,), model, deadline_ms, started_s))[0]

    async def lookup_many(
        self,
        requests: Sequence[LookupRequest],
        model: str | None = None,
        deadline_ms: float | None = None,
        started_s: float | None = None,
    ) -> list[dict[str, Any]]:
        """One answer per request, from one store read against one deadline.

        The imps of one BidRequest ask about the same user and app: read apart, one
        could get the stored features and the next ``"stored": "missing"``. Here their
        commands go out once (identical ones once), so every answer sees the same
        replies, or the same absence of them.
        """
        started_s = time.perf_counter() if started_s is None else started_s
        budget_s = (deadline_ms or self.deadline_ms) / 1000
        name = model or self.default_model
        active = self.models.get(name) if name is not None else None  # UnknownModel -> 404
        reader = self.reader
        prepared = [reader.prepare(request) for request in requests]
        if len(prepared) == 1:
            commands, cacheable, positions = prepared[0].commands, prepared[0].cacheable, None
        else:
            commands, cacheable, positions = _merged(prepared)
        replies = await self._replies(commands, cacheable, started_s, budget_s)
        answers = []
        for index, lookup in enumerate(prepared):
            own = replies if positions is None else [replies[i] for i in positions[index]]
            answer = reader.answer(lookup, own)
            if active is not None:
                _score(answer, lookup.request, active)
            answer["elapsed_ms"] = round((time.perf_counter() - started_s) * 1000, 3)
            answers.append(answer)
        return answers

    async def _replies(
        self,
        commands: list[tuple[Any, ...]],
        cacheable: list[bool],
        started_s: float,
        budget_s: float,
    ) -> list[Any]:
        replies: list[Any] = [MISSING] * len(commands)
        wanted: list[int] = []
        now = time.monotonic()
        for index, command in enumerate(commands):
            if cacheable[index]:
                hit, reply = self.cache.get(command, now)
                if hit:
                    replies[index] = reply
                    continue
            wanted.append(index)
        if not wanted:
            return replies
        remaining_s = budget_s - (time.perf_counter() - started_s)
        if remaining_s <= 0:
            return replies
        try:
            fetched = await self.store.read([commands[i] for i in wanted], remaining_s)
        except StoreError:
            self.store_misses += 1
            return replies
        now = time.monotonic()
        for index, reply in zip(wanted, fetched, strict=True):
            replies[index] = reply
            if cacheable[index]:
                self.cache.put(commands[index], reply, now)
        return replies


def _merged(
    prepared: Sequence[PreparedLookup],
) -> tuple[list[tuple[Any, ...]], list[bool], list[list[int]]]:
    """The lookups' commands with each distinct one once, and where each lookup's went."""
    index: dict[tuple[Any, ...], int] = {}
    commands: list[tuple[Any, ...]] = []
    cacheable: list[bool] = []
    positions: list[list[int]] = []
    for lookup in prepared:
        own = []
        for command, shared in zip(lookup.commands, lookup.cacheable, strict=True):
            at = index.get(command)
            if at is None:
                at = index[command] = len(commands)
                commands.append(command)
                cacheable.append(shared)
            own.append(at)
        positions.append(own)
    return commands, cacheable, positions


def _score(answer: dict[str, Any], request: LookupRequest, active: ActiveModel) -> None:
    # Restricted requests use no user id at all, so they go to the control arm.
    arm = active.arm_for(None if request.restricted else request.user)
    scorer = active.scorers[arm]
    features = answer["features"]
    answer["model"] = {
        "name": active.name,
        "version": active.split.arms[arm].version,
        "arm": arm,
        "weight": active.split.arms[arm].weight,
    }
    answer["scores"] = scorer.scores(features, answer["campaigns"])
    if not request.campaigns:
        answer["score"] = scorer.score(features)

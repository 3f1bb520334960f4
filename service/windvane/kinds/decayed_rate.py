"""Decayed rate: a ratio of two exponentially decayed counts, smoothed with a beta prior.

With successes S and trials N, each event at time s weighing ``2 ** (-(t - s) / half_life)``
at lookup time t, the value is the posterior mean of a Beta(alpha, beta) prior,
``(alpha + S) / (alpha + beta + N)`` (Bayesian smoothing): a smoothed win rate (wins over
bids) or CTR (clicks over impressions) that needs no window and starts at the prior.

The state is ``ref:S:N`` with both sums expressed at time ``ref``, the newest event
seen. A newer event rescales both sums to its time; an older (late) one adds its
weight ``2 ** (-(ref - s) / half_life)``. Both are exact, so late events count as if
they had arrived in order, up to floating-point rounding.
"""

from __future__ import annotations

from typing import ClassVar

from pydantic import BaseModel, ConfigDict, Field

from windvane.durations import format_duration
from windvane.inputs.events import Event, EventKind
from windvane.kinds.base import (
    DECODE_THREE_NUMBERS,
    BuildContext,
    DurationS,
    Feature,
    FeatureKind,
    FieldProblem,
    KeyedOptions,
    LuaHandler,
    State,
    check_events,
)
from windvane.kinds.batch_writes import BatchWrites

_APPLY = """
local ts, h, which = tonumber(a[i + 1]), tonumber(a[i + 2]), a[i + 3]
if not v then v = {ts, 0, 0} end
local w = 1
if ts > v[1] then
  local scale = 2 ^ (-(ts - v[1]) / h)
  v[2], v[3], v[1] = v[2] * scale, v[3] * scale, ts
else
  w = 2 ^ (-(v[1] - ts) / h)
end
if which == 's' then v[2] = v[2] + w else v[3] = v[3] + w end
return v, true
"""

_ENCODE = """
return string.format('%.0f:%.17g:%.17g', v[1], v[2], v[3])
"""


class BetaPrior(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    alpha: float = Field(gt=0, allow_inf_nan=False)
    beta: float = Field(gt=0, allow_inf_nan=False)


class DecayedRateOptions(KeyedOptions):
    successes: tuple[EventKind, ...]
    trials: tuple[EventKind, ...]
    half_life: DurationS
    prior: BetaPrior
    keep: DurationS | None = None


class DecayedRateState(State):
    LUA_HANDLERS: ClassVar[dict[str, LuaHandler]] = {
        "d": LuaHandler(4, DECODE_THREE_NUMBERS, _APPLY, _ENCODE)
    }

    def __init__(
        self, successes: frozenset[str], trials: frozenset[str], half_life_s: int, keep_s: int
    ) -> None:
        self.successes = successes
        self.trials = trials
        self.events = successes | trials
        self.half_life_s = half_life_s
        self.half_life_ms = half_life_s * 1000
        self._half_life_arg = str(self.half_life_ms)
        self.retention_s = keep_s

    @property
    def signature(self) -> str:
        return (
            f"decayed({'|'.join(sorted(self.successes))}/{'|'.join(sorted(self.trials))};"
            f"{self.half_life_s};{self.retention_s})"
        )

    def update(self, event: Event, key: str, field: str, writes: BatchWrites) -> None:
        which = "s" if event.kind in self.successes else "n"
        writes.op(key, "d", field, str(event.ts_ms), self._half_life_arg, which)

    def sums(self, raw: bytes | None, t_ms: int) -> tuple[float, float]:
        """(successes, trials), each decayed to the lookup time ``t_ms``."""
        if not raw:
            return 0.0, 0.0
        ref, s, n = raw.split(b":")
        scale = 2.0 ** (-(t_ms - int(ref)) / self.half_life_ms)
        return float(s) * scale, float(n) * scale

    def max_bytes(self, field: str) -> int:
        return len(field) + 13 + 2 * 24 + 4

    def describe(self) -> str:
        return (
            f"decayed {'/'.join(sorted(self.successes))} over {'/'.join(sorted(self.trials))}, "
            f"half-life {format_duration(self.half_life_s)}"
        )


class DecayedRateFeature(Feature):
    kind = "decayed_rate"

    def __init__(self, options: DecayedRateOptions, state: DecayedRateState) -> None:
        super().__init__(options)
        self.state = state
        self.pair = state
        self.alpha = options.prior.alpha
        self.alpha_beta = options.prior.alpha + options.prior.beta

    def read(self, raw: bytes | None, t_ms: int) -> float:
        successes, trials = self.pair.sums(raw, t_ms)
        return (self.alpha + successes) / (self.alpha_beta + trials)

    def describe(self) -> str:
        return f"(alpha + S) / (alpha + beta + N), prior mean {self.alpha / self.alpha_beta:.4g}"


class DecayedRateKind(FeatureKind):
    name = "decayed_rate"
    options_model = DecayedRateOptions
    states = (DecayedRateState,)

    @classmethod
    def build(cls, options: DecayedRateOptions, context: BuildContext) -> DecayedRateFeature:
        successes = check_events(options.successes)
        if not options.trials:
            raise FieldProblem("trials", "name at least one event kind")
        overlap = successes & frozenset(options.trials)
        if overlap:
            raise FieldProblem(
                "trials", f"{', '.join(sorted(overlap))} cannot be both a success and a trial"
            )
        keep_s = options.keep if options.keep is not None else 10 * options.half_life
        state = DecayedRateState(successes, frozenset(options.trials), options.half_life, keep_s)
        return DecayedRateFeature(options, state)

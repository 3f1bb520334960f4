"""Every Redis key name windvane writes, built in one place.

Layout (``<gen>`` is the state generation, so a rebuild can sit beside live state):

    wv:<gen>:{u:<user>}                     hash: the user's state
    wv:<gen>:{u:<user>}:c:<campaign>        hash: the user's state for one campaign
    wv:<gen>:{a:<app>}                      hash: the app's state
    wv:<gen>:{a:<app>}:<field>:<bucket>     HyperLogLog: one time bucket of a distinct count
    wv:models                               set: names of published models
    wv:model:{m:<name>}:<part>              one model's snapshots, versions, active arms, audit
    wv:events:{s<n>}                        stream: shard n of the event stream
    wv:events:shards                        string: the number of shards producers and workers use
    wv:dead                                 stream: entries that could not be applied, with reasons
    wv:lease:<group>:{s<n>}                 string: which worker of a consumer group owns shard n
    wv:ingest:status:<worker>               string: a worker's last status line, as JSON
    wv:ingest:workers                       set: names of workers that reported a status
    wv:generation                           string: the generation lookups read
    wv:generations                          hash: generation -> when created, by whom, from what
    wv:genstats:{g:<name>}                  hash: events applied to a generation and their times

The part in braces is the Redis Cluster hash tag: all keys of one user (or one app)
hash to the same slot, so a lookup reads them in one round trip even on a cluster.
"""

from __future__ import annotations

import re

KEY_PREFIX = "wv"
DEFAULT_GENERATION = "main"

# One letter per key field keeps keys short; the first field of a key is its hash tag.
KEY_FIELD_LETTERS = {"user": "u", "app": "a", "campaign": "c"}

MODELS_KEY = f"{KEY_PREFIX}:models"

_GENERATION = re.compile(r"^[a-z0-9][a-z0-9_-]{0,31}$")


def check_generation(name: str) -> str:
    if not _GENERATION.match(name):
        raise ValueError(
            f"{name!r} is not a generation name: use 1-32 lowercase letters, digits, - or _"
        )
    return name


class KeyLayout:
    """Builds key names for one generation of state."""

    __slots__ = ("generation", "prefix")

    def __init__(self, generation: str = DEFAULT_GENERATION) -> None:
        self.generation = check_generation(generation)
        self.prefix = f"{KEY_PREFIX}:{generation}:"

    def state_key_format(self, fields: tuple[str, ...]) -> str:
        """The name of a state hash as a ``str.format`` template, one ``{}`` per field value.

        ``wv:main:{u:{}}:c:{}`` (braces of the hash tag doubled) for ``user+campaign``.
        The update path and the read path both fill it in, so a key is named one way.
        """
        letter = KEY_FIELD_LETTERS
        head = f"{self.prefix}{{{{{letter[fields[0]]}:{{}}}}}}"
        return ":".join([head, *(f"{letter[name]}:{{}}" for name in fields[1:])])

    def state_key(self, fields: tuple[str, ...], values: tuple[str, ...]) -> str:
        """The hash holding one key's state, such as the state of user X for campaign Y."""
        return self.state_key_format(fields).format(*values)

    @staticmethod
    def bucket_key(state_key: str, field_id: str, bucket: int) -> str:
        """A per-bucket side key (a HyperLogLog) that shares the state key's hash tag."""
        return f"{state_key}:{field_id}:{bucket}"

    def pattern(self) -> str:
        """A SCAN pattern matching every key of this generation."""
        return f"{self.prefix}*"


def model_key(model: str, part: str) -> str:
    """A key of one model's registry; all of a model's keys share one hash slot."""
    return f"{KEY_PREFIX}:model:{{m:{model}}}:{part}"


SHARD_COUNT_KEY = f"{KEY_PREFIX}:events:shards"
DEAD_LETTER_KEY = f"{KEY_PREFIX}:dead"
ACTIVE_GENERATION_KEY = f"{KEY_PREFIX}:generation"
GENERATIONS_KEY = f"{KEY_PREFIX}:generations"


def stream_key(shard: int) -> str:
    return f"{KEY_PREFIX}:events:{{s{shard}}}"


def lease_key(group: str, shard: int) -> str:
    return f"{KEY_PREFIX}:lease:{group}:{{s{shard}}}"


INGEST_WORKERS_KEY = f"{KEY_PREFIX}:ingest:workers"


def consumer_group(generation: str) -> str:
    """The stream consumer group whose workers apply the stream to ``generation``."""
    return f"gen-{generation}"


def ingest_status_key(worker: str) -> str:
    return f"{KEY_PREFIX}:ingest:status:{worker}"


def generation_stats_key(generation: str) -> str:
    return f"{KEY_PREFIX}:genstats:{{g:{generation}}}"


def watermark_field(shard: int) -> str:
    """The hash field holding the last stream entry of ``shard`` applied to a key."""
    return f"_w{shard}"

"""Errors a user of windvane can cause, in one tree.

    WindvaneError
    ├── DefinitionError      a feature definition file is wrong (``windvane check`` lists them)
    ├── InputError           a value from outside names a bad field
    │   ├── BadEvent         an event line or stream entry that cannot be applied
    │   ├── BadRequest       a lookup request that cannot be answered
    │   └── BadSnapshot      a coefficient snapshot or activation that is refused whole
    ├── UnknownModel         no model (or model version) of that name has been published
    ├── NotAuthorized        a write without the right bearer token
    ├── BodyTooLarge         a request body beyond its endpoint's limit
    ├── StoreError           the state store is misconfigured or out of reach
    │   └── StoreUnavailable the store did not answer
    ├── ReplayStopped        a replay stopped part way, through a line (ingest/replay.py)
    ├── RejectsUnwritable    the rejects file cannot be written (ingest/rejects.py)
    └── UsageError           a command was called with arguments that do not fit
        └── LogUnreadable    a log cannot be read past a line (ingest/logfile.py)

The three marked with a module live beside what they carry (a replay's statistics,
a log position) and are defined there; every other one is defined here.

Every message says what is wrong and, where it helps, how to fix it. The CLI prints
the message without a traceback and exits with status 2 for definition and usage
mistakes; the HTTP layer maps ``InputError`` to a 422 naming the field, ``UnknownModel``
to a 404, ``NotAuthorized`` to a 401 and ``BodyTooLarge`` to a 413.
"""

from __future__ import annotations


class WindvaneError(Exception):
    """Root of every error that windvane reports to a user instead of crashing."""


class DefinitionError(WindvaneError):
    """One or more mistakes in the feature definition files.

    ``problems`` holds one line per mistake, each naming the file, the feature and
    the field, so that all of them can be fixed in one pass.
    """

    def __init__(self, problems: list[str]) -> None:
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


class InputError(WindvaneError):
    """A value that came from outside is wrong; ``field`` is its dotted path."""

    def __init__(self, field: str, reason: str) -> None:
        self.field = field
        self.reason = reason
        super().__init__(f"{field}: {reason}" if field else reason)


class BadEvent(InputError):
    """An event that is rejected whole: nothing of it is applied."""


class BadRequest(InputError):
    """A lookup request that names a missing or malformed field."""


class BadSnapshot(InputError):
    """A snapshot or activation that is refused; nothing of it is stored.

    ``field`` names the term (``terms[2] 'ctr_x_frac'``) or the top-level field.
    """


class UnknownModel(WindvaneError):
    """No model, or no version of a model, by that name."""


class NotAuthorized(WindvaneError):
    """A write endpoint was called without the configured bearer token."""


class BodyTooLarge(WindvaneError):
    """A request body longer than its endpoint accepts; ``limit`` is that length in bytes.

    Raised as soon as the declared or the received length passes the limit, so the
    rest of the body is never read.
    """

    def __init__(self, limit: int) -> None:
        self.limit = limit
        super().__init__(f"the body is larger than this endpoint's limit of {limit:,} bytes")


class StoreError(WindvaneError):
    """The state store cannot be used as configured."""


class StoreUnavailable(StoreError):
    """The state store did not answer (down, unreachable or too slow)."""


class UsageError(WindvaneError):
    """A command or function was called with arguments that do not fit together."""

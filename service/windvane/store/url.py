"""Store URLs, parsed once: which backend a URL names and how to reach it.

- ``memory://`` (or ``memory://NAME``): the embedded store in this process (fakeredis);
  stores with the same name in one process share their data;
- ``redis://host:port/db``, ``rediss://`` for TLS, ``unix:///path.sock``: a Redis server.
"""

from __future__ import annotations

from dataclasses import dataclass
from urllib.parse import urlsplit

from windvane.errors import StoreError, UsageError

SERVER_SCHEMES = ("redis", "rediss", "unix")
EXPECTED = "expected memory:// or redis://host:port/db"


@dataclass(frozen=True)
class StoreURL:
    text: str
    scheme: str

    @property
    def embedded(self) -> bool:
        """The in-process store, which lives only as long as its process."""
        return self.scheme == "memory"

    @property
    def memory_name(self) -> str:
        return self.text[len("memory://") :].strip("/") or "default"

    def __str__(self) -> str:
        return self.text


def parse_store_url(text: str | StoreURL) -> StoreURL:
    """The URL's backend, or ``StoreError`` naming the URL and what was expected."""
    if isinstance(text, StoreURL):
        return text
    try:
        scheme = urlsplit(text).scheme
    except ValueError as exc:
        raise StoreError(f"cannot use store URL {text!r}: {exc}") from None
    if scheme != "memory" and scheme not in SERVER_SCHEMES:
        raise StoreError(f"cannot use store URL {text!r}: {EXPECTED}")
    return StoreURL(text, scheme)


def server_url(text: str, purpose: str) -> StoreURL:
    """A URL that must name a Redis server (the event stream cannot live in a process)."""
    url = parse_store_url(text)
    if url.embedded:
        raise UsageError(f"{purpose} needs a Redis server URL (redis://host:port/db), not {text!r}")
    return url

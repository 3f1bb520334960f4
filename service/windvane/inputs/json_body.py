"""JSON from outside: how deep it may nest, and the decoder for bodies without a typed shape.

Decoders and encoders recurse, each with its own limit: the standard library and msgspec
stop at the interpreter's recursion limit with a ``RecursionError``, orjson refuses to
decode past 1024 levels and to encode past 254, pydantic refuses to serialise past its
own. A body nested between two of those limits would pass one step and crash the next,
so every untyped body is held to ``MAX_DEPTH`` here, well below all of them and far
above any real document (a BidRequest nests about six levels, a snapshot five).

The lookup body is the exception: its typed msgspec decoder keeps nothing deeper than
its own fixed shape and skips unknown fields in C, so the hot path pays for no walk;
``rtb_objects.decode_checked`` turns the ``RecursionError`` of a body too deep to skip
into the same refusal.

orjson and msgspec also refuse invalid UTF-8 and lone surrogates (``"\\udfff"``) while
decoding; ``text_problem`` finds them in what the standard library let through.
"""

from __future__ import annotations

from typing import Any

import orjson

from windvane.errors import InputError

MAX_DEPTH = 64
DEPTH_REASON = f"is nested deeper than {MAX_DEPTH} levels"
SURROGATE_REASON = "is not valid Unicode: it holds a lone surrogate such as \\udfff"


def loads(
    body: bytes, error: type[InputError], not_json: str = "the body is not valid JSON"
) -> Any:
    """Decode a body with orjson, or raise ``error(field, reason)`` for bad or too deep JSON."""
    try:
        value = orjson.loads(body)
    except orjson.JSONDecodeError as exc:
        raise error("", f"{not_json} ({exc})") from None
    field = depth_problem(value)
    if field is not None:
        raise error(field, DEPTH_REASON)
    return value


def depth_problem(value: object) -> str | None:
    """The member of ``value`` (its key, or ``[i]``) that makes ``value`` nest deeper than
    ``MAX_DEPTH``, or None.

    Level by level without recursion, so a deep document costs no stack and a wide one a
    single pass; members are named only once ``value`` is known to be too deep.
    """
    if not deeper_than(value, MAX_DEPTH):
        return None
    if isinstance(value, dict):
        named = [(str(key), member) for key, member in value.items()]
    elif isinstance(value, list):
        named = [(f"[{i}]", member) for i, member in enumerate(value)]
    else:
        return None
    return next(name for name, member in named if deeper_than(member, MAX_DEPTH - 1))


def deeper_than(value: object, levels: int) -> bool:
    """Whether ``value`` nests more than ``levels`` levels: one pass over its containers."""
    level = [value] if isinstance(value, _CONTAINERS) else []
    for _ in range(levels):
        if not level:
            return False
        level = [
            member
            for item in level
            for member in (item.values() if isinstance(item, dict) else item)
            if isinstance(member, _CONTAINERS)
        ]
    return bool(level)


_CONTAINERS = (dict, list)


def text_problem(value: object) -> str | None:
    """The dotted path of the first key or string in ``value`` that cannot be encoded as
    UTF-8 (a lone surrogate), "" for ``value`` itself; None when every one can. A bad key
    appears in the path escaped.

    Only the standard library's decoder lets such strings through; call this after
    ``depth_problem`` so that the walk is bounded.
    """
    stack: list[tuple[str, object]] = [("", value)]
    while stack:
        path, item = stack.pop()
        if isinstance(item, str):
            if not _encodes(item):
                return path
        elif isinstance(item, dict):
            for key, child in reversed(item.items()):
                where = f"{path}.{printable(key)}" if path else printable(key)
                if not _encodes(key):
                    return where
                stack.append((where, child))
        elif isinstance(item, list):
            stack.extend((f"{path}[{i}]", child) for i, child in reversed(list(enumerate(item))))
    return None


def printable(text: str) -> str:
    """``text`` with any lone surrogate written as its escape, so that it can be answered."""
    return text if _encodes(text) else text.encode("utf-8", "backslashreplace").decode()


def _encodes(text: str) -> bool:
    if text.isascii():
        return True
    try:
        text.encode()
    except UnicodeEncodeError:
        return False
    return True

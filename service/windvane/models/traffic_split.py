"""Traffic split: which version of a model serves a user, stable for as long as the weights are.

The arm is chosen by a hash of the model name and the user id mapped onto the
cumulative weights, so the same user lands in the same arm in every serving process
and on every request, and each arm gets its share of users. A request without a user
goes to the first arm, the control.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence

_SCALE = float(1 << 64)


def user_position(model: str, user: str) -> float:
    """A uniform number in [0, 1) fixed by (model, user)."""
    digest = hashlib.blake2b(f"{model}\x00{user}".encode(), digest_size=8).digest()
    return int.from_bytes(digest, "big") / _SCALE


def choose_arm(model: str, user: str | None, weights: Sequence[float]) -> int:
    """The index of the arm serving ``user``; weights need not sum to 1."""
    if user is None or len(weights) == 1:
        return 0
    point = user_position(model, user) * sum(weights)
    running = 0.0
    for index, weight in enumerate(weights):
        running += weight
        if point < running:
            return index
    return len(weights) - 1

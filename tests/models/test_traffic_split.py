"""Traffic split: arm shares match the weights over 100,000 users, and a user's arm never moves."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from tests.conftest import ROOT
from windvane.models.traffic_split import choose_arm

USERS = [f"user-{n:06d}" for n in range(100_000)]


@pytest.mark.parametrize("weights", [(90, 10), (50, 30, 20), (1, 1), (99, 1)])
def test_shares_within_one_point_of_weights(weights: tuple[float, ...]) -> None:
    counts = [0] * len(weights)
    for user in USERS:
        counts[choose_arm("ctr", user, weights)] += 1
    total = sum(weights)
    for count, weight in zip(counts, weights, strict=True):
        # reference: the configured weights; 1 percentage point over 100,000 users is
        # about 3 standard errors for a 90/10 split (binomial standard error 0.095 pp)
        assert abs(count / len(USERS) - weight / total) < 0.01


def test_arm_is_stable_and_independent_of_the_process() -> None:
    here = [choose_arm("ctr", u, (90, 10)) for u in USERS[:2000]]
    assert here == [choose_arm("ctr", u, (90, 10)) for u in USERS[:2000]]
    code = (
        "from windvane.models.traffic_split import choose_arm\n"
        "print(''.join(str(choose_arm('ctr', f'user-{n:06d}', (90, 10))) for n in range(2000)))"
    )
    env = {**os.environ, "PYTHONHASHSEED": "12345", "PYTHONPATH": str(ROOT / "service")}
    other = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, check=True)
    assert other.stdout.decode().strip() == "".join(map(str, here))


def test_growing_the_treatment_only_moves_users_into_it() -> None:
    # Going from 90/10 to 80/20 moves control users into treatment, never back.
    before = [choose_arm("ctr", u, (90, 10)) for u in USERS[:20_000]]
    after = [choose_arm("ctr", u, (80, 20)) for u in USERS[:20_000]]
    assert all(not (b == 1 and a == 0) for b, a in zip(before, after, strict=True))


def test_no_user_goes_to_control_and_models_split_independently() -> None:
    assert choose_arm("ctr", None, (1, 99)) == 0
    same = sum(
        choose_arm("ctr", u, (50, 50)) == choose_arm("win", u, (50, 50)) for u in USERS[:20_000]
    )
    # Independent hashes per model: about half the users share an arm index.
    assert 0.47 < same / 20_000 < 0.53

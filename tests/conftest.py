import os

import numpy as np
import pytest

# the CLI plans with one worker process per core by default; the networks in tests are small, so the
# suite plans in the calling process (tests of the process pool set it themselves)
os.environ.setdefault("VERAMP_PLAN_PROCESSES", "1")

from contraction.planning.search import PlannerOptions

#: a small planning budget keeps the suite fast; the networks in tests are small
FAST_PLANNER = PlannerOptions(budget_seconds=0.5, max_repeats=8)


@pytest.fixture
def fast_planner() -> PlannerOptions:
    return FAST_PLANNER


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(20261202)


def random_bitstrings(rng: np.random.Generator, n: int, k: int) -> list[str]:
    return ["".join("1" if b else "0" for b in rng.integers(0, 2, n)) for _ in range(k)]

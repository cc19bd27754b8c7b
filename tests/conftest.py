"""Shared test settings.

Hypothesis runs a bounded number of examples per test so the whole suite stays within a few
minutes on two cores. Under CI (``CI`` set) the examples are derandomized so a red run can be
repeated exactly; locally they vary from run to run and failures are kept in .hypothesis/.
Set ``BOXWOOD_HYPOTHESIS_PROFILE=thorough`` for a longer local search.
"""

from __future__ import annotations

import os

from hypothesis import HealthCheck, settings

_COMMON = {
    "deadline": None,
    "suppress_health_check": [HealthCheck.too_slow, HealthCheck.data_too_large],
    "print_blob": True,
}

settings.register_profile("default", max_examples=100, **_COMMON)
settings.register_profile("ci", max_examples=100, derandomize=True, database=None, **_COMMON)
settings.register_profile("thorough", max_examples=2000, **_COMMON)
settings.load_profile(
    os.environ.get("BOXWOOD_HYPOTHESIS_PROFILE", "ci" if os.environ.get("CI") else "default")
)

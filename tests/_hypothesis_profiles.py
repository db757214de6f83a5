"""Hypothesis settings of the property-based tests.

Two profiles, registered here and chosen with the environment variable
``DRIFTLOOP_HYPOTHESIS_PROFILE``:

``driftloop-ci`` (default)
    few examples per test, no deadline, derandomised (the same examples on
    every run, so CI is reproducible) and no example database.
``driftloop-long``
    ten times the examples, random, for a longer look by hand.

The profile is not loaded globally (other test modules keep their own
settings); each test takes :func:`profile` with its number of examples.
"""

from __future__ import annotations

import os

from hypothesis import HealthCheck, settings

__all__ = ["PROFILE", "profile"]

settings.register_profile(
    "driftloop-ci",
    deadline=None,
    derandomize=True,
    database=None,
    print_blob=False,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                           HealthCheck.large_base_example],
)
settings.register_profile(
    "driftloop-long",
    deadline=None,
    derandomize=False,
    database=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                           HealthCheck.large_base_example],
)

#: Name of the profile in use.
PROFILE = os.environ.get("DRIFTLOOP_HYPOTHESIS_PROFILE", "driftloop-ci")
_SCALE = 10 if PROFILE == "driftloop-long" else 1


def profile(examples: int) -> settings:
    """Return the settings of the chosen profile with ``examples`` examples (scaled).

    Parameters
    ----------
    examples : int
        Examples in the CI profile; the long profile runs ten times as many.

    Returns
    -------
    hypothesis.settings
        Usable as a decorator.
    """
    return settings(settings.get_profile(PROFILE), max_examples=examples * _SCALE)

"""Shared test settings: hypothesis profiles.

The normal suite uses hypothesis' default profile (kept fast).  ``make fuzz`` sets
HYPOTHESIS_PROFILE=fuzz and runs the tests marked ``@pytest.mark.fuzz`` with many
more examples and no deadline.
"""

import os

from hypothesis import HealthCheck, settings

settings.register_profile("fuzz", max_examples=10_000, deadline=None,
                          suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("dev", max_examples=20, deadline=None)
if os.environ.get("HYPOTHESIS_PROFILE"):
    settings.load_profile(os.environ["HYPOTHESIS_PROFILE"])


def pytest_collection_modifyitems(config, items):
    """Leave the long ``fuzz`` campaigns to ``make fuzz`` (the profile or ``-m fuzz`` selects them)."""
    import pytest

    if os.environ.get("HYPOTHESIS_PROFILE") == "fuzz" or "fuzz" in (config.getoption("-m") or ""):
        return
    skip = pytest.mark.skip(reason="fuzz campaign: run `make fuzz`")
    for item in items:
        if "fuzz" in item.keywords:
            item.add_marker(skip)

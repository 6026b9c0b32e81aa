"""Shared test configuration.

Hypothesis runs a bounded number of examples so the whole suite stays within a few minutes on 2 cores;
set HYPOTHESIS_PROFILE=thorough for a long local run.
"""

import os

from hypothesis import HealthCheck, settings

settings.register_profile("default", max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("thorough", max_examples=5000, deadline=None, suppress_health_check=[HealthCheck.too_slow])
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "default"))

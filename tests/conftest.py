"""Shared test settings."""

from hypothesis import HealthCheck, settings

settings.register_profile("project", deadline=None, max_examples=60, suppress_health_check=[HealthCheck.too_slow])
settings.load_profile("project")

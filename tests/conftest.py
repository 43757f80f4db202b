"""Shared pytest settings."""

from hypothesis import settings

# Property tests run a few hundred examples; no deadline because CI machines are shared.
settings.register_profile("firstorder", deadline=None, print_blob=True)
settings.load_profile("firstorder")

"""The bad-input corpus (cases.py) and the stash key under which the test run counts it."""

import pytest

CASES_RUN = pytest.StashKey[list]()
"""Names of the corpus cases run in this session (reported by tests/conftest.py)."""

"""Fixtures for CLI tests, shared with the history tests."""

from tests.history.fixtures import read_only_dir  # noqa: F401

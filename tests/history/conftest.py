"""Fixtures for history tests (shared with the CLI tests through ``tests.history.fixtures``)."""

from tests.history.fixtures import read_only_dir  # noqa: F401

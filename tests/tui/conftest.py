"""Shared pieces for the terminal UI tests: the demo board, a warm dictionary cache, helpers."""

from __future__ import annotations

import asyncio
import time
from pathlib import Path

import pytest

from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.tui.app import SessionRequest, make_app
from fieldtool.tui.meter_strip import MeterChoice

ROOT = Path(__file__).resolve().parents[2]
BOARD = ROOT / "fieldtool" / "profiles" / "tidegauge-apd-bias.toml"


@pytest.fixture(scope="session")
def profile():
    """The invented tide-gauge bias board (8-stage DC-fed ladder)."""
    return load_profile(BOARD)


@pytest.fixture(scope="session")
def cache_dir(tmp_path_factory, profile):
    """A dictionary cache shared by the session, built once."""
    folder = tmp_path_factory.mktemp("dictionary-cache")
    load_or_build(profile, cache_dir=folder)
    return folder


@pytest.fixture(scope="session")
def dictionary(profile, cache_dir):
    """The board's fault dictionary (from the warm cache)."""
    return load_or_build(profile, cache_dir=cache_dir)


def typed_app(profile, logs, cache_dir, serial="TG-0042", resume=False, meter=None):
    """The app opened straight on a board, readings typed."""
    request = SessionRequest(profile, serial, meter or MeterChoice(), resume=resume)
    rescue = Path(logs).parent / "rescue"
    return make_app(logs_dir=logs, request=request, cache_dir=cache_dir, rescue_dir=rescue)


async def until(pilot, predicate, timeout: float = 20.0, what: str = "condition") -> None:
    """Let the app run until ``predicate()`` holds; fail with ``what`` after ``timeout``."""
    deadline = time.monotonic() + timeout
    while not predicate():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        await pilot.pause(0.05)


async def probing(pilot):
    """Wait for the probing screen and return it."""
    from fieldtool.tui.probing import ProbingScreen

    await until(pilot, lambda: isinstance(pilot.app.screen, ProbingScreen), what="probing screen")
    await pilot.pause()
    return pilot.app.screen


async def type_reading(pilot, text: str) -> None:
    """Type a reading for the selected node and press Enter."""
    await pilot.press(*text, "enter")
    await pilot.pause()


def drain(app) -> None:
    """Wait until the history writer has tried everything handed to it."""
    assert app.writer is not None
    assert app.writer.drain(10.0), f"unsaved: {app.writer.unsaved}"


__all__ = ["asyncio", "drain", "probing", "type_reading", "typed_app", "until"]

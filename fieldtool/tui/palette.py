"""Screens that offer their main actions in the command palette, by name."""

from __future__ import annotations

from typing import ClassVar


class Commands:
    """Mixed into a screen: ``PALETTE`` lists (title, help, action) for the command palette;
    the app offers each one the screen has (``FieldtoolApp.get_system_commands``)."""

    PALETTE: ClassVar[tuple[tuple[str, str, str], ...]] = ()

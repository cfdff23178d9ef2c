"""What the probing screen shows as a technician moves around it at 80×24: the node table's
keys, its caption after a jump, negative bands in full, and the ladder's edge marks that must
not look like its diodes."""

from __future__ import annotations

from fieldtool.core.circuit.profile import load_profile
from fieldtool.tui.ladder import MORE_LEFT, MORE_RIGHT, LadderView
from fieldtool.tui.node_table import NodeTable
from tests.tui.conftest import ROOT, probing, typed_app, until

NEGATIVE = ROOT / "fieldtool" / "profiles" / "driftbuoy-sonar-neg5.toml"


def test_the_node_table_has_no_hidden_letter_keys():
    """Arrows, PgUp/PgDn and Home/End move the table; j/k were hidden and are gone, so a
    letter typed while the table has the focus can start a reading or a command instead."""
    keys = {k for b in NodeTable.BINDINGS for k in b.key.split(",")}
    assert keys == {"up", "down", "pageup", "pagedown", "home", "end"}


async def test_the_caption_follows_a_jump_and_the_ladder_marks_its_edges(
    profile, cache_dir, tmp_path
):
    app = typed_app(profile, tmp_path, cache_dir)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await probing(pilot)
        table = screen.query_one(NodeTable)
        ladder = screen.query_one(LadderView)
        assert table.border_subtitle.strip() == "rows 1–8 of 17"
        first = ladder.render().plain.splitlines()
        assert MORE_RIGHT in first[1] and MORE_LEFT not in first[1]
        await pilot.press("n")  # the suggested next node, further up the ladder
        await until(pilot, lambda: table.cursor >= 8, what="the jump")
        await pilot.pause()
        shown = [line.split()[0].lstrip("▶") for line in table.render().plain.splitlines()[1:]]
        low, high = table.top + 1, table.top + len(shown)
        assert table.border_subtitle.strip() == f"rows {low}–{high} of 17"
        assert shown[0] == table.nodes[table.top] and table.nodes[table.cursor] in shown
        jumped = ladder.render().plain.splitlines()
        assert MORE_LEFT in jumped[1]
        # The edge marks are not the diode marks, and only they sit at the edges.
        assert {MORE_LEFT, MORE_RIGHT}.isdisjoint({"▶", "◀"})
        assert jumped[1].lstrip()[0] == MORE_LEFT
        app.writer.drain(10.0)


async def test_negative_bands_are_shown_in_full(cache_dir, tmp_path):
    board = load_profile(NEGATIVE)
    app = typed_app(board, tmp_path, cache_dir)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await probing(pilot)
        table = screen.query_one(NodeTable)
        lines = table.render().plain.splitlines()
        for node, line in zip(table.nodes[table.top :], lines[1:], strict=False):
            band = table._band(node)
            assert band in line, (band, line)  # never cut, e.g. to "-58.4…-55."
            assert band.count("…") == 1 and not band.endswith(".")
        app.writer.drain(10.0)

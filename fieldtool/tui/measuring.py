"""What the probing screen is measuring and the board's power: the kind chosen for the selected
node or part, the power-off step and re-powering, the test load clipped on.

``MeasuringFlow`` is mixed into the probing screen. It keeps ``measuring`` (a ``kinds.Choice``:
where readings go and of which kind), tells the session the board's power state (which the
diagnosis uses for its efforts) and the meter loop the kind, the probe's place and, for the
simulated board, the power and the test load.
"""

from __future__ import annotations

from textual.binding import Binding

from fieldtool.core.measurement import DC
from fieldtool.core.session import BoardSession
from fieldtool.meters.loop import MeterLoop
from fieldtool.tui.kinds import (
    Choice,
    KindDialog,
    LoadCautionDialog,
    PowerOffDialog,
    load_words,
    suggested,
)

KIND_WORDS = "Choose what to measure here: DC, ripple, AC, under a test load, current, diode test"
POWER_WORDS = "Power the board off for diode tests (checklist), or on again"
MEASURING_BINDINGS = [
    Binding("k", "choose_kind", "Kind", tooltip=KIND_WORDS),
    Binding("p", "power", "Power", tooltip=POWER_WORDS),
]
MEASURING_PALETTE = (
    ("Choose what to measure", "DC, ripple, AC, a test load, current, diode test", "choose_kind"),
    ("Power off or on", "The power-off checklist before diode tests; power on again", "power"),
)


class MeasuringFlow:
    """The kind being measured and the board's power, for the probing screen."""

    session: BoardSession
    _meter: MeterLoop | None

    def init_measuring(self) -> None:
        """Start on DC volts at the selected node, the board powered, no test load."""
        self.measuring = Choice("", DC)
        self.load_on: float | None = None

    @property
    def place(self) -> str | None:
        """Where the next reading goes: the selected node for a kind taken at nodes, else the
        lead or part chosen."""
        if self.measuring.quantity.taken_at == "node":
            return self.selected
        return self.measuring.at

    def measuring_changed(self) -> None:
        """Redraw what shows the kind (the screen's own hook)."""

    def tell_meter(self) -> None:
        """Hand the kind, the board's state and the probe's place to the meter loop."""
        if self._meter is None:
            return
        self._meter.set_board(self.session.powered, self.load_on)
        self._meter.set_quantity(self.measuring.quantity, self.measuring.conditions)
        self._meter.place_probe(self.place)

    def measure(self, choice: Choice) -> None:
        """Measure ``choice`` from now on, after the power-off checklist (a diode test on a
        powered board) or the test load's caution (a reading under a load not yet on)."""
        powered = self.session.powered
        if not choice.quantity.powered and powered:
            dialog = PowerOffDialog(self.session.profile.safe_volts)
            self.app.push_screen(dialog, lambda off: off and self._powered_off(choice))
            return
        if choice.quantity.powered and not powered:
            self.notify(
                f"The board is off: {choice.words} needs it powered. Press p to power it again.",
                severity="warning",
            )
            return
        ohms = choice.test_load_ohms
        if ohms is not None and ohms != self.load_on:
            dialog = LoadCautionDialog(load_words(self.session, ohms))
            self.app.push_screen(dialog, lambda on: on and self._load_clipped(choice, ohms))
            return
        self._set(choice)

    def _set(self, choice: Choice) -> None:
        if choice.test_load_ohms is None and self.load_on is not None:
            self.notify(
                "Take the test load off: power off and discharge first.", severity="warning"
            )
            self.load_on = None
        self.measuring = choice
        self.tell_meter()
        self.measuring_changed()

    def _powered_off(self, choice: Choice) -> None:
        self.session.power(False)
        self.load_on = None
        self.notify("Board off and verified below the safe level: diode tests now.")
        self._set(choice)

    def _load_clipped(self, choice: Choice, ohms: float) -> None:
        self.load_on = ohms
        self._set(choice)

    def action_choose_kind(self) -> None:
        """Choose the kind (and lead or part) to measure."""
        node = self.selected
        self.app.push_screen(KindDialog(self.session, node), self._chosen)

    def _chosen(self, choice: Choice | None) -> None:
        if choice is None:
            return
        if choice.quantity.taken_at == "node" and choice.at != self.selected:
            self.select_node(choice.at)
        self.measure(choice)

    def action_power(self) -> None:
        """Power off (the checklist) or on again."""
        if self.session.powered:
            dialog = PowerOffDialog(self.session.profile.safe_volts)
            self.app.push_screen(dialog, lambda off: off and self._off_only())
            return
        self.session.power(True)
        self.notify("Board powered again: readings with the board on count from now.")
        self._set(Choice(self.selected or "", DC, (), ""))

    def _off_only(self) -> None:
        self.session.power(False)
        self.load_on = None
        self.notify("Board off and verified below the safe level. k chooses a diode test.")
        if self.measuring.quantity.powered:
            self.measuring = Choice(self.selected or "", DC)  # nothing powered is read now
        self.tell_meter()
        self.measuring_changed()

    def action_next_measurement(self) -> None:
        """Go to the measurement the diagnosis suggests (its kind, node, lead or part)."""
        best = suggested(self.session)
        if best is None:
            return
        if best.quantity.taken_at == "node":
            self.select_node(best.at)
        if (best.quantity, best.conditions) != (
            self.measuring.quantity,
            self.measuring.conditions,
        ) or best.quantity.taken_at != "node":
            self.measure(best)

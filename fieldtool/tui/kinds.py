"""Choosing what to measure: the kinds worth taking where the probe is, the power-off step with
its checklist, and the test load's power and caution before it is clipped on.

``measurement_choices`` lists every measurement the technician can take on the board from the
selected node (its DC volts, ripple, AC volts, DC volts under each test load), the supply and
drive leads (current) and every diode (diode test, board off), each with its worth from the
diagnosis (expected information per unit of effort, ``Diagnosis.worth``; where the diagnosis
ranks DC nodes only, the DC gains). The dialogs return what was chosen or confirmed; the
probing screen acts on it.
"""

from __future__ import annotations

from dataclasses import dataclass

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.content import Content
from textual.screen import ModalScreen
from textual.widgets import Button, Checkbox, Label, OptionList, Static
from textual.widgets.option_list import Option

from fieldtool.core.circuit.readouts.powered import load_watts
from fieldtool.core.circuit.safety import POWER_OFF_CAUTION, TEST_LOAD_CAUTION
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.diagnosis.ranking import Diagnosis
from fieldtool.core.measurement import (
    AC_RMS,
    CURRENT,
    DC,
    DC_LOADED,
    DIODE_TEST,
    QUANTITIES,
    RIPPLE_PP,
    Quantity,
)
from fieldtool.core.session import BoardSession
from fieldtool.core.units import format_si

Conditions = tuple[tuple[str, float], ...]
SHORT_NAMES = {  # for the glance line
    DC.name: "DC",
    RIPPLE_PP.name: "rip",
    AC_RMS.name: "AC",
    DC_LOADED.name: "load",
    CURRENT.name: "current",
    DIODE_TEST.name: "diode",
}
STRIP_NAMES = {  # for the meter strip, beside where the probe is
    RIPPLE_PP.name: "ripple p-p",
    AC_RMS.name: "AC volts",
    DC_LOADED.name: "under test load",
    CURRENT.name: "current",
    DIODE_TEST.name: "diode test",
}


@dataclass(frozen=True)
class Choice:
    """One measurement the technician can take: where, which kind, its settings, in words."""

    at: str
    quantity: Quantity
    conditions: Conditions = ()
    words: str = ""

    @property
    def test_load_ohms(self) -> float | None:
        """The test load this reading needs clipped on, if any."""
        return dict(self.conditions).get("test_load_ohms")


def worth_map(diagnosis: Diagnosis) -> dict[tuple[str, str], float]:
    """(at, kind) → expected bits per unit of effort of every measurement still available."""
    return dict(diagnosis.worth)


def suggested(session: BoardSession) -> Choice | None:
    """The diagnosis's next measurement as a choice, or None when nothing is worth taking."""
    best = session.diagnosis.next_measurement
    if best is None:
        return None
    return Choice(best.at, QUANTITIES[best.quantity], tuple(best.conditions), best.words)


def level(score: float | None, best: float) -> int:
    """0–3: how worth taking a measurement is, against the best one (3: about as good)."""
    if score is None or best <= 0 or score <= 0.02 * best:
        return 0
    return 1 + int(score >= best / 3) + int(score >= 0.8 * best)


def glyphs(score: float | None, best: float) -> str:
    """Three cells: ▮▮▮ the most worth taking, ··· not worth it (or not known)."""
    filled = level(score, best)
    return "▮" * filled + "·" * (3 - filled)


BAR = "·▂▅█"  # one cell: level 0–3, for the glance line


def output_volts(session: BoardSession) -> tuple[str, float]:
    """The output node and its expected DC volts on a healthy board."""
    d = session.dictionary
    out = d.nodes[-1]
    return out, d.band(out).expected


def load_words(session: BoardSession, ohms: float) -> str:
    """The test load's power at the expected output, and its caution."""
    out, volts = output_volts(session)
    watts = load_watts(volts, ohms)
    rated = next((r.rated_watts for r in session.profile.test_loads if r.ohms == ohms), None)
    rating = ""
    if rated is not None:
        # common practice, no source: run a resistor at half its rating or less
        verdict = "within half" if watts <= rated / 2 else "MORE than half"
        rating = (
            f" The profile rates this resistor {rated:g} W: that is {verdict} its rating "
            "(keep a load at half its rating or less)."
        )
    return (
        f"The {format_si(ohms)}Ω test load from {out} to ground takes about {watts:.3g} W at "
        f"{volts:.4g} V.{rating} {TEST_LOAD_CAUTION}"
    )


def measurement_choices(session: BoardSession, node: str | None) -> list[Choice]:
    """Every measurement from ``node`` (if any), the leads and the diodes, in that order."""
    p = session.profile
    out: list[Choice] = []
    if node is not None:
        out += [
            Choice(node, DC, (), f"DC volts at {node}"),
            Choice(node, RIPPLE_PP, (), f"ripple peak to peak at {node} (scope)"),
            Choice(node, AC_RMS, (), f"AC volts at {node} (true-RMS meter on AC)"),
        ]
        for load in p.test_loads:
            ohms = (("test_load_ohms", load.ohms),)
            words = f"DC volts at {node} with the {format_si(load.ohms)}Ω test load on"
            out.append(Choice(node, DC_LOADED, ohms, words))
    for rail in session.places["rail"]:
        lead = "supply lead" if rail == "supply" else "driver's rail"
        out.append(Choice(rail, CURRENT, (), f"{rail} current (meter in series with the {lead})"))
    for ref in session.places["part"]:
        out.append(Choice(ref, DIODE_TEST, (), f"diode test across {display_name(p, ref)}"))
    return out


def glance(session: BoardSession, node: str | None) -> Content:
    """One short line: how worth taking each kind is at ``node`` (one cell each, against the
    best measurement anywhere), e.g. ``S3 DC▂ rip█ AC▅ load· [k]``."""
    if node is None:
        return Content("")
    worth = worth_map(session.diagnosis)
    best = max(worth.values(), default=0.0)
    parts: list[Content | str | tuple[str, str]] = [f"{node} "]
    for kind in (DC, RIPPLE_PP, AC_RMS, DC_LOADED):
        score = worth.get((node, kind.name))
        if score is None and kind is not DC:
            continue
        parts += [SHORT_NAMES[kind.name], (BAR[level(score, best)], "bold $text-accent"), " "]
    parts.append(("[k]", "bold"))
    return Content.assemble(*parts)


class KindDialog(ModalScreen[Choice | None]):
    """Choose what to measure next; each line shows how worth taking it is."""

    BINDINGS = [Binding("escape", "dismiss(None)", "Cancel")]

    def __init__(self, session: BoardSession, node: str | None) -> None:
        super().__init__()
        every = measurement_choices(session, node)
        # what can be taken with the board as it is comes first
        self.choices = sorted(every, key=lambda c: c.quantity.powered != session.powered)
        worth = worth_map(session.diagnosis)
        self.best = max(worth.values(), default=0.0)
        self.scores = [worth.get((c.at, c.quantity.name)) for c in self.choices]
        self.powered = session.powered

    def compose(self) -> ComposeResult:
        """The list, best marked, and a note on the board's power."""
        power = "on" if self.powered else "OFF (diode tests only)"
        options = [
            Option(Content.assemble((glyphs(s, self.best), "$text-accent"), f" {c.words}"))
            for c, s in zip(self.choices, self.scores, strict=True)
        ]
        with Vertical(classes="dialog"):
            yield Label("What to measure", classes="dialog-title")
            yield Static(
                f"▮▮▮ most worth taking for its effort. Board power: {power}.",
                classes="dialog-body",
            )
            yield OptionList(*options, id="kinds")

    def on_mount(self) -> None:
        """Start on the most worth taking."""
        options = self.query_one(OptionList)
        now = [
            (score or 0.0, -i)
            for i, (c, score) in enumerate(zip(self.choices, self.scores, strict=True))
            if c.quantity.powered == self.powered
        ]
        options.highlighted = -max(now)[1] if now else 0
        options.focus()

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        """Hand back the choice."""
        self.dismiss(self.choices[event.option_index])


class PowerOffDialog(ModalScreen[bool]):
    """The power-off step: its caution and the checklist the technician confirms."""

    BINDINGS = [Binding("escape", "dismiss(False)", "Cancel")]
    STEPS = (
        "Supply disconnected (and the drive, where it has its own rail)",
        "Every capacitor discharged through a rated resistor",
        "Every node verified below {safe:g} V with the meter on DC volts",
    )

    def __init__(self, safe_volts: float) -> None:
        super().__init__()
        self.safe_volts = safe_volts

    def compose(self) -> ComposeResult:
        """Caution, three boxes to tick, the buttons."""
        with Vertical(classes="dialog error"):
            yield Label("Power off for diode tests", classes="dialog-title")
            yield Static(POWER_OFF_CAUTION.format(safe=self.safe_volts), classes="dialog-body")
            for step in self.STEPS:
                yield Checkbox(step.format(safe=self.safe_volts), compact=True)
            with Horizontal(classes="dialog-buttons"):
                yield Button("Board is off", id="off", variant="error", disabled=True)
                yield Button("Cancel", id="cancel")

    def on_checkbox_changed(self) -> None:
        """The step is confirmed only with every box ticked."""
        ticked = all(box.value for box in self.query(Checkbox))
        self.query_one("#off", Button).disabled = not ticked

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Confirmed or not."""
        self.dismiss(event.button.id == "off")


class LoadCautionDialog(ModalScreen[bool]):
    """The test load's power and caution, confirmed before a reading under it."""

    BINDINGS = [Binding("escape", "dismiss(False)", "Cancel")]

    def __init__(self, words: str) -> None:
        super().__init__()
        self.words = words

    def compose(self) -> ComposeResult:
        """The power, the caution, one box to tick."""
        with Vertical(classes="dialog error"):
            yield Label("Clip on the test load", classes="dialog-title")
            yield Static(self.words, classes="dialog-body")
            yield Checkbox("Clipped on with the board off, then powered again", compact=True)
            with Horizontal(classes="dialog-buttons"):
                yield Button("Load is on", id="on", variant="error", disabled=True)
                yield Button("Cancel", id="cancel")

    def on_checkbox_changed(self, event: Checkbox.Changed) -> None:
        """Only once the box is ticked."""
        self.query_one("#on", Button).disabled = not event.value

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Confirmed or not."""
        self.dismiss(event.button.id == "on")

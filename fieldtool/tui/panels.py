"""The probing screen's panels: suspects and the safety strip."""

from __future__ import annotations

from textual.content import Content
from textual.widgets import Static

from fieldtool.core.circuit.safety import (
    HAZARD_NOTE,
    HAZARD_STANDARD,
    SafetyFigures,
    format_duration,
)
from fieldtool.core.diagnosis.ranking import Diagnosis
from fieldtool.core.hazard import SAFETY_WARNING, SIGNAL_WORD
from fieldtool.tui.view import bar, percent_text, volts_text


class SuspectsPanel(Static):
    """Ranked suspects with probability bars, ambiguity in words, the next probe."""

    def __init__(self, labels: dict[str, str], **kwargs) -> None:
        super().__init__(**kwargs)
        self.labels = labels
        self.diagnosis: Diagnosis | None = None
        self.glance = Content("")  # which kinds are worth taking at the selected node

    def on_mount(self) -> None:
        """Title the panel."""
        self.border_title = "Suspects"

    def on_resize(self) -> None:
        """Bars follow the panel's width."""
        self.refresh_text()

    def show(self, diagnosis: Diagnosis, glance: Content | None = None) -> None:
        """Show a new diagnosis (and which kinds are worth taking at the selected node)."""
        self.diagnosis = diagnosis
        if glance is not None:
            self.glance = glance
        self.refresh_text()

    def next_line(self) -> Content:
        """Where to probe next, or why nowhere."""
        d = self.diagnosis
        if d is None:
            return Content("")
        best = d.next_measurement
        if best is not None:
            bits = f" {best.gain_bits:.2f} bits "
            if len(best.words) + len(bits) + 10 > self.size.width:
                bits = " "  # a narrow panel keeps the words on as few lines as it can
            return Content.assemble(
                "Next ▸ ", (best.words, "bold $text-accent"), bits, ("[n]", "bold")
            )
        top = d.suspects[0] if d.suspects else None
        if top is not None and top.probability >= 0.9:
            return Content.assemble(
                ("Past 90 %: ", "bold"), f"{top.words}. ", ("[r]", "bold"), " records a repair"
            )
        return Content.styled("No measurement left that would change the ranking.", "$text-muted")

    def refresh_text(self) -> None:
        """Redraw for the current width and height."""
        d = self.diagnosis
        if d is None:
            self.update("Waiting for the fault dictionary…")
            return
        width = max(self.size.width, 24)
        lines: list[Content] = []
        if d.fit.no_fit:
            lines.append(
                Content.styled(f"⚠ No single fault fits: {d.fit.text}", "bold $text-error")
            )
        lines.insert(0, self.next_line())
        if self.glance:
            lines.insert(1, self.glance)
        notes = [Content.styled(f"≈ {g.text}", "$text-warning") for g in d.ambiguity]
        room = max(3, self.size.height - len(lines) - len(notes) - 1)
        name_w = min(24, max(9, width - 17))
        bar_w = max(3, width - name_w - 9)
        ranked = []
        shown = 0.0
        for i, s in enumerate(d.suspects[:room], start=1):
            if i > 5 and shown >= 0.999:
                break  # the long tail of hypotheses the readings have ruled out
            shown += s.probability
            words = (s.words or s.key)[:name_w].ljust(name_w)
            style = "bold" if i == 1 else ""
            ranked.append(
                Content.assemble(
                    f"{i:>2} ",
                    (words, style),
                    " ",
                    (bar(s.probability, bar_w), "$text-primary"),
                    f" {percent_text(s.probability):>4}",
                )
            )
        top = d.suspects[0] if d.suspects else None
        if top is not None and top.prior_source:
            notes.append(Content.styled(f"prior: {top.prior_source}", "$text-muted"))
        self.update(Content("\n").join(lines + ranked + notes))


class SafetyStrip(Static):
    """Highest voltage, stored energy, time to the safe level, caution for the selected node."""

    def on_mount(self) -> None:
        """Title the strip and show the standing caution until figures arrive."""
        self.border_title = "Safety"
        self.figures: SafetyFigures | None = None
        self.selected_hazard = False
        self.selected: str | None = None
        self.redraw()

    def show(self, figures: SafetyFigures | None, selected: str | None, hazard: bool) -> None:
        """Show new figures and whether the selected node is above the threshold."""
        self.figures = figures
        self.selected = selected
        self.selected_hazard = hazard
        self.redraw()

    def redraw(self) -> None:
        """Two lines: figures, then the caution that applies now."""
        f = self.figures
        if f is None:
            first = Content.styled("Safety figures: computing…", "$text-muted")
        else:
            where = "read" if f.highest_measured else "expected"
            stored = f"{f.stored_energy_j:.3g} J"
            if f.estimated:
                stored += " (some expected)"
            first = Content.assemble(
                ("⚡ ", "bold $text-warning"),
                f"{f.highest_node} {volts_text(f.highest_volts)} V ({where}) · {stored} · ",
                f"<{f.safe_volts:g} V already"
                if f.discharge_s == 0
                else f"<{f.safe_volts:g} V {format_duration(f.discharge_s)} after power-off",
            )
            if f.overloaded:
                first += Content.styled(f" · OL at {', '.join(f.overloaded)}", "bold $text-error")
        if f is not None and self.selected_hazard:
            why = (
                f"{HAZARD_STANDARD} threshold, from memory"
                if f.threshold_source == HAZARD_NOTE
                else "the profile's safe level"
            )
            second = Content.styled(
                f"⚠ {SIGNAL_WORD}: {self.selected} is above {f.safe_volts:g} V ({why}; s for "
                "detail) · rated probes, one hand · discharge and verify before touching",
                "bold $text-error",
            )
        else:
            second = Content.styled(SAFETY_WARNING if f is None else f.warning, "$text-muted")
        self.update(first + Content("\n") + second)

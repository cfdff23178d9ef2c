"""`fieldtool expect`: the readings beyond DC volts (ripple, AC RMS, supply current, test loads,
diode tests), as text and JSON."""

from __future__ import annotations

import math

from fieldtool.core.circuit.readouts.board import BoardReadouts
from fieldtool.core.circuit.readouts.diode_test import DIRECTIONS
from fieldtool.core.circuit.safety import POWER_OFF_CAUTION, TEST_LOAD_CAUTION
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.hazard import signal_word


def _num(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def si(x: float | None, unit: str) -> str:
    """A value for people: four significant digits and an SI prefix, ``4.7 kΩ``, ``n/a``."""
    if x is None or not math.isfinite(x):
        return "n/a"
    for scale, prefix in ((1e6, "M"), (1e3, "k"), (1, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n")):
        if abs(x) >= scale or scale == 1e-9:
            return f"{x / scale:.4g} {prefix}{unit}"
    return f"{x:g} {unit}"


_si = si


def _floored(volts: float, floor: float) -> str:
    """A reading, or ``< floor`` where it is below the instrument's fixed error."""
    return f"< {si(floor, 'V')}" if abs(volts) < floor else si(volts, "V")


def node_json(b: BoardReadouts, j: int) -> dict:
    """The new per-node keys of one probe node."""
    r = b.powered
    return {
        "ripple_pp_scope_volts": _num(r.ripple_pp[0, j]),
        "ac_rms_volts": _num(r.ac_rms[0, j]),
        "test_loads": [
            {
                "ohms": ohms,
                "volts": _num(r.dc_loaded[0, k, j]),
            }
            for k, ohms in enumerate(r.test_load_ohms)
        ],
    }


def board_json(b: BoardReadouts) -> dict:
    """The new board-level keys: supply current, test loads' power, diode tests, cautions."""
    p, r, d = b.profile, b.powered, b.diodes
    tests = []
    for i, ref in enumerate(d.diodes):
        entry: dict = {"designator": display_name(p, ref), "default_designator": ref}
        for k, way in enumerate(DIRECTIONS):
            entry[way] = {
                "volts": _num(d.volts[0, i, k]),
                "over_range": bool(d.over_range[0, i, k]),
                "settle_s": _num(d.settle_s[0, i, k]),
                "lift_one_leg": bool(d.lift[0, i, k]),
                "reason": d.reason(0, i, k),
            }
        tests.append(entry)
    return {
        "supply_current_metered_a": _num(r.supply_amps[0]),
        "drive_rail_current_metered_a": _num(r.rail_amps[0]),
        "meter_burden_ohms": p.instruments.burden_ohms,
        "test_loads": [
            {
                "ohms": t.ohms,
                "watts": t.watts,
                "volts": t.volts,
                "rated_watts": t.rated_watts,
                "over_rating": t.over_rating,
            }
            for t in b.test_loads
        ],
        "diode_tests": tests,
        "diode_test_amps": p.instruments.diode_test_amps,
        "diode_test_open_volts": p.instruments.diode_test_volts,
        "cautions": {
            "test_load": TEST_LOAD_CAUTION,
            "power_off": POWER_OFF_CAUTION.format(safe=p.safe_volts),
        },
    }


def text(b: BoardReadouts) -> str:
    """Readable tables of the readings beyond DC volts."""
    p, r = b.profile, b.powered
    inst = p.instruments
    loads = [f"DC {_si(o, 'Ω')} load" for o in r.test_load_ohms]
    head = f"{'node':<6}{'ripple p-p':>13}{'AC RMS':>12}" + "".join(f"{h:>16}" for h in loads)
    lines = [
        "",
        "(< x: below the instrument's fixed error)",
        f"beyond DC volts: ripple on a scope ({_si(inst.probe_ohms, 'Ω')} probe), AC RMS on a "
        f"true-RMS meter (to {_si(inst.ac_bandwidth_hz, 'Hz')})"
        + (", DC with a test load on the output" if loads else ""),
        head,
    ]
    for j, node in enumerate(r.nodes):
        ripple = _floored(r.ripple_pp[0, j], inst.scope_accuracy_volts)
        ac = _floored(r.ac_rms[0, j], inst.ac_accuracy_volts)
        row = f"{node:<6}{ripple:>13}{ac:>12}"
        row += "".join(f"{_si(r.dc_loaded[0, k, j], 'V'):>16}" for k in range(len(loads)))
        lines.append(row)
    if math.isfinite(r.supply_amps[0]):
        lines.append(
            f"supply current, meter in the supply lead ({_si(inst.burden_ohms, 'Ω')} burden): "
            f"{_si(r.supply_amps[0], 'A')}"
        )
    if math.isfinite(r.rail_amps[0]):
        lines.append(
            f"drive-rail current, meter in the driver's own supply rail, where it has one: "
            f"{_si(r.rail_amps[0], 'A')}"
        )
    for t in b.test_loads:
        rated = f" (rated {_si(t.rated_watts, 'W')})" if t.rated_watts is not None else ""
        warn = "  OVER ITS RATING: use a bigger resistor" if t.over_rating else ""
        lines.append(
            f"test load {_si(t.ohms, 'Ω')} takes {_si(t.watts, 'W')} at "
            f"{_si(abs(t.volts), 'V')}{rated}{warn}"
        )
    if b.test_loads:
        lines.append(f"{_word(b)}: {TEST_LOAD_CAUTION}")
    lines += ["", _diode_text(b)]
    return "\n".join(lines)


def _diode_text(b: BoardReadouts) -> str:
    p, d = b.profile, b.diodes
    inst = p.instruments
    lines = [
        f"diode test, board off and discharged ({_si(inst.diode_test_amps, 'A')}, OL above "
        f"{_si(inst.diode_test_volts, 'V')}): red lead on the anode, then reversed",
    ]
    rows: list[tuple[list[str], str]] = []  # consecutive parts that read alike share a line
    for i, ref in enumerate(d.diodes):
        said = _diode_words(b, i)
        if rows and rows[-1][1] == said:
            rows[-1][0].append(display_name(p, ref))
        else:
            rows.append(([display_name(p, ref)], said))
    for names, said in rows:
        who = names[0] if len(names) == 1 else f"{names[0]} … {names[-1]}"
        lines.append(f"  {who:<10}{said}")
    lines.append(f"{_word(b)}: {POWER_OFF_CAUTION.format(safe=p.safe_volts)}")
    return "\n".join(lines)


def _word(b: BoardReadouts) -> str:
    """The signal word for this board's stored charge: WARNING where its output reaches the
    safe level, CAUTION below it (``fieldtool.core.hazard``)."""
    return signal_word(b.output_volts, b.profile.safe_volts)


def _diode_words(b: BoardReadouts, i: int) -> str:
    """One diode's expected diode-test readings in words."""
    d = b.diodes
    if d.lift[0, i, 0]:
        return f"lift one leg to test this part: {d.reason(0, i, 0)}"
    ways = []
    for k, way in enumerate(DIRECTIONS):
        if d.over_range[0, i, k]:
            ways.append(f"{way} OL")
        elif d.lift[0, i, k]:
            ways.append(f"{way}: lift one leg ({d.reason(0, i, k)})")
        else:
            ways.append(f"{way} {d.volts[0, i, k]:.3f} V")
    return ", ".join(ways)

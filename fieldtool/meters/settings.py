"""Meter settings read from a small TOML file; the defaults suit a generic SCPI meter."""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from fieldtool.core.errors import shown
from fieldtool.core.measurement import QUANTITIES, Quantity
from fieldtool.core.plausible import Range
from fieldtool.meters.errors import MeterSettingsError
from fieldtool.meters.modes import DC_VOLTS, mode_of

PROTOCOLS = ("scpi", "stream")
TERMINATORS = ("\n", "\r\n", "\r")
# The number (or OL), then the unit with what a meter prints after it: "V", "mV DC", "VAC",
# "V~", "mA", "uA", "V DIODE", "V ->|", "Vpp" (``modes.unit_marking`` says which is which).
DEFAULT_STREAM_REGEX = (
    r"(?P<value>[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?|\bOL\b)\s*"
    r"(?P<unit>[nmkuµμ]?[VA](?:\s*(?:AC|DC|~|=|⎓|DIODE|->\||▶\||p-?p)(?![A-Za-z]))?)?"
)
STREAM_KINDS = ("auto", *QUANTITIES)  # auto: the kind from the unit each line prints


@dataclass(frozen=True)
class SettleRule:
    """When a reading counts as settled: ``count`` in a row within percent*|v|/100 + volts.

    ``percent`` is a percentage: 0.2 means 0.2 % of the reading, not 20 %. With ``trend``
    the ``count`` readings before those must agree too and their mean may differ by at most
    half the band, so a slow creep (a node charging through the meter) is not called settled.
    """

    count: int = 3
    percent: float = 0.2
    volts: float = 0.005
    timeout_s: float = 10.0
    trend: bool = True
    # The fixed part of the band for a current (volts is for every reading in volts): a
    # handheld's µA range resolves 0.1 µA, a few counts of it (common practice, no source).
    amps: float = 1e-6

    def fixed(self, unit: str) -> float:
        """The fixed part of the band for a reading in ``unit`` ("V" or "A")."""
        return self.amps if unit == "A" else self.volts


@dataclass(frozen=True)
class MeterSettings:
    """How to talk to one meter."""

    protocol: str = "scpi"
    baud: int = 9600
    terminator: str = "\n"
    read_command: str = "READ?"
    configure_command: str = "CONF:VOLT:DC"
    stream_regex: str = DEFAULT_STREAM_REGEX
    timeout_s: float = 2.0
    command_delay_s: float = 0.0  # pause between commands, for meters that drop fast ones
    settle: SettleRule = field(default_factory=SettleRule)
    # [configure]: kind → its set-up command, "" where the meter has no such mode; kinds not
    # listed use the mode's SCPI command (``modes``), dc-loaded the one for dc.
    configure: tuple[tuple[str, str], ...] = ()
    check_errors: bool = True  # ask SYST:ERR? after each set-up and refuse what it reports
    stream_kind: str = "auto"  # a streaming meter's kind: from its unit, or always this one

    def setup_command(self, quantity: Quantity) -> str:
        """The SCPI command that sets the meter up for ``quantity`` ("" where it cannot)."""
        given = dict(self.configure)
        mode = mode_of(quantity)
        for kind in (quantity.name, mode.kinds[0]):
            if kind in given:
                return given[kind]
        return self.configure_command if mode is DC_VOLTS else mode.scpi


def _check_type(where: str, key: str, value: object, kind: type) -> object:
    """Return value if it is of ``kind`` (ints allowed for floats), else refuse."""
    if kind is float and isinstance(value, int) and not isinstance(value, bool):
        if abs(value) > 10**300:
            raise MeterSettingsError(f"{where}: key '{key}' is {shown(value)}, far too large")
        return float(value)
    if kind is bool and isinstance(value, bool):
        return value
    if isinstance(value, bool) or not isinstance(value, kind):
        raise MeterSettingsError(
            f"{where}: key '{key}' must be {kind.__name__}, not {type(value).__name__} "
            f"({shown(value)})"
        )
    return value


def _build(cls: type, table: dict, where: str, prefix: str = "") -> dict:
    """Check every key of ``table`` against the dataclass ``cls`` and return keyword args."""
    known = {f.name: f for f in fields(cls)}
    kwargs: dict = {}
    for key, value in table.items():
        name = prefix + key
        if key not in known:
            allowed = ", ".join(sorted(known))
            raise MeterSettingsError(f"{where}: unknown key '{name}' (known keys: {allowed})")
        kind = known[key].type
        if key == "configure" and cls is MeterSettings:
            kwargs[key] = _configure_table(value, where)
            continue
        if kind == "SettleRule":
            if not isinstance(value, dict):
                raise MeterSettingsError(f"{where}: key '{name}' must be a table [settle]")
            kwargs[key] = SettleRule(**_build(SettleRule, value, where, prefix="settle."))
            continue
        kwargs[key] = _check_type(
            where, name, value, {"str": str, "int": int, "float": float, "bool": bool}[kind]
        )
    return kwargs


def _configure_table(table: object, where: str) -> tuple[tuple[str, str], ...]:
    """The ``[configure]`` table: a known kind → a set-up command (a string)."""
    if not isinstance(table, dict):
        raise MeterSettingsError(f"{where}: key 'configure' must be a table [configure]")
    out = []
    for kind, command in table.items():
        if kind not in QUANTITIES:
            known = ", ".join(QUANTITIES)
            raise MeterSettingsError(
                f"{where}: [configure] has unknown kind {shown(kind)} (known kinds: {known})"
            )
        out.append((kind, str(_check_type(where, f"configure.{kind}", command, str))))
    return tuple(out)


# Plausible values (see fieldtool.core.plausible), each with its reason.
BAUD_RATES = (50, 4_000_000)  # from teleprinter rates to fast USB-serial adapters
TIMEOUT_S = Range(
    0.01, 600.0, "s", "a meter answers within seconds; ten minutes of silence is a hang"
)
SETTLE_TIMEOUT_S = Range(
    0.1,
    3600.0,
    "s",
    "a node behind an open part can creep for minutes; an hour is beyond any bench wait",
)
COMMAND_DELAY_S = Range(0.0, 10.0, "s", "slow meters need up to a few hundred milliseconds")
SETTLE_PERCENT = Range(0.0, 100.0, "%", "percent of the reading: 0.2 means 0.2 %")
SETTLE_VOLTS = Range(0.0, 1000.0, "V", "the fixed part of the settle band")
SETTLE_AMPS = Range(0.0, 1.0, "A", "the fixed part of the settle band for a current")
SETTLE_COUNT = (1, 100)  # readings in a row that must agree
COMMAND_MAX_CHARACTERS = 100


def _problems(settings: MeterSettings) -> list[str]:
    """Why the settings cannot work, as ``key problem`` phrases (empty when they can)."""
    found = []
    if settings.protocol not in PROTOCOLS:
        found.append(f"protocol must be scpi or stream, not {shown(settings.protocol)}")
    low, high = BAUD_RATES
    if not low <= settings.baud <= high:
        found.append(f"baud must be {low} to {high}, not {shown(settings.baud)}")
    if settings.terminator not in TERMINATORS:
        found.append(
            f'terminator must be "\\n", "\\r\\n" or "\\r", not {shown(settings.terminator)}'
        )
    for key, value, limit in (
        ("timeout_s", settings.timeout_s, TIMEOUT_S),
        ("command_delay_s", settings.command_delay_s, COMMAND_DELAY_S),
        ("settle.timeout_s", settings.settle.timeout_s, SETTLE_TIMEOUT_S),
        ("settle.percent", settings.settle.percent, SETTLE_PERCENT),
        ("settle.volts", settings.settle.volts, SETTLE_VOLTS),
        ("settle.amps", settings.settle.amps, SETTLE_AMPS),
    ):
        problem = limit.problem(value)
        if problem:
            found.append(f"{key} {problem}")
    low, high = SETTLE_COUNT
    if not low <= settings.settle.count <= high:
        found.append(f"settle.count must be {low} to {high}, not {shown(settings.settle.count)}")
    if settings.stream_kind not in STREAM_KINDS:
        found.append(
            f"stream_kind must be one of {', '.join(STREAM_KINDS)}, "
            f"not {shown(settings.stream_kind)}"
        )
    for key, command in (
        ("read_command", settings.read_command),
        ("configure_command", settings.configure_command),
        *((f"configure.{kind}", text) for kind, text in settings.configure),
    ):
        if len(command) > COMMAND_MAX_CHARACTERS or not all(" " <= c <= "~" for c in command):
            found.append(
                f"{key} {shown(command)} must be printable ASCII of at most "
                f"{COMMAND_MAX_CHARACTERS} characters (the terminator is added for you)"
            )
    found += _regex_problems(settings.stream_regex)
    return found


def _regex_problems(text: str) -> list[str]:
    try:
        pattern = re.compile(text)
    except (re.error, RecursionError, OverflowError) as exc:
        return [f"stream_regex {shown(text)} does not compile ({exc})"]
    if "value" not in pattern.groupindex:
        return ["stream_regex needs a named group (?P<value>...) around the number"]
    return []


def validate(settings: MeterSettings, where: str = "settings") -> MeterSettings:
    """Refuse values that are of the right type but unusable (the first problem is named)."""
    problems = _problems(settings)
    if problems:
        raise MeterSettingsError(f"{where}: {problems[0]}")
    return settings


def parse_settings(text: str, where: str = "settings") -> MeterSettings:
    """Meter settings from TOML text; ``where`` names the file in messages."""
    try:
        table = tomllib.loads(text.removeprefix("\ufeff"))
    except tomllib.TOMLDecodeError as exc:
        raise MeterSettingsError(f"{where}: not valid TOML ({exc})") from None
    except ValueError:  # Python refuses integers of thousands of digits
        raise MeterSettingsError(
            f"{where}: holds a number thousands of digits long; fix that value"
        ) from None
    return validate(MeterSettings(**_build(MeterSettings, table, where)), where)


def load_settings(path: str | Path) -> MeterSettings:
    """Meter settings from a TOML file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise MeterSettingsError(f"{path}: is not UTF-8 text; save it as UTF-8") from None
    except OSError as exc:
        raise MeterSettingsError(f"{path}: cannot read settings file ({exc.strerror})") from None
    return parse_settings(text, where=str(path))


def with_overrides(settings: MeterSettings, **changes: object) -> MeterSettings:
    """Settings with the given non-None fields replaced (command-line options)."""
    chosen = {k: v for k, v in changes.items() if v is not None}
    return validate(replace(settings, **chosen), "command line")

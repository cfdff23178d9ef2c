"""Meter settings read from a small TOML file; the defaults suit a generic SCPI meter."""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from fieldtool.core.measurement import QUANTITIES, Quantity
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
        return float(value)
    if isinstance(value, bool) or not isinstance(value, kind):
        raise MeterSettingsError(
            f"{where}: key '{key}' must be {kind.__name__}, not {type(value).__name__} ({value!r})"
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
                f"{where}: [configure] has unknown kind '{kind}' (known kinds: {known})"
            )
        out.append((kind, str(_check_type(where, f"configure.{kind}", command, str))))
    return tuple(out)


def validate(settings: MeterSettings, where: str = "settings") -> MeterSettings:
    """Refuse values that are of the right type but unusable."""
    if settings.protocol not in PROTOCOLS:
        raise MeterSettingsError(
            f"{where}: protocol must be scpi or stream, not '{settings.protocol}'"
        )
    if settings.baud <= 0:
        raise MeterSettingsError(f"{where}: baud must be positive, not {settings.baud}")
    if settings.terminator not in TERMINATORS:
        raise MeterSettingsError(
            f'{where}: terminator must be "\\n" or "\\r\\n", not {settings.terminator!r}'
        )
    if not 0 <= settings.command_delay_s <= 10:
        raise MeterSettingsError(
            f"{where}: command_delay_s must be 0 to 10 seconds, not {settings.command_delay_s:g}"
        )
    if settings.timeout_s <= 0 or settings.settle.timeout_s <= 0:
        raise MeterSettingsError(f"{where}: timeouts must be positive seconds")
    if settings.settle.count < 1:
        raise MeterSettingsError(f"{where}: settle.count must be at least 1")
    if settings.settle.percent < 0 or settings.settle.volts < 0:
        raise MeterSettingsError(f"{where}: settle.percent and settle.volts must not be negative")
    if settings.stream_kind not in STREAM_KINDS:
        raise MeterSettingsError(
            f"{where}: stream_kind must be one of {', '.join(STREAM_KINDS)}, "
            f"not '{settings.stream_kind}'"
        )
    if settings.settle.amps < 0:
        raise MeterSettingsError(f"{where}: settle.amps must not be negative")
    if settings.protocol == "stream" and "(?P<value>" not in settings.stream_regex:
        raise MeterSettingsError(f"{where}: stream_regex needs a named group (?P<value>...)")
    return settings


def parse_settings(text: str, where: str = "settings") -> MeterSettings:
    """Meter settings from TOML text; ``where`` names the file in messages."""
    try:
        table = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise MeterSettingsError(f"{where}: not valid TOML ({exc})") from None
    return validate(MeterSettings(**_build(MeterSettings, table, where)), where)


def load_settings(path: str | Path) -> MeterSettings:
    """Meter settings from a TOML file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise MeterSettingsError(f"{path}: cannot read settings file ({exc.strerror})") from None
    return parse_settings(text, where=str(path))


def with_overrides(settings: MeterSettings, **changes: object) -> MeterSettings:
    """Settings with the given non-None fields replaced (command-line options)."""
    chosen = {k: v for k, v in changes.items() if v is not None}
    return validate(replace(settings, **chosen), "command line")

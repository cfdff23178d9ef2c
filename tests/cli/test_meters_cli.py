"""``fieldtool ports`` and ``fieldtool read`` through fieldtool.cli.main."""

import json
import os
import threading

import pytest

from fieldtool.cli import main


def _meter(fd, replies, heard=None):
    """A SCPI meter on the pty's master: its identity, an empty error queue, ``replies`` to
    READ? in turn; every command goes into ``heard`` (when given)."""
    buf = b""
    while replies:
        try:
            buf += os.read(fd, 256)
        except OSError:
            return
        while b"\n" in buf and replies:
            line, buf = buf.split(b"\n", 1)
            if heard is not None:
                heard.append(line.strip().decode())
            if line.strip() == b"*IDN?":
                os.write(fd, b"ACME,DMM-1,42,2.0\n")
            elif line.strip() == b"SYST:ERR?":
                os.write(fd, b'0,"No error"\n')
            elif line.strip() == b"READ?":
                os.write(fd, replies.pop(0))


@pytest.fixture
def pty_meter():
    master, slave = os.openpty()
    name = os.ttyname(slave)
    yield master, name
    os.close(slave)
    os.close(master)


def test_read_json(pty_meter, capsys):
    master, name = pty_meter
    threading.Thread(target=_meter, args=(master, [b"+1.234E+01\n"]), daemon=True).start()
    assert main(["read", "--port", name, "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == {
        "kind": "dc",
        "value": 12.34,
        "unit": "V",
        "volts": 12.34,
        "overload": False,
        "spread": None,
        "count": 1,
        "meter": "ACME,DMM-1,42,2.0",
    }


def test_read_overload_json(pty_meter, capsys):
    master, name = pty_meter
    threading.Thread(target=_meter, args=(master, [b"+9.9E37\n"]), daemon=True).start()
    assert main(["read", "--port", name, "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["volts"] is None and out["overload"] is True


def test_read_settled(pty_meter, capsys):
    master, name = pty_meter
    # the default rule: three readings in a row within 0.2 % + 5 mV, and the three before
    # them at the same mean (trend check)
    replies = [b"5.0\n", b"12.0\n", b"12.001\n", b"12.002\n", b"12.001\n", b"12.0\n"]
    replies += [b"12.002\n"]
    threading.Thread(target=_meter, args=(master, replies), daemon=True).start()
    assert main(["read", "--port", name, "--settle", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert (out["volts"], out["count"], out["settled"]) == (12.002, 7, True)


def test_read_missing_port(capsys):
    assert main(["read", "--port", "/dev/ttyNOPE99"]) == 2
    err = capsys.readouterr().err
    assert err == (
        "fieldtool: port missing: /dev/ttyNOPE99 does not exist;"
        " plug the meter in or list ports with 'fieldtool ports'\n"
    )


def test_ports_json(capsys):
    assert main(["ports", "--json"]) == 0
    assert isinstance(json.loads(capsys.readouterr().out), list)


def test_read_a_current_sets_the_meter_up_and_prints_amps(pty_meter, capsys):
    master, name = pty_meter
    heard = []
    args = (master, [b"+2.804E-04\n"], heard)
    threading.Thread(target=_meter, args=args, daemon=True).start()
    assert main(["read", "--port", name, "--kind", "current"]) == 0
    assert capsys.readouterr().out == "0.0002804 A\n"
    assert "CONF:CURR:DC" in heard and heard[-1] == "READ?"


def test_read_under_a_test_load_carries_it(pty_meter, capsys):
    master, name = pty_meter
    threading.Thread(target=_meter, args=(master, [b"+7.29E+01\n"]), daemon=True).start()
    argv = ["read", "--port", name, "--kind", "dc-loaded", "--test-load", "10k", "--json"]
    assert main(argv) == 0
    out = json.loads(capsys.readouterr().out)
    assert (out["kind"], out["value"], out["conditions"]) == (
        "dc-loaded",
        72.9,
        {"test_load_ohms": 10000.0},
    )


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--kind", "dc-loaded"], "--kind dc-loaded needs --test-load OHMS (the load clipped on)"),
        (["--test-load", "10k"], "--test-load goes with --kind dc-loaded, not --kind dc"),
        (["--kind", "dc-loaded", "--test-load", "ten"], "--test-load 'ten': expected ohms such"),
        (["--kind", "ohms"], "ohms"),
    ],
)
def test_read_refuses_a_kind_without_its_settings(extra, message, capsys):
    assert main(["read", "--port", "/dev/ttyNOPE99", *extra]) == 2
    err = capsys.readouterr().err
    assert err.startswith("fieldtool: ") and message in err and err.count("\n") == 1

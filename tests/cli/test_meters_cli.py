"""``fieldtool ports`` and ``fieldtool read`` through fieldtool.cli.main."""

import json
import os
import threading

import pytest

from fieldtool.cli import main


def _meter(fd, replies):
    buf = b""
    while replies:
        try:
            buf += os.read(fd, 256)
        except OSError:
            return
        while b"\n" in buf and replies:
            line, buf = buf.split(b"\n", 1)
            if line.strip() == b"*IDN?":
                os.write(fd, b"ACME,DMM-1,42,2.0\n")
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

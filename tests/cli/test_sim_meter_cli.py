"""``fieldtool sim-meter`` end to end: a subprocess serving a real pty, read by ``fieldtool read``.

The person's side is the subprocess's stdin (node names); the meter's side is read with the
ordinary ``read --settle --json`` path over pyserial. Each settled value is checked against the
core engine's expectation for that node (the engine is checked against ngspice in tests/core),
within the profile's meter accuracy.
"""

from __future__ import annotations

import json
import queue
import signal
import subprocess
import sys
import threading

import pytest

from fieldtool.cli import main
from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.diagnosis.faults import describe, parse_fault
from fieldtool.meters.simulated import random_fault
from tests.conftest import ROOT

BOARD = ROOT / "fieldtool" / "profiles" / "tidegauge-apd-bias.toml"


class SimMeter:
    """``python -m fieldtool sim-meter ...`` running, with its output lines in a queue."""

    def __init__(self, *args: str, preexec_fn=None) -> None:
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "fieldtool", "sim-meter", str(BOARD), *args],
            cwd=ROOT,
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            bufsize=1,
            preexec_fn=preexec_fn,
        )
        self.lines: queue.Queue[str] = queue.Queue()
        self.seen: list[str] = []
        self.pump = threading.Thread(target=self._pump, daemon=True)
        self.pump.start()
        self.port = self.next_line()
        self.wait_for("probe lifted")  # solved and serving

    def _pump(self) -> None:
        for line in self.proc.stdout:
            self.lines.put(line.rstrip("\n"))

    def next_line(self, timeout: float = 30.0) -> str:
        line = self.lines.get(timeout=timeout)
        self.seen.append(line)
        return line

    def wait_for(self, prefix: str) -> str:
        while True:
            line = self.next_line()
            if line.startswith(prefix):
                return line

    def type(self, text: str) -> None:
        self.proc.stdin.write(text + "\n")
        self.proc.stdin.flush()

    def finish(self) -> tuple[int, str]:
        """Wait for the process to end; return its exit code and stderr."""
        code = self.proc.wait(timeout=30)  # generous: a loaded CI machine is slow to start
        self.pump.join(timeout=5)
        while not self.lines.empty():
            self.seen.append(self.lines.get())
        err = self.proc.stderr.read()
        self.close()
        return code, err

    def close(self) -> None:
        """Kill the process if it still runs and close its pipes."""
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait()
        self.pump.join(timeout=5)
        for pipe in (self.proc.stdin, self.proc.stdout, self.proc.stderr):
            try:
                pipe.close()
            except OSError:
                pass  # stdin of a process that is gone


@pytest.fixture
def sim_meter():
    started: list[SimMeter] = []

    def start(*args: str, **kw) -> SimMeter:
        s = SimMeter(*args, **kw)
        started.append(s)
        return s

    yield start
    for s in started:
        s.close()


@pytest.fixture(scope="module")
def board():
    return load_profile(BOARD)


def accuracy(profile, volts):
    return profile.meter_percent / 100 * abs(volts) + profile.meter_volts


def read_json(capsys, *args: str) -> dict:
    assert main(["read", *args, "--settle", "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_scpi_healthy_board(sim_meter, board, capsys):
    sim = sim_meter("--seed", "5")
    assert sim.port.startswith("/dev/pts/")
    sim.type("S4")
    assert sim.wait_for("probe on") == "probe on S4 (TP5)"
    out = read_json(capsys, "--port", sim.port)
    expected = expect(board).node("S4").volts
    assert out["settled"] is True and out["overload"] is False
    assert abs(out["volts"] - expected) <= accuracy(board, expected)
    assert out["meter"].startswith("FIELDTOOL,SIMULATED-METER,tidegauge-apd-bias,")
    sim.type("quit")
    code, err = sim.finish()
    assert (code, err) == (0, "")
    assert sim.seen[-1] == "sim-meter stopped"


def test_stream_with_a_hidden_fault(sim_meter, board, capsys):
    sim = sim_meter("--fault", "C4:short", "--hidden", "--protocol", "stream", "--seed", "6")
    assert not any("C4" in line for line in sim.seen)  # the fault stays off the screen
    assert "fault hidden" in sim.seen[1]
    sim.type("TP5")
    sim.wait_for("probe on")
    out = read_json(capsys, "--port", sim.port, "--protocol", "stream")
    faulted = expect(board, fault=parse_fault("C4:short", board)).node("S4").volts
    assert abs(out["volts"] - faulted) <= accuracy(board, faulted)
    assert abs(out["volts"] - expect(board).node("S4").volts) > 10.0  # the short shows
    assert out["meter"] is None  # a streaming meter has no identity
    sim.type("quit")
    code, _ = sim.finish()
    assert code == 0
    assert "the fault was: C4 shorted (C4:short) (seed 6)" in sim.seen


def test_random_hidden_fault_is_revealed_at_the_end_of_input(sim_meter, board):
    sim = sim_meter("--fault", "random", "--hidden", "--seed", "11")
    sim.proc.stdin.close()  # end of console input (Ctrl-D) stops it like 'quit'
    code, err = sim.finish()
    assert (code, err) == (0, "")
    fault = random_fault(board, 11)
    words = f"{describe(fault, board)} ({fault.spec(board)})" if fault else "none (healthy board)"
    assert sim.seen[-2:] == [f"the fault was: {words} (seed 11)", "sim-meter stopped"]


def test_ctrl_c_stops_cleanly(sim_meter):
    sim = sim_meter()
    sim.proc.send_signal(signal.SIGINT)
    code, err = sim.finish()
    assert code == 0
    assert "Traceback" not in err and err == ""
    assert sim.seen[-1] == "sim-meter stopped"


def test_ctrl_c_stops_it_even_when_started_with_sigint_ignored(sim_meter):
    # a shell starts background jobs with SIGINT ignored (POSIX sh, "Asynchronous Lists")
    sim = sim_meter(preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_IGN))
    sim.proc.send_signal(signal.SIGINT)
    code, _ = sim.finish()
    assert code == 0
    assert sim.seen[-1] == "sim-meter stopped"


def test_negative_command_gap_is_refused(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["sim-meter", str(BOARD), "--command-gap", "-1"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert err.startswith("fieldtool: argument --command-gap: command gap is -1, expected 0 s")
    assert err.count("\n") == 1


def test_bad_fault_spec_is_one_line_exit_2(capsys):
    code = main(["sim-meter", str(BOARD), "--fault", "Q9:open"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith("fieldtool: bad input: ") and err.count("\n") == 1
    assert "Q9" in err


def test_stdin_from_a_file_is_one_clear_line():
    with open("/dev/zero", "rb") as zero:
        proc = subprocess.run(
            [sys.executable, "-m", "fieldtool", "sim-meter", str(BOARD), "--seed", "1"],
            cwd=ROOT,
            stdin=zero,
            capture_output=True,
            text=True,
            timeout=60,
        )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert proc.stderr.startswith("fieldtool: bad input: sim-meter takes probe moves from a")

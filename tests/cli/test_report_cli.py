"""`fieldtool report`: HTML and Markdown on real files, escaping, the plot and its absence."""

from __future__ import annotations

import json
import re
import sys

import pytest

from fieldtool.cli import main
from fieldtool.core import history as h
from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.measurement import CURRENT, DC_LOADED, DIODE_TEST, RIPPLE_PP, TYPED, Measurement
from fieldtool.core.names import file_name_problem
from fieldtool.core.report.content import expectations_for
from tests.conftest import ROOT
from tests.history.helpers import day
from tests.readings import reading, verification

PROFILE = "datalogger-eeprom-dickson"
HOSTILE_NOTE = '<script>alert("x")</script> <img src=x onerror=alert(1)> | *b* [l](javascript:x)'
HOSTILE_SERIAL = "<b>DL&1"


@pytest.fixture(autouse=True)
def _engine_cache(tmp_path_factory, monkeypatch):
    """Keep the fault-dictionary cache of this test run out of the user's cache folder."""
    monkeypatch.setenv("FIELDTOOL_CACHE", str(tmp_path_factory.getbasetemp() / "dictionary"))


@pytest.fixture
def expected():
    return expectations_for(load_profile(ROOT / "fieldtool" / "profiles" / f"{PROFILE}.toml"))


def _write_session(logs, serial, expected, when, outcome="fixed", note=HOSTILE_NOTE):
    opened = h.SessionOpened(technician="<ana>", profile_hash="old", tool_version="0.1.0")
    out = expected.get("OUT")
    events = [
        opened,
        reading("S0", expected.get("S0").volts),  # right on the expectation
        reading("OUT", out.volts * 0.5),  # far below the band
        reading("P2", None),
        h.DiagnosisSnapshot(
            suspects=(h.SnapshotSuspect("D3", "open", 0.61), h.SnapshotSuspect("C2", "short", 0.2))
        ),
        h.Action(designator="D3", done="replaced", mode="open", part_used="1N4148", note=note),
        verification("OUT", out.volts),
        h.SessionClosed(outcome=outcome),
    ]
    if file_name_problem(serial) is None:
        h.append_many(logs, PROFILE, serial, events, time=when)
        return opened.session_id
    # A serial refused today (such as '<b>DL&1') as an older version would have stored it.
    h.append_many(logs, PROFILE, "STAND-IN", events, time=when)
    stand_in = logs / PROFILE / "STAND-IN.jsonl"
    text = stand_in.read_text().replace('"board":"STAND-IN"', f'"board":{json.dumps(serial)}')
    (logs / PROFILE / f"{serial}.jsonl").write_text(text)
    stand_in.unlink()
    return opened.session_id


def _report(capsys, *argv):
    code = main(["report", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_html_report_has_everything_and_escapes_the_history(tmp_path, capsys, expected):
    logs = tmp_path / "logs"
    _write_session(logs, HOSTILE_SERIAL, expected, day(0))
    out = tmp_path / "report.html"
    code, stdout, _ = _report(capsys, HOSTILE_SERIAL, "--logs", str(logs), "--out", str(out))
    page = out.read_text()
    assert code == 0 and "1 session written" in stdout
    for raw in ("<script", "<img src=x", "<b>DL", "<ana>"):
        assert raw not in page
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;" in page
    assert "&lt;b&gt;DL&amp;1" in page and "&lt;ana&gt;" in page
    assert "licensed practice" in page and "discharge every capacitor" in page
    assert page.count("data:image/png;base64,") == 1
    assert re.search(r"<td>OUT</td>.*?<td>low</td>", page, re.S)
    assert re.search(r"<td>S0</td>.*?<td>in band</td>", page, re.S)
    assert "over range" in page and "D3 open (verified by readings after the repair)" in page
    assert "61.0%" in page and "part 1N4148" in page
    assert "profile file has changed" in page  # recorded with another profile hash


def test_markdown_report_writes_the_plot_beside_it(tmp_path, capsys, expected):
    logs = tmp_path / "logs"
    sid = _write_session(logs, "DL-0001", expected, day(0))
    out = tmp_path / "r.md"
    code, _, _ = _report(capsys, "DL-0001", "--logs", str(logs), "--out", str(out))
    text = out.read_text()
    image = tmp_path / f"r-{sid[:12]}.png"
    assert code == 0 and image.read_bytes().startswith(b"\x89PNG")
    assert f"]({image.name})" in text
    assert "<script" not in text and "&lt;script&gt;" in text and "\\[l\\]" in text
    row = next(line for line in text.splitlines() if line.startswith("| OUT |"))
    band = expected.get("OUT")
    assert f"{band.volts:.4g} V" in row and f"{band.low:.4g} … {band.high:.4g} V" in row
    assert "Local electrical-safety codes and licensed practice take precedence" in text


def test_report_without_matplotlib_says_the_plot_was_left_out(
    tmp_path, capsys, expected, monkeypatch
):
    for name in [m for m in sys.modules if m == "matplotlib" or m.startswith("matplotlib.")]:
        monkeypatch.setitem(sys.modules, name, None)  # importing any of it -> ImportError
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    logs = tmp_path / "logs"
    _write_session(logs, "DL-0001", expected, day(0))
    out = tmp_path / "r.html"
    code, _, _ = _report(capsys, "DL-0001", "--logs", str(logs), "--out", str(out))
    page = out.read_text()
    assert code == 0 and "data:image/png" not in page
    assert "plot left out: matplotlib is not installed" in page


def test_one_session_by_id_prefix(tmp_path, capsys, expected):
    logs = tmp_path / "logs"
    first = _write_session(logs, "DL-0001", expected, day(0), outcome="not-fixed")
    _write_session(logs, "DL-0001", expected, day(9))
    out = tmp_path / "one.html"
    code, stdout, _ = _report(
        capsys, "DL-0001", "--logs", str(logs), "--out", str(out), "--session", first[:6]
    )
    page = out.read_text()
    assert code == 0 and "1 session written" in stdout
    assert "not-fixed" in page and page.count("<h2>Session") == 1


def test_history_of_an_unknown_profile_still_gives_a_report(tmp_path, capsys):
    logs = tmp_path / "logs"
    h.append(logs, "retired-board", "RB-1", reading("S3", 4.0), session="s1")
    out = tmp_path / "r.md"
    code, _, _ = _report(capsys, "RB-1", "--logs", str(logs), "--out", str(out))
    text = out.read_text()
    assert code == 0 and "no profile named 'retired-board'" in text
    assert "| S3 |  | 4 V | — | — | no expectation |" in text
    assert "no plot: no expected values" in text


@pytest.mark.parametrize(
    ("extra", "words"),
    [
        (["--out", "{tmp}/r.pdf"], "name the file .html or .md"),
        (["--out", "{tmp}/no/such/dir/r.html"], "does not exist"),
        (["--out", "{tmp}/r.html", "--session", "zzz"], "no session 'zzz'"),
        (["--out", "{tmp}/r.html", "--profile", "{tmp}/missing.toml"], "no such file"),
    ],
)
def test_report_errors_are_one_line(tmp_path, capsys, expected, extra, words):
    logs = tmp_path / "logs"
    _write_session(logs, "DL-0001", expected, day(0))
    argv = ["DL-0001", "--logs", str(logs)] + [e.format(tmp=tmp_path) for e in extra]
    code, out, err = _report(capsys, *argv)
    assert code == 2 and out == "" and err.count("\n") == 1 and words in err


def test_report_for_an_unknown_board(tmp_path, capsys, expected):
    logs = tmp_path / "logs"
    _write_session(logs, "DL-0001", expected, day(0))
    code, _, err = _report(capsys, "DL-0002", "--logs", str(logs), "--out", str(tmp_path / "r.md"))
    assert code == 2 and "no history for board 'DL-0002'" in err
    assert not (tmp_path / "r.md").exists()


def test_report_bands_come_from_the_fault_dictionary(expected):
    from fieldtool.core.diagnosis.dictionary_cache import load_or_build

    d = load_or_build(load_profile(ROOT / "fieldtool" / "profiles" / f"{PROFILE}.toml"))
    assert "fault dictionary" in expected.source
    assert [e.node for e in expected.nodes] == list(d.nodes)
    band = d.band("OUT")
    assert (expected.get("OUT").low, expected.get("OUT").high) == (band.low, band.high)


def test_report_into_a_read_only_folder_is_one_line_and_leaves_nothing(
    tmp_path, capsys, expected, read_only_dir
):
    logs = tmp_path / "logs"
    _write_session(logs, "DL-2", expected, day(0))
    shelf = read_only_dir(tmp_path / "shelf")
    for name in ("r.html", "r.md"):
        code, out, err = _report(capsys, "DL-2", "--logs", str(logs), "--out", str(shelf / name))
        assert code == 2 and out == "" and err.count("\n") == 1
        assert "read-only" in err and "Traceback" not in err
    assert list(shelf.iterdir()) == []


def test_a_reading_no_node_could_show_is_reported_not_plotted(tmp_path, capsys, expected):
    """An older version let a reading of 1e300 V into a history: the report shows it as a wrong
    range or unit, keeps it off the plot and the bands, and still says WARNING or CAUTION by
    the rest of the board."""
    logs = tmp_path / "logs"
    opened = h.SessionOpened(technician="ana", profile_hash="x", tool_version="0.1.0")
    events = [opened, reading("S0", expected.get("S0").volts), reading("OUT", 1e300)]
    h.append_many(logs, PROFILE, "DL-3", events, time=day(0))
    out = tmp_path / "r.html"
    code, _, err = _report(capsys, "DL-3", "--logs", str(logs), "--out", str(out))
    assert code == 0, err
    page = out.read_text()
    assert "wrong range or unit (not plotted)" in page
    assert page.count("data:image/png;base64,") == 1
    assert "<strong>CAUTION</strong>" in page  # a 15 V pump: the absurd value does not count


_FULL_DISK = """
import resource, signal, sys
from fieldtool.cli import main
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # the kernel then fails the write with EFBIG
resource.setrlimit(resource.RLIMIT_FSIZE, (0, resource.RLIM_INFINITY))
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.parametrize("name", ["r.md"])  # the Markdown page and its plot beside it
def test_a_report_that_cannot_be_written_leaves_no_file(tmp_path, expected, name):
    """A process allowed no file growth (RLIMIT_FSIZE = 0, POSIX setrlimit) fails its writes as
    a full disk does: one line, exit 2, and no empty or half-written report (nor a temporary
    file) left behind to be mistaken for one."""
    import subprocess

    logs = tmp_path / "logs"
    _write_session(logs, "DL-0100", expected, day(1))
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    run = subprocess.run(
        [sys.executable, "-c", _FULL_DISK, "report", "DL-0100", "--logs", str(logs)]
        + ["--out", str(out_dir / name)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert run.returncode == 2, run.stderr
    assert run.stderr.count("\n") == 1 and "disk full; nothing was written" in run.stderr
    assert list(out_dir.iterdir()) == []


def test_readings_beyond_dc_volts_are_in_the_report_and_the_history(tmp_path, capsys, expected):
    """Every kind the session took is shown: the report lists each kind, its settings and its
    value; `history` names the kind and the test load."""
    logs = tmp_path / "logs"
    loaded = Measurement(
        "OUT", DC_LOADED, 11.2, TYPED, settled=True, conditions=(("test_load_ohms", 1e5),)
    )
    events = [
        h.SessionOpened(technician="ana", profile_hash="x", tool_version="0.1.0"),
        reading("OUT", expected.get("OUT").volts),
        h.Reading(Measurement("supply", CURRENT, 3.1e-4, TYPED, settled=True)),
        h.Reading(loaded),
        h.Reading(Measurement("D2", DIODE_TEST, None, TYPED, settled=True)),
        h.Reading(Measurement("P2", RIPPLE_PP, 0.031, TYPED, settled=True)),
    ]
    h.append_many(logs, PROFILE, "DL-0009", events, time=day(0))
    out = tmp_path / "r.md"
    assert _report(capsys, "DL-0009", "--logs", str(logs), "--out", str(out))[0] == 0
    text = out.read_text()
    rows = [line for line in text.split("### Other readings")[1].splitlines() if "|" in line]
    assert [r.split("|")[1:4] for r in rows[2:]] == [
        [" current ", " supply ", " 310 µA "],
        [" DC volts under a test load with a 100kΩ test load ", " OUT ", " 11.2 V "],
        [" diode test, board off ", " D2 ", " OL (over range) "],
        [" ripple peak to peak ", " P2 ", " 31 mV "],
    ]
    assert main(["history", "DL-0009", "--logs", str(logs)]) == 0
    history = capsys.readouterr().out
    assert "reading OUT DC volts under a test load with a 100kΩ test load = 11.2 V" in history
    assert "reading supply current = 0.00031 A" in history  # the rail named once

"""Diagnosis priors from the store: ``diagnose``, ``record`` and the terminal UI take the
store's confirmed failures when one is set, and the local files (with a notice) when it cannot
be reached, so a technician offline is never blocked."""

from __future__ import annotations

import json
import socket
import subprocess
import sys
import threading

import pytest

from fieldtool.core.circuit.library import find_profile
from fieldtool.store import StoreAddress
from fieldtool.store.push import push
from fieldtool.tui.app import SessionRequest, make_app
from fieldtool.tui.meter_strip import MeterChoice
from tests.history.helpers import day, session
from tests.store.helpers import run

PROFILE = "tidegauge-apd-bias"


def _fleet(logs):
    """A tide-gauge fleet where D3 opens again and again."""
    for n in range(6):
        session(logs, f"TG-{n:04d}", day(n), "fixed", [("D3", "open")], profile=PROFILE)
    session(logs, "TG-0099", day(9), "fixed", [("C2", "short")], profile=PROFILE)


@pytest.fixture
def nobody_listens():
    """A local port with nothing listening: the store is 'offline' (connection refused)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    return StoreAddress(f"postgresql://ana@127.0.0.1:{port}/fleet", "--store")


@pytest.fixture
def silent_server():
    """A server that accepts connections and never answers (a dead link on a mast)."""
    listener = socket.socket()
    listener.bind(("127.0.0.1", 0))
    listener.listen(8)
    held = []
    stop = threading.Event()

    def accept():
        listener.settimeout(0.2)
        while not stop.is_set():
            try:
                held.append(listener.accept()[0])
            except OSError:
                continue

    thread = threading.Thread(target=accept, daemon=True)
    thread.start()
    yield listener.getsockname()[1]
    stop.set()
    thread.join()
    for conn in held:
        conn.close()
    listener.close()


@pytest.fixture
def readings(tmp_path):
    path = tmp_path / "readings.csv"
    path.write_text("node,volts\nS3,41.0\nS5,12.0\n")
    return path


def _diagnose(capsys, dictionary_cache, readings, *extra):
    code, out, err = run(
        capsys, "diagnose", PROFILE, "--readings", str(readings), "--cache",
        str(dictionary_cache), "--json", *extra,
    )  # fmt: skip
    assert code == 0, err
    return json.loads(out), err


def test_diagnose_takes_the_store_priors(tmp_path, store, capsys, dictionary_cache, readings):
    logs = tmp_path / "logs"
    _fleet(logs)
    push(store, logs)
    from_files, _ = _diagnose(capsys, dictionary_cache, readings, "--logs", str(logs))
    from_store, err = _diagnose(capsys, dictionary_cache, readings, "--store", store.conninfo)
    published, _ = _diagnose(capsys, dictionary_cache, readings)
    assert err == "" and from_store == from_files != published
    assert any("fleet" in s["prior_source"] for s in from_store["suspects"])


def test_diagnose_offline_falls_back_to_the_files_with_a_notice(
    tmp_path, capsys, dictionary_cache, readings, nobody_listens
):
    logs = tmp_path / "logs"
    _fleet(logs)
    from_files, _ = _diagnose(capsys, dictionary_cache, readings, "--logs", str(logs))
    offline, err = _diagnose(
        capsys, dictionary_cache, readings, "--logs", str(logs), "--store", nobody_listens.conninfo
    )
    assert offline == from_files
    assert err.startswith("fieldtool: notice: fleet store not used (cannot connect to the store")
    assert err.rstrip().endswith(f"fleet priors from the local files in {logs}")
    published, _ = _diagnose(capsys, dictionary_cache, readings)
    alone, err = _diagnose(capsys, dictionary_cache, readings, "--store", nobody_listens.conninfo)
    assert alone == published and err.rstrip().endswith("; published priors")


def test_a_store_that_never_answers_does_not_block(
    tmp_path, silent_server, readings, dictionary_cache
):
    """libpq's connect_timeout (2 s here, as the address says) ends the wait; a whole
    process is run so nothing in this test's process could wait for it instead."""
    logs = tmp_path / "logs"
    _fleet(logs)
    url = f"postgresql://ana@127.0.0.1:{silent_server}/fleet?connect_timeout=2"
    proc = subprocess.run(
        [sys.executable, "-m", "fieldtool", "record", PROFILE, "--board", "TG-0500",
         "--readings", str(readings), "--action", "D3:open replaced", "--outcome", "fixed",
         "--logs", str(logs), "--store", url, "--json"],
        capture_output=True, text=True, timeout=120,
        env={**__import__("os").environ, "FIELDTOOL_CACHE": str(dictionary_cache)},
    )  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    assert "fieldtool: notice: fleet store not used" in proc.stderr
    assert json.loads(proc.stdout)["priors"] == "fleet"  # from the local files
    assert (logs / PROFILE / "TG-0500.jsonl").exists()


def test_record_takes_the_store_priors(
    tmp_path, store, capsys, dictionary_cache, readings, monkeypatch
):
    shop, laptop = tmp_path / "shop", tmp_path / "laptop"
    _fleet(shop)
    push(store, shop)
    monkeypatch.setenv("FIELDTOOL_CACHE", str(dictionary_cache))
    monkeypatch.setenv("FIELDTOOL_STORE", store.conninfo)
    code, out, err = run(
        capsys, "record", PROFILE, "--board", "TG-0700", "--readings", str(readings),
        "--logs", str(laptop), "--json",
    )  # fmt: skip
    assert code == 0 and err == ""
    assert json.loads(out)["priors"] == "fleet"  # the laptop has no history: the store's
    monkeypatch.delenv("FIELDTOOL_STORE")
    code, out, _ = run(
        capsys, "record", PROFILE, "--board", "TG-0701", "--readings", str(readings),
        "--logs", str(tmp_path / "empty"), "--json",
    )  # fmt: skip
    assert json.loads(out)["priors"] == "published"


async def test_the_terminal_ui_takes_store_priors_and_says_when_it_cannot(
    tmp_path, store, dictionary_cache, nobody_listens
):
    from fieldtool.tui.probing import ProbingScreen
    from tests.tui.conftest import until

    shop, laptop = tmp_path / "shop", tmp_path / "laptop"
    _fleet(shop)
    push(store, shop)
    profile = find_profile(PROFILE, tmp_path)  # the shipped board (no profiles of our own)
    for address, expected in ((store, "fleet"), (nobody_listens, "published")):
        request = SessionRequest(profile, "TG-0800", MeterChoice(), resume=False)
        app = make_app(
            logs_dir=laptop, request=request, cache_dir=dictionary_cache, store=address,
            rescue_dir=tmp_path / "rescue",
        )  # fmt: skip
        async with app.run_test() as pilot:
            await until(pilot, lambda: isinstance(pilot.app.screen, ProbingScreen), 60, "probing")
            sources = {s.prior_source for s in app.screen.session.diagnosis.suspects}
            assert any(src.startswith(expected) for src in sources), sources
            notes = [n.message for n in app._notifications]
            if address is store:
                assert not any("Priors" in m for m in notes)
            else:
                assert any(m.startswith("Priors: fleet store not used") for m in notes), notes
            await pilot.press("q")

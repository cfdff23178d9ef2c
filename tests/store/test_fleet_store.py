"""The fleet view and a board's history from the store are the ones the files give.

The reference is fieldtool's own files view (``history.fleet``), itself tested against hand
counts in ``tests/history``: the same folder, pushed, must give the same JSON to the last bit
(floats included), through the per-board counts the store keeps and through the read-time
path a fieldtool with another fault catalogue takes.
"""

from __future__ import annotations

import json

import pytest

from fieldtool.core.history.fleet import confirmed_failures as files_confirmed
from fieldtool.core.history.fleet import fleet_view as files_view
from fieldtool.store import fleet as store_fleet
from fieldtool.store.push import push
from tests.history.helpers import day, session
from tests.store.helpers import run, varied_fleet


@pytest.mark.parametrize("seed", [1, 2, 3, 4])
def test_fleet_from_the_store_equals_the_files(tmp_path, store, admin, seed):
    logs = tmp_path / "logs"
    varied_fleet(logs, "cw6", seed)
    varied_fleet(logs, "cw4", seed + 100, boards=3)  # another profile in the same store
    push(store, logs)
    expected = files_view(logs, "cw6").to_json()
    assert expected["repairs"] > 3 and expected["repeat_repairs"]  # the fleet has substance
    assert store_fleet.fleet_view(store, "cw6").to_json() == expected
    assert store_fleet.confirmed_failures(store, "cw6") == files_confirmed(logs, "cw6")
    # A fieldtool whose catalogue differs counts at read time, from the sessions and actions,
    # whatever the store's own per-board rows say (spoilt here to prove they are not read).
    admin("UPDATE fieldtool.meta SET value = 'another' WHERE key = 'summary'")
    admin("UPDATE fieldtool.board_view SET repairs = 0, gaps = NULL, designators = NULL")
    assert store_fleet.fleet_view(store, "cw6").to_json() == expected
    assert store_fleet.fleet_view(store, "cw4").to_json() == files_view(logs, "cw4").to_json()


def test_fleet_command_json_is_the_same_from_both(tmp_path, store, capsys):
    logs = tmp_path / "logs"
    varied_fleet(logs, "cw6", 2)
    assert run(capsys, "logs", "push", "--store", store.conninfo, "--logs", str(logs))[0] == 0
    code, from_files, _ = run(capsys, "fleet", "cw6", "--logs", str(logs), "--json")
    code2, from_store, _ = run(capsys, "fleet", "cw6", "--store", store.conninfo, "--json")
    assert (code, code2) == (0, 0)
    assert json.loads(from_store) == json.loads(from_files)
    text = run(capsys, "fleet", "cw6", "--store", store.conninfo)[1]
    assert text == run(capsys, "fleet", "cw6", "--logs", str(logs))[1]


def test_pushes_in_pieces_give_the_same_view(tmp_path, store):
    """Sessions split across pushes (an action first, its closing later) count once, right."""
    logs = tmp_path / "logs"
    session(logs, "SN1", day(0), None, [("D5", "open")], verify=True)
    push(store, logs)
    view = store_fleet.fleet_view(store, "cw6")
    assert (view.repairs, view.outcomes) == (0, {"open": 1})
    from fieldtool.core import history as h

    opened = h.read_board(logs, "SN1").events[0]
    h.append(logs, "cw6", "SN1", h.SessionClosed("fixed"), time=day(0.1), session=opened.session)
    session(logs, "SN1", day(9), "fixed", [("D5", "open"), ("C4", "short")])
    session(logs, "SN2", day(3), "fixed", [("D5", "open")], legacy=True)
    push(store, logs)
    assert store_fleet.fleet_view(store, "cw6").to_json() == files_view(logs, "cw6").to_json()


def test_history_from_the_store_equals_the_files(tmp_path, store, capsys):
    logs = tmp_path / "logs"
    varied_fleet(logs, "cw6", 2)  # an even seed: printable text (a lone surrogate in a note
    push(store, logs)  # cannot be printed by `history --json` from files either)
    for serial in ("SN2-00", "SN2-05", "SN2-odd"):
        files = json.loads(run(capsys, "history", serial, "--logs", str(logs), "--json")[1])
        ours = json.loads(run(capsys, "history", serial, "--store", store.conninfo, "--json")[1])
        assert ours == files
        text = run(capsys, "history", serial, "--store", store.conninfo)[1]
        assert text == run(capsys, "history", serial, "--logs", str(logs))[1]


def test_unknown_profile_and_board_say_what_the_store_holds(tmp_path, store, capsys):
    logs = tmp_path / "logs"
    session(logs, "TG-0042", day(0), "fixed", [("D5", "open")])
    push(store, logs)
    code, _, err = run(capsys, "fleet", "tidegauge", "--store", store.conninfo)
    assert code == 2 and "profiles with histories: cw6" in err and err.count("\n") == 1
    code, _, err = run(capsys, "history", "TG-0024", "--store", store.conninfo)
    assert code == 2 and "did you mean TG-0042?" in err
    assert store_fleet.confirmed_failures(store, "tidegauge") == {}


def test_offline_history_and_fleet_show_the_local_files(tmp_path, capsys, monkeypatch):
    """$FIELDTOOL_STORE set but unreachable (nothing listens on its port): the laptop's files
    answer, with a notice; an explicit --logs reads the files without asking the store."""
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("FIELDTOOL_STORE", f"postgresql://ana:pw@127.0.0.1:{port}/fleet")
    session(tmp_path / "logs", "SN1", day(0), "fixed", [("D5", "open")])
    code, out, err = run(capsys, "history", "SN1")
    assert code == 0 and out.startswith("Board SN1: 1 session,")
    assert err.startswith("fieldtool: notice: cannot connect to the store at postgresql://ana:***@")
    assert f"showing the local files in {tmp_path / 'logs'}" in err and "pw@" not in err
    code, out, err = run(capsys, "fleet", "cw6", "--json")
    assert code == 0 and json.loads(out)["repairs"] == 1 and "notice" in err
    code, out, err = run(capsys, "fleet", "cw6", "--logs", "logs", "--json")
    assert code == 0 and err == "" and json.loads(out)["repairs"] == 1

"""The fleet store at fleet scale: the invented 10,000-board fleet pushed into PostgreSQL.

    python benchmarks/store_scale.py [--boards 10000] [--sessions 20] [--store URL]
                                     [--dir DIR] [--keep]

Writes the tide-gauge fleet of ``history_scale.py`` (same generator), starts a PostgreSQL
server on this machine in a temporary folder (or uses ``--store``, an empty database the
script initialises), and measures, wall-clock:

- reading and parsing the fleet as a push does, nothing sent (the laptop's share of a push);
- the first push into the empty store (target <= 60 s), and pushing again with nothing new
  (target <= 10 s; also without the push cursor, every file checked: ``--all``);
- the fleet view from the store (target <= 1 s): first after the push, then warm; and the
  priors' confirmed-failure counts alone;
- one board's history from the store (target <= 50 ms), connection included;
- eight pushes at once, as eight laptops would: each laptop's folder holds 2,500 of the boards
  (each board on two laptops) with its own two new sessions on each; then the counts: every
  record once, nothing lost, nothing doubled.

The server runs with fsync and synchronous commits on (durable, as a real one), with the
settings an administrator would give a bulk-loaded database: shared_buffers 1 GB,
max_wal_size 8 GB. Data goes to a temporary folder under /tmp (or --dir), removed unless --keep.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

import psycopg  # noqa: E402
from history_scale import PROFILE, Writer, generate, machine, timed  # noqa: E402

from fieldtool.core.history.fleet import fleet_view as files_view  # noqa: E402
from fieldtool.core.history.merge import source_files  # noqa: E402
from fieldtool.store import StoreAddress  # noqa: E402
from fieldtool.store.fleet import confirmed_failures, fleet_view  # noqa: E402
from fieldtool.store.push import _Parsers, push  # noqa: E402
from fieldtool.store.read import read_board  # noqa: E402
from fieldtool.store.schema import migrate  # noqa: E402
from tests.pg_server import Server, why_unavailable  # noqa: E402

SERVER_SETTINGS = {"shared_buffers": "1GB", "max_wal_size": "8GB"}
LAPTOPS = 8


def _count(address: StoreAddress, sql: str) -> int:
    with psycopg.connect(address.conninfo, autocommit=True) as conn:
        return conn.execute(sql).fetchone()[0]


def _laptops(fleet: Path, root: Path, boards: int) -> tuple[list[Path], int]:
    """Eight laptop folders, each board on two of them, each with two new sessions a board."""
    rng = random.Random(11)
    folders, new = [], 0
    share = boards // 4
    for k in range(LAPTOPS):
        folder = root / f"laptop{k}" / PROFILE
        folder.mkdir(parents=True)
        for b in range(k * share // 2, k * share // 2 + share):
            serial = f"TG-{b % boards:05d}"
            writer = Writer(rng, serial)
            lines = writer.session(time_near(rng, 800)) + writer.session(time_near(rng, 830))
            new += len(lines)
            data = (fleet / PROFILE / f"{serial}.jsonl").read_bytes()
            (folder / f"{serial}.jsonl").write_bytes(data + ("\n".join(lines) + "\n").encode())
        folders.append(folder.parent)
    return folders, new


def time_near(rng: random.Random, days: float):
    """A session start some days after the fleet's first sessions."""
    from datetime import timedelta

    from history_scale import EPOCH

    return EPOCH + timedelta(days=days + rng.uniform(0, 20))


def _parse_only(fleet: Path) -> int:
    """What a laptop does for a push before anything is sent: read and parse every file."""
    files = source_files(fleet)
    jobs = [(profile, serial, str(path)) for profile, serial, path in files]
    with _Parsers(len(jobs)) as parsers:
        return sum(parsed.records for parsed in parsers.parse(jobs))


def run(address: StoreAddress, fleet: Path, work: Path, boards: int) -> None:
    """The measurements (see module docstring)."""
    t, records = timed(_parse_only, fleet)
    print(f"reading and parsing the fleet for a push, nothing sent: {t:.1f} s ({records} records)")
    t, report = timed(push, address, fleet)
    counted = f"{report.added} records, {report.boards} boards"
    print(f"first push into the empty store: {t:.1f} s ({counted})")
    t, again = timed(push, address, fleet)
    print(f"the same push again: {t:.2f} s ({again.added} new, {again.already_present} present)")
    t, full = timed(push, address, fleet, use_cursor=False)
    print(f"  again with every file checked (--all): {t:.1f} s ({full.added} new)")
    t, view = timed(fleet_view, address, PROFILE)
    print(
        f"fleet view from the store, first: {t:.2f} s ({view.boards} boards, {view.sessions} "
        f"sessions, {view.repairs} repairs, {len(view.recurring_boards)} recurring)"
    )
    warm = [timed(fleet_view, address, PROFILE)[0] for _ in range(5)]
    print(f"  warm: median {statistics.median(warm):.2f} s, worst {max(warm):.2f} s over 5")
    counts = [timed(confirmed_failures, address, PROFILE)[0] for _ in range(5)]
    print(f"  the priors' counts alone: median {statistics.median(counts) * 1e3:.0f} ms")
    t, files = timed(files_view, fleet, PROFILE, use_cache=False)
    same = files.to_json() == view.to_json()
    print(f"  the same view from the files (no cache): {t:.1f} s; identical: {same}")
    rng = random.Random(7)
    times = []
    for serial in (f"TG-{rng.randrange(boards):05d}" for _ in range(30)):
        t, history = timed(read_board, address, serial)
        times.append(t)
    print(
        f"one board's history from the store (connection included): median "
        f"{statistics.median(times) * 1e3:.1f} ms, worst {max(times) * 1e3:.1f} ms over 30 "
        f"boards ({len(history.events)} records each)"
    )
    before = _count(address, "SELECT count(*) FROM fieldtool.records")
    laptops, new = _laptops(fleet, work, boards)
    cmd = [sys.executable, "-m", "fieldtool", "logs", "push", "--store", address.conninfo]
    start = time.perf_counter()
    procs = [
        subprocess.Popen([*cmd, "--logs", str(f), "--json"], stdout=subprocess.PIPE, cwd=ROOT)
        for f in laptops
    ]
    reports = [json.loads(p.communicate()[0]) for p in procs]
    t = time.perf_counter() - start
    assert all(p.returncode == 0 for p in procs)
    added = sum(r["added"] for r in reports)
    after = _count(address, "SELECT count(*) FROM fieldtool.records")
    distinct = _count(address, "SELECT count(DISTINCT (id, line)) FROM fieldtool.records")
    sent = sum(r["added"] + r["already_present"] for r in reports)
    print(
        f"eight pushes at once (8 folders of {boards // 4} boards, each board on two): {t:.1f} s "
        f"for {sent} records checked; {added} added, {new} new ones written; store "
        f"{before} -> {after} records, {distinct} distinct: "
        + ("nothing lost, nothing doubled" if after - before == new == added == distinct - before
           else "COUNTS DIFFER")
    )  # fmt: skip


def main() -> int:
    """Generate, start a server (or use --store), measure, print."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--boards", type=int, default=10000)
    parser.add_argument("--sessions", type=int, default=20)
    parser.add_argument("--store", help="an empty database to use instead of a local server")
    parser.add_argument("--dir", help="where to put the data (default: a new folder in /tmp)")
    parser.add_argument("--keep", action="store_true", help="leave the data on disk")
    args = parser.parse_args()
    if not args.store and why_unavailable():
        print(f"cannot start a server: {why_unavailable()}")
        return 2
    work = Path(tempfile.mkdtemp(prefix="fieldtool-store-", dir=args.dir))
    server = None
    print(f"machine: {machine()}")
    try:
        t, n = timed(generate, work / "fleet", args.boards, args.sessions, 1, 0.0)
        print(
            f"generated {args.boards} boards x {args.sessions} sessions: {n} records in {t:.0f} s"
        )
        if args.store:
            address = StoreAddress(args.store, "--store")
        else:
            server = Server(SERVER_SETTINGS).start()
            with psycopg.connect(server.conninfo(), autocommit=True) as conn:
                conn.execute("CREATE DATABASE fleet TEMPLATE template0 ENCODING 'UTF8'")
                version = conn.info.server_version
            address = StoreAddress(server.url("fleet"), "--store")
            settings = ", ".join(f"{k} {v}" for k, v in SERVER_SETTINGS.items())
            print(
                f"server: PostgreSQL {version // 10000}.{version % 100} on this machine, {settings}"
            )
        with psycopg.connect(address.conninfo, autocommit=True) as conn:
            migrate(conn)
        run(address, work / "fleet", work, args.boards)
        print(f"load average after the run: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")
    finally:
        if server is not None:
            server.stop()
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())

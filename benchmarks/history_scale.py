"""History at fleet scale: an invented fleet of boards with many sessions each.

    python benchmarks/history_scale.py [--boards 10000] [--sessions 20] [--dir DIR] [--keep]

Writes two invented fleets of the tidegauge board (same serials, sessions of two laptops
interleaved in time) straight to disk in the store's own format (checked against the store's
serialisation on a sample), then measures, in-process and wall-clock:

- the fleet view: cold (no cache: every file read), warm (cache valid), and after new sessions
  on a few boards (targets: <= 3 s);
- one board's history: ``read_board`` + grouping into sessions (target: <= 50 ms), and the
  whole ``fieldtool history SERIAL --json`` command including the Python start-up;
- merging one fleet into the other (target: <= 30 s), and merging it again (idempotent).

The data goes to a temporary folder under /tmp (or --dir) and is removed unless --keep.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import random
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from fieldtool.core import history as h  # noqa: E402
from fieldtool.core.history.fleet import fleet_view  # noqa: E402
from fieldtool.core.history.fleet_cache import CACHE_NAME  # noqa: E402
from fieldtool.core.history.merge import merge  # noqa: E402
from fieldtool.core.history.sessions import group_sessions  # noqa: E402

PROFILE = "tidegauge-apd-bias"
NODES = ["S0"] + [f"{p}{k}" for k in range(1, 9) for p in ("P", "S")]
PARTS = [f"D{i}" for i in range(1, 17)] + [f"C{i}" for i in range(1, 17)]
DIODE_MODES = ["open", "short", "leaky", "weak"]
CAP_MODES = ["open", "short", "lowcap", "esr", "leaky"]
OUTCOMES = ["fixed"] * 15 + ["not-fixed"] * 3 + ["escalated"] * 1 + [None]
TECHS = ["ana", "bo", "chidi", "dana", "eero", "fatma"]
EPOCH = datetime(2024, 1, 1, tzinfo=UTC)


def _stamp(t: datetime) -> str:
    return t.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


class Writer:
    """Builds the lines of one session exactly as ``json.dumps`` of the store would."""

    def __init__(self, rng: random.Random, serial: str) -> None:
        self.rng, self.serial = rng, serial

    def _head(self, kind: str, t: datetime, sid: str) -> str:
        rid = f"{self.rng.getrandbits(128):032x}"
        return (
            f'{{"schema":1,"id":"{rid}","time":"{_stamp(t)}","board":"{self.serial}",'
            f'"profile":"{PROFILE}","kind":"{kind}","session":"{sid}"'
        )

    def session(self, start: datetime) -> list[str]:
        rng = self.rng
        sid = f"{rng.getrandbits(128):032x}"
        t = start
        step = timedelta(seconds=50)
        tech = rng.choice(TECHS)
        lines = [
            self._head("session-opened", t, sid)
            + f',"technician":"{tech}","profile_hash":"5d41402abc4b2a76",'
            f'"tool_version":"0.1.0","session_id":"{sid}","ambient_c":{rng.randint(2, 31)}.5}}'
        ]
        part = rng.choice(PARTS)
        mode = rng.choice(DIODE_MODES if part[0] == "D" else CAP_MODES)
        for node in rng.sample(NODES, rng.randint(6, 10)):
            t += step
            lines.append(self._reading("reading", t, sid, node))
            if rng.random() < 0.25:
                t += step
                lines.append(self._diagnosis(t, sid, part, mode))
        t += step
        lines.append(self._diagnosis(t, sid, part, mode))
        outcome = rng.choice(OUTCOMES)
        named = rng.random() < 0.9  # one action in ten names no mode (reflowed, cleaned)
        t += step
        lines.append(
            self._head("action", t, sid)
            + f',"designator":"{part}","done":"replaced",'
            + (f'"mode":"{mode}"' if named else '"mode":null')
            + ',"part_used":"from stock","note":""}'
        )
        if outcome == "fixed":
            for node in rng.sample(NODES, rng.randint(2, 4)):
                t += step
                lines.append(self._reading("verification", t, sid, node))
        if outcome is not None:
            t += step
            lines.append(self._head("session-closed", t, sid) + f',"outcome":"{outcome}"}}')
        return lines

    def _reading(self, kind: str, t: datetime, sid: str, node: str) -> str:
        volts = round(self.rng.uniform(0.0, 130.0), 3)
        spread = round(self.rng.uniform(0.001, 0.05), 4)
        return (
            self._head(kind, t, sid)
            + f',"node":"{node}","volts":{volts!r},"unit":"V","source":"Fluke 87V #4411",'
            f'"spread":{spread!r},"overload":false,"ripple_vpp":null}}'
        )

    def _diagnosis(self, t: datetime, sid: str, part: str, mode: str) -> str:
        others = self.rng.sample(PARTS, 4)
        probs = [0.52, 0.21, 0.12, 0.08, 0.04]
        cells = [(part, mode)] + [(p, "open") for p in others]
        suspects = ",".join(
            f'{{"designator":"{d}","mode":"{m}","probability":{p!r}}}'
            for (d, m), p in zip(cells, probs, strict=True)
        )
        return self._head("diagnosis", t, sid) + f',"suspects":[{suspects}]}}'


def generate(root: Path, boards: int, sessions: int, seed: int, offset_days: float) -> int:
    """Write one fleet; return the number of records."""
    folder = root / PROFILE
    folder.mkdir(parents=True, exist_ok=True)
    rng = random.Random(seed)
    total = 0
    for b in range(boards):
        serial = f"TG-{b:05d}"
        writer = Writer(rng, serial)
        lines: list[str] = []
        for s in range(sessions):
            start = EPOCH + timedelta(days=s * 36 + offset_days + rng.uniform(0, 8), hours=b % 9)
            lines += writer.session(start)
        (folder / f"{serial}.jsonl").write_text("\n".join(lines) + "\n", encoding="utf-8")
        total += len(lines)
    return total


def check_format(root: Path) -> None:
    """Every line of a sample file is exactly what the store writes for that record."""
    path = next((root / PROFILE).glob("*.jsonl"))
    for line in path.read_text().splitlines():
        rec = h.parse_record(line)
        assert isinstance(rec, h.Record) and rec.event is not None, line
        again = json.dumps(rec.to_dict(), ensure_ascii=False, separators=(",", ":"))
        assert again == line, (again, line)


def timed(fn, *args, **kwargs):
    """(seconds, result) of one call."""
    start = time.perf_counter()
    result = fn(*args, **kwargs)
    return time.perf_counter() - start, result


def machine() -> str:
    """CPU model, cores, Python version and how busy the machine already is."""
    model = "unknown CPU"
    try:
        out = subprocess.run(["lscpu"], capture_output=True, text=True, check=True).stdout
        model = next(
            line.split(":", 1)[1].strip() for line in out.splitlines() if "Model name" in line
        )
    except (OSError, subprocess.CalledProcessError, StopIteration):
        pass
    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    return (
        f"{model}, {os.cpu_count()} cores, Python {platform.python_version()}, "
        f"{platform.system()}; load average before the run {load} (1, 5, 15 min)"
    )


def main() -> int:
    """Generate, measure, print."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--boards", type=int, default=10000)
    parser.add_argument("--sessions", type=int, default=20)
    parser.add_argument("--dir", help="where to put the data (default: a new folder in /tmp)")
    parser.add_argument("--keep", action="store_true", help="leave the data on disk")
    args = parser.parse_args()
    root = Path(tempfile.mkdtemp(prefix="fieldtool-scale-", dir=args.dir))
    shop, laptop = root / "shop", root / "laptop"
    print(f"machine: {machine()}")
    print(f"data: {root}")
    try:
        t, n_shop = timed(generate, shop, args.boards, args.sessions, 1, 0.0)
        t2, n_laptop = timed(generate, laptop, args.boards, args.sessions, 2, 18.0)
        check_format(shop)
        size = sum(p.stat().st_size for p in (shop / PROFILE).iterdir()) / 1e6
        print(
            f"generated {args.boards} boards x {args.sessions} sessions twice: {n_shop} + "
            f"{n_laptop} records ({size:.0f} MB each fleet) in {t + t2:.1f} s"
        )
        run(shop, laptop, args.boards)
    finally:
        if not args.keep:
            shutil.rmtree(root, ignore_errors=True)
    return 0


def _fleet(logs: Path, label: str, use_cache: bool = True) -> float:
    t, view = timed(fleet_view, logs, PROFILE, use_cache=use_cache)
    print(
        f"fleet view, {label}: {t:.2f} s ({view.boards} boards, {view.sessions} sessions, "
        f"{view.repairs} repairs, {len(view.recurring_boards)} recurring)"
    )
    return t


def _history(logs: Path, boards: int, label: str) -> None:
    rng = random.Random(7)
    times = []
    for serial in (f"TG-{rng.randrange(boards):05d}" for _ in range(30)):
        t, sessions = timed(lambda s: group_sessions(h.read_board(logs, s).events), serial)
        times.append(t)
    print(
        f"one board's history ({label}): median {statistics.median(times) * 1e3:.1f} ms, "
        f"worst {max(times) * 1e3:.1f} ms over 30 boards ({len(sessions)} sessions each)"
    )
    cmd = [sys.executable, "-m", "fieldtool", "history", "TG-00001", "--logs", str(logs), "--json"]
    wall = []
    for _ in range(3):
        t, proc = timed(subprocess.run, cmd, capture_output=True, cwd=Path(__file__).parent.parent)
        assert proc.returncode == 0, proc.stderr
        wall.append(t)
    print(f"  'fieldtool history SERIAL --json' whole command: {min(wall) * 1e3:.0f} ms")


def run(shop: Path, laptop: Path, boards: int) -> None:
    """The measurements (see module docstring)."""
    _fleet(shop, "no cache, every file read", use_cache=True)
    _fleet(shop, "cache valid")
    rng = random.Random(3)
    for serial in (f"TG-{rng.randrange(boards):05d}" for _ in range(10)):
        opened = h.SessionOpened(technician="ana", profile_hash="x", tool_version="0.1.0")
        events = [opened, h.Action("D7", "replaced", "open"), h.SessionClosed("fixed")]
        h.append_many(shop, PROFILE, serial, events)
    _fleet(shop, "after new sessions on 10 boards")
    _history(shop, boards, "20 sessions")
    t, report = timed(merge, laptop, shop)
    print(
        f"merge of the second fleet: {t:.1f} s ({report.added} records added to "
        f"{report.boards} boards, {len(report.conflicts)} conflicts)"
    )
    t, again = timed(merge, laptop, shop)
    print(f"the same merge again: {t:.1f} s ({again.added} added, {again.already_present} present)")
    _fleet(shop, "after the merge (every file changed)")
    _fleet(shop, "cache valid again")
    _history(shop, boards, "40 sessions")
    assert (shop / PROFILE / CACHE_NAME).exists()


if __name__ == "__main__":
    sys.exit(main())

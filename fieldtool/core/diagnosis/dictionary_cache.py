"""The fault dictionary cached on disk, keyed by a hash of everything in the profile.

One ``.npz`` file (plain numeric arrays, read with ``allow_pickle=False``) and the metadata as
JSON inside it. The key hashes every profile value (not its file name or comments) with the
dictionary format version, so changing any value, or upgrading the tool's dictionary, builds
anew. Files are written to a temporary name and renamed, so a crash or a second process never
leaves a half-written cache; a damaged or foreign file is ignored and rebuilt.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import os
import tempfile
import zipfile
from collections.abc import Callable, Mapping
from pathlib import Path

import numpy as np

from fieldtool.core.circuit.profile import Profile
from fieldtool.core.diagnosis import dictionary as dictionary_module
from fieldtool.core.diagnosis.dictionary import (
    DICTIONARY_VERSION,
    STEPS_PER_PERIOD,
    FaultDictionary,
)
from fieldtool.core.diagnosis.faults import Hypothesis

ENV_VAR = "FIELDTOOL_CACHE"
_ARRAYS = (
    "row_hypothesis",
    "row_severity",
    "mean",
    "sigma",
    "ripple",
    "unloaded",
    "meter_solved",
    "ripple_sigma",
    "ac_rms",
    "ac_sigma",
    "current",
    "current_sigma",
    "loaded",
    "loaded_sigma",
    "drop_sigma",
    "diode_volts",
    "diode_sigma",
)


def default_cache_dir(env: Mapping[str, str]) -> Path:
    """$FIELDTOOL_CACHE, else $XDG_CACHE_HOME/fieldtool, else ~/.cache/fieldtool."""
    if env.get(ENV_VAR):
        return Path(env[ENV_VAR])
    if env.get("XDG_CACHE_HOME"):
        return Path(env["XDG_CACHE_HOME"]) / "fieldtool"
    return Path.home() / ".cache" / "fieldtool"


def cache_key(profile: Profile) -> str:
    """A hash of every value of the profile and the dictionary's format."""
    values = dataclasses.asdict(profile)
    values.pop("path", None)
    values.pop("digest", None)
    values.pop("efforts", None)  # the steps' efforts change the suggestions, not the dictionary
    text = json.dumps(
        {"profile": values, "version": DICTIONARY_VERSION, "steps": STEPS_PER_PERIOD},
        sort_keys=True,
        default=repr,
    )
    return hashlib.sha256(text.encode()).hexdigest()[:24]


def cache_path(cache_dir: Path | str, profile: Profile) -> Path:
    """Where one profile's dictionary is cached."""
    safe = "".join(c if c.isalnum() or c in "-_" else "_" for c in profile.name)[:60]
    return Path(cache_dir) / f"{safe}-{cache_key(profile)}.npz"


def save(d: FaultDictionary, path: Path) -> None:
    """Write a dictionary atomically (temporary file, then rename)."""
    meta = {
        "key": cache_key(d.profile),
        "nodes": list(d.nodes),
        "labels": d.labels,
        "hypotheses": [[h.key, h.target, h.mode, list(h.severities), h.kind] for h in d.hypotheses],
        "failed": list(d.failed),
        "rails": list(d.rails),
        "test_loads": list(d.test_loads),
        "diodes": list(d.diodes),
        "diode_lift": list(d.diode_lift),
        "output_node": d.output_node,
    }
    buffer = io.BytesIO()
    arrays = {name: getattr(d, name) for name in _ARRAYS}
    np.savez(buffer, meta=np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8), **arrays)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=".npz")
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(buffer.getvalue())
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def load(path: Path, profile: Profile) -> FaultDictionary | None:
    """A cached dictionary for this profile, or None if missing, foreign or damaged."""
    try:
        with open(path, "rb") as f, np.load(f, allow_pickle=False) as data:
            meta = json.loads(bytes(data["meta"]).decode())
            arrays = {name: np.array(data[name]) for name in _ARRAYS}
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile, UnicodeDecodeError):
        return None  # missing, truncated or foreign: build anew
    if meta.get("key") != cache_key(profile):
        return None
    try:
        hyps = tuple(
            Hypothesis(key, target, mode, tuple(float(s) for s in sev), kind)
            for key, target, mode, sev, kind in meta["hypotheses"]
        )
        d = FaultDictionary(
            profile=profile,
            nodes=tuple(meta["nodes"]),
            labels=dict(meta["labels"]),
            hypotheses=hyps,
            failed=tuple(meta["failed"]),
            rails=tuple(meta["rails"]),
            test_loads=tuple(float(r) for r in meta["test_loads"]),
            diodes=tuple(meta["diodes"]),
            diode_lift=tuple(meta["diode_lift"]),
            output_node=str(meta["output_node"]),
            **arrays,
        )
    except (TypeError, ValueError, KeyError):
        return None
    R, P = len(d.row_hypothesis), len(d.nodes)
    Q, L, k = len(d.rails), len(d.test_loads), len(d.diodes)
    shapes = {
        "row_severity": (R,),
        "current": (R, Q),
        "current_sigma": (R, Q),
        "loaded": (R, L, P),
        "loaded_sigma": (R, L, P),
        "drop_sigma": (R, L, P),
        "diode_volts": (R, k),
        "diode_sigma": (R, k),
    }
    if any(getattr(d, n).shape != shapes.get(n, (R, P)) for n in _ARRAYS[1:]):
        return None
    if len(d.diode_lift) != k:
        return None
    return d


def load_or_build(
    profile: Profile,
    cache_dir: Path | str | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> FaultDictionary:
    """The profile's dictionary from the cache, or built (and cached) when not there.

    ``cache_dir`` None means the default location (``default_cache_dir``). A cache folder
    that cannot be written is not an error: the dictionary is still returned.
    """
    folder = Path(cache_dir) if cache_dir is not None else default_cache_dir(os.environ)
    path = cache_path(folder, profile)
    cached = load(path, profile)
    if cached is not None:
        return cached
    d = dictionary_module.build(profile, progress=progress)
    try:
        save(d, path)
    except OSError:
        pass  # a read-only or full cache folder costs speed next time, nothing else
    return d

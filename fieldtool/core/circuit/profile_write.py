"""Write a profile back as TOML, for calibration results (values changed, layout kept simple).

The profile format is tables of numbers and strings, plus ``[overrides.REF]`` sub-tables, so a
small writer suffices; what it writes is read back and validated before anyone saves it.
"""

from __future__ import annotations

import json
import math
from typing import Any

from fieldtool.core.errors import ProfileError


def _value(key: str, v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ProfileError(f"cannot write {key} = {v!r}: not a finite number")
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    raise ProfileError(f"cannot write {key} = {v!r}: only numbers and text belong in a profile")


def _key(k: str) -> str:
    ok = k and all(c.isalnum() or c in "-_" for c in k)
    return k if ok else json.dumps(k, ensure_ascii=False)


def to_toml(data: dict[str, Any], header: str = "") -> str:
    """TOML text for a profile table (sections of scalars, and overrides of sub-tables)."""
    lines = [f"# {line}" if line else "#" for line in header.splitlines()]
    for section, table in data.items():
        if not isinstance(table, dict):
            raise ProfileError(f"cannot write [{section}]: expected a table")
        scalars = {k: v for k, v in table.items() if not isinstance(v, dict)}
        nested = {k: v for k, v in table.items() if isinstance(v, dict)}
        if scalars or not nested:
            lines += ["", f"[{_key(section)}]"]
            lines += [f"{_key(k)} = {_value(k, v)}" for k, v in scalars.items()]
        for sub, values in nested.items():
            lines += ["", f"[{_key(section)}.{_key(sub)}]"]
            lines += [f"{_key(k)} = {_value(k, v)}" for k, v in values.items()]
    return "\n".join(lines).lstrip("\n") + "\n"

"""The core never imports the UI toolkit or the serial library (architecture rule)."""

import pkgutil
import subprocess
import sys

import fieldtool.core


def _core_modules() -> list[str]:
    return [f"fieldtool.core.{m.name}" for m in pkgutil.iter_modules(fieldtool.core.__path__)]


def test_core_has_modules():
    assert "fieldtool.core.errors" in _core_modules()


def test_core_imports_neither_textual_nor_serial():
    for module in ["fieldtool.core", *_core_modules()]:
        code = (
            f"import sys, {module}\n"
            "roots = ('textual', 'serial', 'rich')\n"
            "bad = sorted(m for m in sys.modules if m.split('.')[0] in roots)\n"
            "print(','.join(bad))\n"
        )
        out = subprocess.run(
            [sys.executable, "-c", code], capture_output=True, text=True, check=True
        ).stdout.strip()
        assert out == "", f"{module} pulled in {out}"


def test_meters_do_not_import_textual():
    import fieldtool.meters

    for m in pkgutil.iter_modules(fieldtool.meters.__path__):
        name = f"fieldtool.meters.{m.name}"
        code = f"import sys, {name}\nprint(any(k.startswith('textual') for k in sys.modules))"
        out = subprocess.run(
            [sys.executable, "-c", code], capture_output=True, text=True, check=True
        ).stdout.strip()
        assert out == "False", f"{name} imports textual"

"""The house's import rules (architecture rule; see DEVELOPERS.md).

- ``core`` never imports the UI toolkit, the serial library, ``meters``, ``store``,
  ``commands`` or ``tui``; ``meters`` never imports textual, ``commands`` or ``tui``.
- ``store`` (the shared fleet store, beside ``meters``) imports only ``core`` (and psycopg, only
  when it connects): never textual, ``meters``, ``commands`` or ``tui``.
- Inside ``core``, the subsystems stack one way: ``circuit`` ← ``diagnosis`` ← ``history`` ←
  ``report`` (``session`` on top); no subsystem imports one above it.
"""

import ast
import pkgutil
import subprocess
import sys
from pathlib import Path

import fieldtool
import fieldtool.core

PACKAGE = Path(fieldtool.__file__).parent


def _modules(package) -> list[str]:
    found = [package.__name__]
    for m in pkgutil.walk_packages(package.__path__, prefix=f"{package.__name__}."):
        found.append(m.name)
    return found


def _imports(module: str) -> set[str]:
    """Every fieldtool module a module's source names in an import statement."""
    parts = module.split(".")
    path = PACKAGE.joinpath(*parts[1:])
    path = path / "__init__.py" if path.is_dir() else path.with_suffix(".py")
    if not path.exists():
        return set()  # a compiled extension (the solver's kernel) imports nothing of ours
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module)
            names.update(f"{node.module}.{a.name}" for a in node.names)
        elif isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
    return {n for n in names if n.startswith("fieldtool")}


def test_core_has_subsystems():
    modules = _modules(fieldtool.core)
    for name in ("circuit", "diagnosis", "history", "report"):
        assert f"fieldtool.core.{name}" in modules


def _loaded(modules: list[str], roots: tuple[str, ...]) -> str:
    """Which of ``roots`` importing ``modules`` loads, in a fresh interpreter."""
    code = (
        "import importlib, sys\n"
        f"for m in {modules!r}:\n"
        "    importlib.import_module(m)\n"
        f"roots = {roots!r}\n"
        "print(','.join(sorted(m for m in sys.modules if m.split('.')[0] in roots)))\n"
    )
    return subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.strip()


def test_core_imports_neither_textual_nor_serial():
    out = _loaded(_modules(fieldtool.core), ("textual", "serial", "rich"))
    assert out == "", f"core pulled in {out}"


def test_meters_do_not_import_textual():
    import fieldtool.meters

    modules = _modules(fieldtool.meters)
    code = (
        "import importlib, sys\n"
        f"for m in {modules!r}:\n"
        "    importlib.import_module(m)\n"
        "print(any(k.startswith('textual') for k in sys.modules))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.strip()
    assert out == "False"


def test_imports_point_one_way():
    import fieldtool.meters

    for module in _modules(fieldtool.core):
        bad = {
            n
            for n in _imports(module)
            if n.split(".")[1:2] and n.split(".")[1] in ("meters", "store", "commands", "tui")
        }
        assert not bad, f"{module} imports {sorted(bad)}"
    for module in _modules(fieldtool.meters):
        bad = {
            n
            for n in _imports(module)
            if n.split(".")[1:2] and n.split(".")[1] in ("commands", "tui")
        }
        assert not bad, f"{module} imports {sorted(bad)}"


def test_store_imports_only_core():
    import fieldtool.store

    for module in _modules(fieldtool.store):
        bad = {
            n
            for n in _imports(module)
            if n.split(".")[1:2] and n.split(".")[1] in ("meters", "commands", "tui")
        }
        assert not bad, f"{module} imports {sorted(bad)}"
    out = _loaded(_modules(fieldtool.store), ("textual", "serial", "psycopg"))
    assert out == "", f"importing the store pulled in {out} (psycopg only when connecting)"


SUBSYSTEMS = ("circuit", "diagnosis", "history", "report", "session")


def test_core_subsystems_stack_one_way():
    for module in _modules(fieldtool.core):
        parts = module.split(".")
        if len(parts) < 3 or parts[2] not in SUBSYSTEMS:
            continue
        level = SUBSYSTEMS.index(parts[2])
        for name in _imports(module):
            target = name.split(".")
            if len(target) > 2 and target[1] == "core" and target[2] in SUBSYSTEMS:
                assert SUBSYSTEMS.index(target[2]) <= level, f"{module} imports {name}"

"""Build hook: compile the solver's kernel (``fieldtool/core/circuit/_kernel.c``).

An editable install (``pip install -e .``) compiles it next to its source; a wheel carries it
and is tagged for this platform. The kernel is optional: where no C compiler is available the
package installs without it and the solver runs its numpy reference (correct, slower); the
warning says so. The compiled file records a hash of its source, so a kernel left behind by an
edit of the C file is not used (``fieldtool.core.circuit.kernel``).
"""

from __future__ import annotations

import hashlib
import sysconfig
import tempfile
from pathlib import Path

try:
    from hatchling.builders.hooks.plugin.interface import BuildHookInterface
except ImportError:  # benchmarks/speed.py imports this file to time the compile alone
    BuildHookInterface = object  # type: ignore[assignment,misc]

MODULE = "fieldtool.core.circuit._kernel"
SOURCE = Path("fieldtool", "core", "circuit", "_kernel.c")


def source_hash(path: Path) -> str:
    """The hash the kernel is compiled with and checked against (first 16 hex digits)."""
    return hashlib.sha256(path.read_bytes()).hexdigest()[:16]


class CustomBuildHook(BuildHookInterface):
    """Compile the kernel with the platform's C compiler through setuptools' build_ext."""

    def initialize(self, version: str, build_data: dict) -> None:
        if self.target_name != "wheel":
            return
        root = Path(self.root)
        out = root if version == "editable" else Path(tempfile.mkdtemp(prefix="fieldtool-kernel-"))
        try:
            built = _compile(root, out)
        except _COMPILE_ERRORS as exc:
            self.app.display_warning(
                f"fieldtool: the solver's kernel was not compiled ({exc}); the solver will run "
                "its numpy reference, correct but tens of times slower"
            )
            return
        if version != "editable":
            build_data["pure_python"] = False
            build_data["infer_tag"] = True
            build_data["force_include"][str(built)] = str(built.relative_to(out))


def _compile(root: Path, out: Path) -> Path:
    from setuptools import Distribution, Extension

    source = root / SOURCE
    ext = Extension(
        MODULE,
        sources=[str(source)],
        define_macros=[("FT_SOURCE_HASH", f'"{source_hash(source)}"')],
    )
    dist = Distribution({"name": "fieldtool-kernel", "ext_modules": [ext]})
    cmd = dist.get_command_obj("build_ext")
    cmd.build_lib = str(out)
    cmd.build_temp = tempfile.mkdtemp(prefix="fieldtool-kernel-build-")
    cmd.ensure_finalized()
    cmd.run()
    suffix = sysconfig.get_config_var("EXT_SUFFIX")
    return out / SOURCE.with_name(f"_kernel{suffix}")


def _errors() -> tuple[type[BaseException], ...]:
    try:
        from setuptools.errors import CCompilerError, ExecError, PlatformError
    except ImportError:  # setuptools itself missing: treated like a missing compiler
        return (ImportError, OSError)
    return (CCompilerError, ExecError, PlatformError, ImportError, OSError)


_COMPILE_ERRORS = _errors()

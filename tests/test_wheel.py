"""A plain wheel install carries the shipped profiles (packaging check, no source needed).

Builds the wheel with pip, installs it into a fresh virtual environment (the runtime
dependencies are taken from the site-packages folders of the interpreter running the tests,
through a ``.pth`` file, so no download is needed whether that interpreter is a system Python
or a virtual environment), and runs ``fieldtool expect`` on a shipped profile by name from an
empty folder.
"""

import os
import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_wheel_install_runs_a_shipped_profile_by_name(tmp_path):
    dist = tmp_path / "dist"
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(dist), str(ROOT)],
        check=True,
        capture_output=True,
    )
    (wheel,) = dist.glob("fieldtool-*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    assert "fieldtool/profiles/tidegauge-apd-bias.toml" in names
    kernels = [
        n for n in names if n.startswith("fieldtool/core/circuit/_kernel.") and not n.endswith(".c")
    ]
    assert kernels, "the wheel carries no compiled solver kernel (hatch_build.py)"
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True)
    python = venv / "bin" / "python"
    inner = subprocess.run(
        [str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout.strip()
    # Plain folder lines: appended after the venv's own site-packages, and their own .pth files
    # (this checkout's editable install) are not run, so the wheel's package is the one found.
    outer = [p for p in sys.path if p.endswith("site-packages") and Path(p).is_dir()]
    (Path(inner) / "test-dependencies.pth").write_text("\n".join(outer) + "\n")
    subprocess.run(
        [str(python), "-m", "pip", "install", "-q", "--no-deps", str(wheel)],
        check=True,
        capture_output=True,
    )
    empty = tmp_path / "somewhere-else"
    empty.mkdir()
    env = {k: v for k, v in os.environ.items() if not k.startswith("FIELDTOOL_")}
    env["PYTHONPATH"] = ""
    where = subprocess.run(
        [str(python), "-c", "import fieldtool; print(fieldtool.__file__)"],
        cwd=empty,
        env=env,
        capture_output=True,
        text=True,
        check=True,
    ).stdout.strip()
    assert where.startswith(str(venv)), f"the wheel's package was not the one imported: {where}"
    uses_kernel = [
        str(python),
        "-c",
        "from fieldtool.core.circuit import kernel as k; print(k.available())",
    ]
    kernel = subprocess.run(uses_kernel, cwd=empty, env=env, capture_output=True, text=True)
    assert kernel.stdout.strip() == "True", kernel.stderr
    run = subprocess.run(
        [str(venv / "bin" / "fieldtool"), "expect", "tidegauge-apd-bias"],
        cwd=empty,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert run.returncode == 0, run.stderr
    assert "tidegauge-apd-bias" in run.stdout and "HV-OUT" in run.stdout
    assert list(empty.iterdir()) == []  # nothing written where it was run

"""The README's two set-up lines make and use a virtual environment, so they run as written on
an externally managed Python (PEP 668: Debian's and Ubuntu's refuse a plain ``pip install``),
and CI runs the README's test line exactly as it is written there."""

from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
VENV = "python3 -m venv .venv && . .venv/bin/activate && pip install -e "


def _readme_lines() -> list[str]:
    text = (ROOT / "README.md").read_text()
    block = text.split("```sh\n", 1)[1].split("```", 1)[0]
    return [line for line in block.splitlines() if line.strip()]


def test_both_setup_lines_make_and_use_a_virtual_environment():
    install, tests = _readme_lines()
    assert install == VENV + ". && fieldtool demo"
    assert tests == VENV + "'.[test]' && python -m pytest -q"


def test_ci_runs_the_readme_test_line_as_written():
    ci = (ROOT / ".ci" / "run").read_text().splitlines()
    commands = [line for line in ci if line.strip() and not line.lstrip().startswith("#")]
    assert commands[-1] == _readme_lines()[1]

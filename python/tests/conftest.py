"""Shared fixtures: the repository's demo data, the `waymark` command (to compare with), and
indexes of the demo register built once per test session."""

import json
import os
import subprocess
from pathlib import Path

import pytest

import waymark

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "demo-data"
WORDS = Path("/usr/share/dict/american-english")


def waymark_bin() -> Path:
    """The release binary (scripts/test-python.sh builds it and names it in WAYMARK_BIN)."""
    path = Path(os.environ.get("WAYMARK_BIN", REPO / "target" / "release" / "waymark"))
    if not path.exists():
        pytest.fail(f"{path} is missing: run scripts/test-python.sh (it builds it)")
    return path


def run_cli(*args, stdin=None) -> subprocess.CompletedProcess:
    """Runs `waymark ARGS…`; fails the test on a non-zero exit."""
    out = subprocess.run(
        [str(waymark_bin()), *map(str, args)],
        input=stdin,
        capture_output=True,
        text=True,
    )
    assert out.returncode == 0, out.stderr
    return out


def json_lines(text: str) -> list:
    return [json.loads(line) for line in text.splitlines() if line.strip()]


def word_list() -> list[str]:
    """Debian's wamerican list (scripts/test-data.sh installs it)."""
    if not WORDS.exists():
        pytest.fail(f"{WORDS} is missing: run scripts/test-data.sh")
    return WORDS.read_text(encoding="utf-8").splitlines()


@pytest.fixture(scope="session")
def register_dir(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("register")


@pytest.fixture(scope="session")
def cli_register(register_dir) -> Path:
    """The demo register indexed by the command line, as in the README's set-up."""
    path = register_dir / "cli.wmk"
    run_cli("build", DEMO / "register.csv", "--field", "name", "--id-field", "code", "-o", path, "-q")
    return path


@pytest.fixture(scope="session")
def register(register_dir) -> waymark.Index:
    """The demo register indexed from the file through the package."""
    return waymark.build_file(
        DEMO / "register.csv", register_dir / "py-file.wmk", field="name", id_field="code"
    )


@pytest.fixture(scope="session")
def lookups() -> list[str]:
    return (DEMO / "lookups.txt").read_text(encoding="utf-8").splitlines()

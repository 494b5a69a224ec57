"""Shared fixtures: bundled profiles and an in-process command-line runner."""

from __future__ import annotations

import contextlib
import io
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import pytest
from hypothesis import settings

# Property tests draw the same examples on every run: the suite stays deterministic.
settings.register_profile("deterministic", derandomize=True, database=None, deadline=None)
settings.load_profile("deterministic")

REPO = Path(__file__).resolve().parent.parent
PROFILES = REPO / "hardware_profiles"

# The files whose tests read the suite's one demo run (the ``demo_run`` fixture); test_demo_files_are_listed checks
# the list.
DEMO_FILES = ("tests/test_cli_foundation.py", "tests/test_vocabulary_commands.py")


@pytest.hookimpl(optionalhook=True)
def pytest_xdist_make_scheduler(config, log):
    """Schedule the suite for pytest-xdist (the README runs it with ``-n auto``, on every core).

    Each test file stays on one worker, so that its module-scoped fixtures (built tables, compiled C) are built
    once, and the files that read the one demo run share a worker, so that the demo runs once.
    """
    from xdist.scheduler import LoadScopeScheduling

    class FileScheduling(LoadScopeScheduling):
        def _split_scope(self, nodeid: str) -> str:
            path = nodeid.split("::", 1)[0]
            return "demo" if path in DEMO_FILES else path

    return FileScheduling(config, log)


@dataclass
class CliResult:
    status: int
    stdout: str
    stderr: str


def run_cli(*argv) -> CliResult:
    """Run ``compensator ARGV...`` in-process and capture its streams and exit status."""
    from compensator.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            status = main([str(a) for a in argv])
        except SystemExit as exc:  # argparse usage errors
            status = exc.code if isinstance(exc.code, int) else 2
    return CliResult(status, out.getvalue(), err.getvalue())


@pytest.fixture
def cli():
    """The in-process command-line runner."""
    return run_cli


class DemoRun(NamedTuple):
    """One run of ``compensator demo --json --out DIR`` on the bundled profiles."""

    result: CliResult
    out_dir: Path


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory) -> DemoRun:
    """The demo run once for the whole suite (it is the most expensive command): its JSON and the folder it wrote."""
    out = tmp_path_factory.mktemp("demo-run") / "fw"
    return DemoRun(run_cli("demo", "--profiles", PROFILES, "--json", "--out", out), out)


@pytest.fixture(scope="session")
def profiles_dir() -> Path:
    """The bundled ``hardware_profiles/`` directory."""
    return PROFILES


@pytest.fixture(scope="session")
def sipm_a():
    from compensator.profiles import load_sipm
    return load_sipm(PROFILES / "hut-sipm-a.yaml")


@pytest.fixture(scope="session")
def sipm_b():
    from compensator.profiles import load_sipm
    return load_sipm(PROFILES / "hut-sipm-b.yaml")


@pytest.fixture(scope="session")
def sipm_c():
    from compensator.profiles import load_sipm
    return load_sipm(PROFILES / "hut-sipm-c.yaml")


@pytest.fixture(scope="session")
def board_ntc():
    from compensator.profiles import load_board
    return load_board(PROFILES / "hut-board-ntc.yaml")


@pytest.fixture(scope="session")
def board_pt1000():
    from compensator.profiles import load_board
    return load_board(PROFILES / "hut-board-pt1000.yaml")


@pytest.fixture(scope="session")
def cooler():
    from compensator.profiles import load_thermal
    return load_thermal(PROFILES / "hut-cooler.yaml")

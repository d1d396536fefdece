"""Shared fixtures of the Python module's tests (run by ctest: tests/cli/python.cmake).

APSIDES_BINARY names the command-line tool (the tests compare the module with it);
APSIDES_SOURCE_DIR the source tree (the bundled demo). Scratch files go to pytest's
--basetemp, which ctest puts under the build tree.
"""
import json
import os
import pathlib
import subprocess

import pytest

SOURCE = pathlib.Path(os.environ.get("APSIDES_SOURCE_DIR", pathlib.Path(__file__).resolve().parents[2]))
DEMO = SOURCE / "datasets_synthetic" / "demo"


@pytest.fixture(scope="session")
def demo_project_path():
    return DEMO / "project.toml"


@pytest.fixture(scope="session")
def cli():
    """Runs the apsides command line; returns (exit code, stdout, stderr)."""
    binary = os.environ.get("APSIDES_BINARY")
    if not binary:
        pytest.skip("APSIDES_BINARY is not set (ctest sets it)")

    def run(*args):
        p = subprocess.run([binary, *map(str, args)], capture_output=True, text=True)
        return p.returncode, p.stdout, p.stderr

    return run


def read_json(path):
    with open(path) as f:
        return json.load(f)

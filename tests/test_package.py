"""Packaging facts: light CLI import, bundled examples, version."""

from __future__ import annotations

import subprocess
import sys

import spurplan
from spurplan.io.resources import data_dir, example_path


def test_cli_import_pulls_in_no_heavy_library():
    # Start-up cost: `spurplan --help` must not import the numeric stack (skrf's own
    # test_init.py guards the same for scikit-rf).
    code = (
        "import sys, spurplan.cli; "
        "print(','.join(m for m in ('numpy', 'pandas', 'scipy', 'matplotlib', 'skrf') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_bundled_examples_load_and_say_they_are_invented():
    paths = sorted(data_dir("examples").glob("*.toml"))
    assert len(paths) >= 2
    for path in paths:
        assert "invented" in path.read_text(encoding="utf-8").lower()
        # Every mode of it (a file without [[mode]] tables is one mode).
        assert all(m.lineup.stages for m in spurplan.load_modes(path))
    assert example_path().is_file()


def test_version_is_reported():
    out = subprocess.run(
        [sys.executable, "-m", "spurplan.cli", "--version"], capture_output=True, text=True, check=True
    )
    assert spurplan.__version__ in out.stdout

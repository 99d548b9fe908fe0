"""A cold `spurplan check` imports only what the command needs.

The command runs in a fresh interpreter (a subprocess), and the modules it loaded are
read from ``sys.modules`` afterwards.  The heavy libraries are each needed elsewhere: scipy
(large transforms, sine-FM lines, the remedy's filter search), scikit-rf (Touchstone files,
cascaded sections), pandas (DataFrames for notebooks), matplotlib (plots), dask (yield on
a cluster); a check of the bundled prototype-filter examples needs none of them.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
HEAVY = ("scipy", "skrf", "pandas", "matplotlib", "dask")

PROBE = """
import json, sys
from spurplan.cli import main
try:
    main(["check", sys.argv[1]])
except SystemExit:
    pass
print(json.dumps(sorted({m.split(".")[0] for m in sys.modules})), file=sys.stderr)
"""


@pytest.mark.parametrize("example", ["uhf_telemetry.toml", "two_carrier_driver.toml"])
def test_cold_check_imports_no_heavy_library(example):
    proc = subprocess.run(
        [sys.executable, "-c", PROBE, str(ROOT / "examples" / example)],
        capture_output=True,
        text=True,
        timeout=120,
        cwd=ROOT,
    )
    loaded = set(json.loads(proc.stderr.strip().splitlines()[-1]))
    assert "spurplan" in loaded and "products at the output" in proc.stdout  # the command ran
    assert not loaded & set(HEAVY), sorted(loaded & set(HEAVY))

"""Package-level checks: version, console script, import hygiene."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import ringkit


def test_version_module_and_console_script():
    out = subprocess.run(
        [sys.executable, "-m", "ringkit", "--version"], capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == f"ringkit {ringkit.__version__}"
    script = subprocess.run(
        [str(Path(sys.executable).parent / "ringkit"), "--version"],
        capture_output=True,
        text=True,
        check=True,
    )
    assert script.stdout.strip() == f"ringkit {ringkit.__version__}"


def test_import_is_light():
    code = (
        "import sys, ringkit, ringkit.units; "
        "bad = [m for m in ('matplotlib', 'ipywidgets') if m in sys.modules]; "
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""

"""The code base stays ruff-clean (lint rules and formatting configured in pyproject.toml)."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
RUFF = shutil.which("ruff", path=str(Path(sys.executable).parent)) or shutil.which("ruff")


@pytest.mark.skipif(RUFF is None, reason="ruff not installed (test extra)")
@pytest.mark.parametrize("args", [["check", "."], ["format", "--check", "."]], ids=str)
def test_ruff_clean(args):
    out = subprocess.run([RUFF, *args], cwd=ROOT, capture_output=True, text=True)
    assert out.returncode == 0, out.stdout + out.stderr

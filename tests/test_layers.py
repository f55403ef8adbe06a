"""The pipeline's layering, enforced: a stage never imports a later one."""

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_stages_import_only_earlier_stages():
    # import-linter's "layers" contract in pyproject.toml:
    # core < look < sim < view < raster < deliver < render < check < cli.
    lint = Path(sys.executable).with_name("lint-imports")
    run = subprocess.run([str(lint), str(ROOT / "pyproject.toml")], cwd=ROOT, capture_output=True,
                         text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert run.returncode == 0, run.stdout + run.stderr
    assert "0 broken" in run.stdout

"""Whole-process start-up: how long `splatter render` takes on a tiny look.

Runs the installed command (or `python -m splatter`) on a 2-frame, 32 x 32
look several times in fresh processes. The first run may compile kernels
(it says so); later runs load them from numba's on-disk cache. Prints each
run's wall time and the ratio of the median warm run to the first run.

numba imports scipy at start-up whenever it is installed (about 0.25 s
here). splatter does not need scipy, only its tests do, so where scipy is
installed the warm runs are repeated with scipy hidden from the process,
which is what an install without the test extras measures.

Usage: python scripts/bench_startup.py [--runs N]
"""

from __future__ import annotations

import argparse
import importlib.util
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TINY = """
name = "tiny"
[clip]
frames = 2
[image]
width = 32
height = 32
[[source]]
rate = 20
life = 1
[output]
frames = ["png"]
"""


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--runs", type=int, default=5)
    args = ap.parse_args()
    work = Path(tempfile.mkdtemp(prefix="splatter-startup-"))
    look = work / "tiny.toml"
    look.write_text(TINY)
    exe = shutil.which("splatter")
    cmd = [exe] if exe else [sys.executable, "-m", "splatter"]
    times = []
    for i in range(args.runs):
        t0 = time.perf_counter()
        subprocess.run(cmd + ["render", str(look), "--quiet", "--out", str(work / "out")], check=True)
        times.append(time.perf_counter() - t0)
        print(f"run {i + 1}: {times[-1]:.2f} s")
    warm = statistics.median(times[1:]) if len(times) > 1 else times[0]
    print(f"median warm run {warm:.2f} s; first / warm = {times[0] / warm:.1f}x (command: {' '.join(cmd)})")
    if importlib.util.find_spec("scipy") is not None:
        hide = ("import sys; sys.modules['scipy'] = None; sys.argv[0] = 'splatter'; "
                "from splatter.cli import run; run()")
        bare = []
        for i in range(max(args.runs - 1, 1)):
            t0 = time.perf_counter()
            subprocess.run([sys.executable, "-c", hide, "render", str(look), "--quiet", "--out",
                            str(work / "out")], check=True)
            bare.append(time.perf_counter() - t0)
        print(f"median warm run with scipy hidden (an install without the test extras): "
              f"{statistics.median(bare):.2f} s")
    shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())

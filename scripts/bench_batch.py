"""Batch rendering: `splatter vary` against a shell loop of `splatter render`, measured in the same run.

16 variations of a small look (64 frames at 128 x 128: 8 seeds x 2 emission
rates). The shell loop starts one `splatter render` process per variation,
one after another, as a script would; the batch is one `splatter vary`
process (worker processes, one per core, each loading the compiled kernels
once), also run with `--jobs 1` to separate what the saved start-ups give
from what the parallel workers give. Every batch's frames are checked
byte for byte against the loop's. Prints wall times, ratios, and where the
batch's time goes (its manifest's per-variation seconds and the board).

Usage: python scripts/bench_batch.py [--seeds 8] [--frames 64] [--size 128] [--rounds 2]
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

LOOK = """
name = "chimney_take"
[clip]
frames = {frames}
fps = 30
loop = "exact"
[image]
width = {size}
height = {size}
[camera]
fit = true
[[source]]
shape = "disc"
radius = 0.1
rate = 100
speed = [0.6, 1.0]
life = [1.0, 1.5]
size = [0.05, 0.09]
grow = [[0, 1], [1, 3]]
[[force]]
kind = "wind"
velocity = [0.5, 0, 0]
gust = 0.3
gust_period = 1.0
[[force]]
kind = "lift"
accel = 1.0
cooling = 0.8
[[force]]
kind = "swirl"
strength = 0.4
scale = 0.6
octaves = 2
evolve = 1.0
[output]
frames = ["png"]
"""

RATES = ("60", "120")


def _command():
    exe = shutil.which("splatter")
    return [exe] if exe else [sys.executable, "-m", "splatter"]


def _digests(folder: Path):
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir()) if p.is_file()}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seeds", type=int, default=8, help="seeds (times 2 rates = variations)")
    ap.add_argument("--frames", type=int, default=64)
    ap.add_argument("--size", type=int, default=128)
    ap.add_argument("--rounds", type=int, default=2, help="loop-then-batch rounds (the machine's load moves)")
    args = ap.parse_args()
    work = Path(tempfile.mkdtemp(prefix="splatter-batch-"))
    look = work / "chimney_take.toml"
    look.write_text(LOOK.format(frames=args.frames, size=args.size))
    cmd = _command()
    seeds = list(range(1, args.seeds + 1))
    n = len(seeds) * len(RATES)
    # Warm numba's on-disk cache so neither side pays for compiling.
    subprocess.run(cmd + ["render", str(look), "--quiet", "--frames", "0:2", "--out", str(work / "warm")], check=True)

    print(f"{n} variations of {args.frames} frames at {args.size} px, {os.cpu_count()} cores")
    ratios = []
    for r in range(args.rounds):
        # Loop and batches back to back in each round, so load from other work falls on both.
        t0 = time.perf_counter()
        for seed in seeds:
            for rate in RATES:
                out = work / f"loop{r}" / f"seed{seed}_source.0.rate-{rate}"
                subprocess.run(cmd + ["render", str(look), "--quiet", "--seed", str(seed), "--set",
                                      f"source.0.rate={rate}", "--out", str(out)], check=True,
                               stderr=subprocess.DEVNULL)  # the loop's notes, once per variation
        t_loop = time.perf_counter() - t0
        print(f"round {r + 1}: shell loop of splatter render: {t_loop:6.1f} s  ({t_loop / n:.2f} s a variation)")
        # --jobs 1 (start-up saved, no parallel workers) in the first round only, to keep the run short.
        for label, extra in (("batch", []), ("batch --jobs 1", ["--jobs", "1"]))[: 2 if r == 0 else 1]:
            out = work / f"{label.replace(' ', '_')}{r}"
            t0 = time.perf_counter()
            subprocess.run(cmd + ["vary", str(look), "--quiet", "--seeds", f"{seeds[0]}:{seeds[-1] + 1}", "--sweep",
                                  "source.0.rate=" + ",".join(RATES), "--out", str(out), *extra], check=True,
                           stderr=subprocess.DEVNULL)
            wall = time.perf_counter() - t0
            manifest = json.loads((out / "vary.json").read_text())
            for v in manifest["variations"]:
                assert _digests(out / v["folder"]) == _digests(work / f"loop{r}" / v["folder"]), v["folder"]
            s = manifest["summary"]
            per = [v["seconds"] for v in manifest["variations"]]
            if label == "batch":
                ratios.append(t_loop / wall)
            print(f"round {r + 1}: {label:15s} {wall:6.1f} s  loop / batch = {t_loop / wall:.2f}x  "
                  f"(jobs {s['jobs']}; a variation's render on its worker {min(per):.2f}-{max(per):.2f} s, "
                  f"summed {sum(per):.1f} s; board {s['board_seconds']:.1f} s; the rest, process and worker "
                  f"start-up, kernel loading and waiting, {wall - s['board_seconds'] - sum(per) / s['jobs']:.1f} s)")
    print("frames byte-identical to the loop's: yes")
    print("loop / batch per round: " + ", ".join(f"{x:.2f}x" for x in ratios))
    shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())

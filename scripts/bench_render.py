"""Benchmark a whole render and say where the time goes.

The benchmark look: 64 frames of 256 x 256 with about 20,000 live puffs
(a wide harbour fog bank: wind with gusts, lift, 3-octave swirl, a ground
plane). It is rendered three ways in the same run, after one warm-up render
that fills numba's cache:

* unlit;
* lit with self-shadowing;
* lit, with light-direction maps (six extra shadow marches, one composite).

For each, the script prints the wall time of every stage (simulate, light,
project, composite, queue = handing frames to the writer, write = encoding
and writing on the background thread, which overlaps compositing) and the
ratios lit / unlit and lightdirs / unlit.

With ``--demo`` it instead renders the detailed demo chimney
(``looks/harbour_chimney.toml``: 64 frames of 512 x 512, tens of thousands of
live puffs shaped by the flow) in separate processes, once with frames only
and once with its 8 x 8 sheet, GIF and contact sheet, and prints the time per
stage, how much the sheet and previews add, and each process's peak memory
beside the finished sheet's 8-bit size.

With ``--rate-scale X`` (beside ``--demo``) every source's rate is multiplied
by ``X`` (the chimney at its own rate already holds about 189,000 live
puffs; a source's rate may be at most 100,000 puffs/s, so X up to 1.1) and
only the frames-only case runs; the script prints the mean
number of live puffs the rendered frames hold, counted as they are
simulated.

With ``--flow`` it renders the flow demo (``looks/beach_bonfire.toml``, 64
frames with its sheet and previews, ``--size`` px) twice in separate
processes: with its convection flow, and with a lift force in the flow's
place (the same look without the flow), and prints the time per stage and
their ratio (goal: the flow at most 2x).

To time another checkout's code with this script, run it with that checkout's
interpreter from outside either tree (the timed renders run in child
processes that import ``splatter`` from the interpreter's installation):
``cd /tmp && /other/.venv/bin/python /this/scripts/bench_render.py --demo``.

Usage: python scripts/bench_render.py [--frames N] [--keep DIR] [--demo [--rate-scale X]] [--flow [--size PX]]
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import sys
import tempfile
import textwrap
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

LOOK = """
name = "bench_fog"
seed = 1
[clip]
frames = {frames}
fps = 30
substeps = 2
loop = "exact"
[image]
width = 256
height = 256
[camera]
view_width = 9.0
target = [0, 1.6, 0]
eye = [0, 1.6, 10]
[[source]]
shape = "box"
center = [-1.5, 0.3, 0]
extent = [2.5, 0.2, 1.0]
rate = 8000
direction = [0.3, 1, 0]
speed = [0.3, 0.8]
spread = 30
life = [2.0, 3.0]
size = [0.05, 0.1]
grow = [[0, 1], [1, 2.5]]
opacity = [[0, 0], [0.1, 0.12], [0.7, 0.06], [1, 0]]
color = "#c8ccd0"
[[force]]
kind = "wind"
velocity = [0.8, 0, 0]
gust = 0.3
gust_period = 1.0
[[force]]
kind = "lift"
accel = 0.5
cooling = 0.8
[[force]]
kind = "swirl"
strength = 0.4
scale = 1.0
octaves = 3
evolve = 1.0
[[obstacle]]
kind = "plane"
point = [0, 0, 0]
normal = [0, 1, 0]
bounce = 0.2
friction = 0.5
[output]
frames = ["png"]
"""

LIGHT = """
[shading]
ambient = 0.3
[shading.light]
direction = [1, 1, 0.5]
intensity = 1.2
shadow = 0.9
"""


def run(look_path, out_dir, overrides=()):
    from splatter.look.load import load_look
    from splatter.render import render

    look = load_look(look_path, overrides=list(overrides))
    t0 = time.perf_counter()
    res = render(look, out_dir=str(out_dir), progress=False)
    wall = time.perf_counter() - t0
    return wall, res


DEMO_CHILD = """
import json, resource, sys, time
import splatter.render as render_module
from splatter.look.load import load_look
live = []
simulate = render_module.simulate
def counting(look, plan=None, **kw):  # the rendered frames' live puffs (the fit's sampled frames are not counted)
    for state in simulate(look, plan, **kw):
        if kw.get("sample", 1) == 1:
            live.append(len(state.size))
        yield state
render_module.simulate = counting
look = load_look(sys.argv[1], overrides=sys.argv[3:])
t0 = time.perf_counter()
res = render_module.render(look, out_dir=sys.argv[2], progress=False)
sec = dict(res.seconds, wall=time.perf_counter() - t0, peak_kb=resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,
           live=sum(live) / max(1, len(live)))
print(json.dumps(sec))
"""


def rate_overrides(look_path: Path, scale: float) -> list:
    """``--set`` overrides multiplying every source's rate of ``look_path`` by ``scale``."""
    from splatter.look.load import load_look

    return [f"source.{i}.rate={src.rate * scale!r}" for i, src in enumerate(load_look(look_path).sources)]


def demo(work: Path, rate_scale: float = 1.0) -> int:
    """Render the demo chimney with and without its sheet and previews, each in its own process.

    With ``rate_scale`` other than 1 every source's rate is scaled and only the frames-only case runs.
    """
    import json
    import subprocess

    look = HERE.parent / "looks" / "harbour_chimney.toml"
    scaled = rate_overrides(look, rate_scale) if rate_scale != 1.0 else []
    cases = [("frames only", ["output.sheet=false", "output.preview=[]"]), ("with sheet + previews", [])]
    if scaled:
        cases = cases[:1]
    subprocess.run([sys.executable, "-c", DEMO_CHILD, str(look), str(work / "warm"), "clip.frames=2", *scaled],
                   check=True, capture_output=True)  # fill the JIT cache
    stages = ["fit", "simulate", "light", "project", "composite", "queue", "write"]
    if scaled:
        print(f"source rates x {rate_scale:g}")
    print(f"{'case':<22} {'wall s':>7} {'peak GB':>8} {'live':>8} " + " ".join(f"{s:>9}" for s in stages))
    walls, peaks, staged = {}, {}, {}
    for label, over in cases:
        run_ = subprocess.run([sys.executable, "-c", DEMO_CHILD, str(look), str(work / label[:5]), *over, *scaled],
                              check=True, capture_output=True, text=True)
        sec = json.loads(run_.stdout.strip().splitlines()[-1])
        walls[label] = sec["wall"]
        peaks[label] = sec["peak_kb"] / 1e6
        staged[label] = sum(sec.get(s, 0.0) for s in stages[:5])
        peak_txt = f"{peaks[label]:8.2f}"
        print(f"{label:<22} {sec['wall']:7.2f} {peak_txt} {sec.get('live', 0.0):8.0f} "
              + " ".join(f"{sec.get(s, 0.0):9.2f}" for s in stages))
    print("fit + simulate + light + project + composite: "
          + ", ".join(f"{label} {sec_:.2f} s" for label, sec_ in staged.items()))
    if scaled:
        return 0
    extra = walls["with sheet + previews"] - walls["frames only"]
    print()
    print(f"sheet + previews add {extra:.2f} s = {extra / walls['frames only']:.2f} of the frames-only render "
          "(goal: at most 0.2)")
    print(f"sheet + previews add {peaks['with sheet + previews'] - peaks['frames only']:.3f} GB of peak memory; "
          "the finished 8-bit sheet is 2048 x 2048 RGBA = 0.017 GB (peak: each process's maximum resident set)")
    return 0


FLOW_BLOCK = re.compile(r'\[\[force\]\]\nkind = "convection"\n(?:[a-z_]+ = .*\n)*')
LIFT_BLOCK = """[[force]]
kind = "lift"
accel = 1.2
cooling = 0.4
"""


def flow(work: Path, size: int) -> int:
    """The flow demo (beach bonfire) with its convection flow and with a lift force in its place."""
    import json
    import subprocess

    text = (HERE.parent / "looks" / "beach_bonfire.toml").read_text()
    if not FLOW_BLOCK.search(text):
        raise SystemExit("looks/beach_bonfire.toml no longer holds the convection block this benchmark swaps out")
    work.mkdir(parents=True, exist_ok=True)
    looks = {"with the flow": work / "flow.toml", "lift instead": work / "lift.toml"}
    looks["with the flow"].write_text(text)
    looks["lift instead"].write_text(FLOW_BLOCK.sub(LIFT_BLOCK, text))
    over = [f"image.width={size}", f"image.height={size}"]
    for path in looks.values():
        subprocess.run([sys.executable, "-c", DEMO_CHILD, str(path), str(work / "warm"), "clip.frames=2", *over],
                       check=True, capture_output=True)  # fill the JIT cache
    stages = ["fit", "simulate", "light", "project", "composite", "queue", "write"]
    print(f"beach bonfire, 64 frames of {size} x {size}, sheet and previews; threads: "
          f"{os.environ.get('NUMBA_NUM_THREADS', 'all')}")
    print(f"{'case':<15} {'wall s':>7} " + " ".join(f"{s:>9}" for s in stages))
    walls = {}
    for label, path in looks.items():
        run_ = subprocess.run([sys.executable, "-c", DEMO_CHILD, str(path), str(work / label[:4]), *over],
                              check=True, capture_output=True, text=True)
        sec = json.loads(run_.stdout.strip().splitlines()[-1])
        walls[label] = sec["wall"]
        print(f"{label:<15} {sec['wall']:7.2f} " + " ".join(f"{sec.get(s, 0.0):9.2f}" for s in stages))
    print()
    print(f"the flow demo takes {walls['with the flow'] / walls['lift instead']:.2f}x the time of the same look "
          f"with a lift force instead (goal: at most 2x)")
    return 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--frames", type=int, default=64)
    ap.add_argument("--keep", help="keep the rendered files in this folder")
    ap.add_argument("--demo", action="store_true", help="time the detailed demo chimney instead")
    ap.add_argument("--flow", action="store_true",
                    help="time the flow demo (beach bonfire) against the same look with lift instead of the flow")
    ap.add_argument("--size", type=int, default=512, help="with --flow: image width and height, px")
    ap.add_argument("--rate-scale", type=float, default=1.0,
                    help="with --demo: multiply every source's rate (at most 100,000 puffs/s a source); frames only")
    args = ap.parse_args()
    if args.flow:
        work = Path(args.keep or tempfile.mkdtemp(prefix="splatter-bench-"))
        try:
            return flow(work, args.size)
        finally:
            if not args.keep:
                shutil.rmtree(work, ignore_errors=True)
    if args.demo:
        work = Path(args.keep or tempfile.mkdtemp(prefix="splatter-bench-"))
        try:
            return demo(work, args.rate_scale)
        finally:
            if not args.keep:
                shutil.rmtree(work, ignore_errors=True)

    work = Path(args.keep or tempfile.mkdtemp(prefix="splatter-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    unlit = work / "unlit.toml"
    unlit.write_text(textwrap.dedent(LOOK.format(frames=args.frames)))
    lit = work / "lit.toml"
    lit.write_text(textwrap.dedent(LOOK.format(frames=args.frames)) + textwrap.dedent(LIGHT))

    from splatter.look.load import load_look
    from splatter.sim.driver import plan_simulation, simulate

    look = load_look(unlit)
    plan = plan_simulation(look)
    live = [len(s.size) for s in simulate(look, plan, frames=[0, args.frames // 2])]
    print(f"benchmark look: {args.frames} frames of 256 x 256, {live[0]:,} / {live[1]:,} live puffs (frames 0 / mid)")
    print(f"threads: {os.environ.get('NUMBA_NUM_THREADS', 'all')} (cpu count {os.cpu_count()})")

    run(unlit, work / "warm", ["clip.frames=2"])  # fill the JIT cache
    run(lit, work / "warm", ["clip.frames=2", 'output.maps=["lightdirs"]', "output.sheet={padding=2}"])

    cases = [
        ("unlit", unlit, []),
        ("lit", lit, []),
        ("lit + lightdirs", lit, ['output.frames=["exr"]', 'output.maps=["lightdirs"]']),
    ]
    stages = ["simulate", "fit", "light", "project", "composite", "queue", "write"]
    results = {}
    print()
    print(f"{'case':<16} {'wall s':>7} " + " ".join(f"{s:>9}" for s in stages))
    for label, path, over in cases:
        wall, res = run(path, work / label.replace(" ", ""), over)
        results[label] = wall
        sec = res.seconds
        print(f"{label:<16} {wall:7.2f} " + " ".join(f"{sec.get(s, 0.0):9.2f}" for s in stages))
    print()
    print(f"lit / unlit:             {results['lit'] / results['unlit']:.2f}x  (goal: at most 2x)")
    print(f"lightdirs / unlit:       {results['lit + lightdirs'] / results['unlit']:.2f}x")
    print("write runs on a background thread and overlaps compositing; queue is the time the")
    print("render loop waited to hand a frame over.")
    if not args.keep:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())

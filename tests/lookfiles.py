"""Small look files for the end-to-end tests (a harbour scene, shrunk to test size)."""

import textwrap

LONE_PUFF = """
name = "lone_puff"
[clip]
frames = 3
fps = 10
warmup = 0
[image]
width = 64
height = 64
[camera]
view_width = 4.0
[[source]]
rate = 0
bursts = [{ time = 0, count = 1 }]
speed = 0
spread = 0
life = 100
size = 0.25
opacity = 0.8
color = [0.5, 0.5, 0.5]
[output]
frames = ["exr"]
exr_type = "float"
"""

SMALL_PLUME = """
name = "small_plume"
seed = 4
[clip]
frames = 12
fps = 12
loop = "exact"
[image]
width = 48
height = 48
[camera]
fit = true
[[source]]
shape = "disc"
radius = 0.1
rate = 60
speed = [0.6, 1.0]
life = [0.8, 1.0]
size = [0.05, 0.08]
grow = [[0, 1], [1, 2.5]]
aspect = [0.6, 1.0]
[[force]]
kind = "wind"
velocity = [0.6, 0, 0]
gust = 0.4
gust_period = 0.5
[[force]]
kind = "lift"
accel = 1.0
cooling = 1.0
[[force]]
kind = "swirl"
strength = 0.3
scale = 0.5
octaves = 2
evolve = 0.5
[[obstacle]]
kind = "plane"
point = [0, -0.05, 0]
normal = [0, 1, 0]
bounce = 0.4
friction = 0.3
[output]
frames = ["png", "exr"]
exr_type = "float"
"""

LIT_BALL = """
name = "lit_ball"
seed = 8
[clip]
frames = 1
fps = 10
warmup = 0
[image]
width = 64
height = 64
[camera]
view_width = 2.4
[[source]]
shape = "sphere"
radius = 0.6
rate = 0
bursts = [{ time = 0, count = 600 }]
speed = 0
life = 100
size = 0.08
opacity = 0.3
color = [0.8, 0.8, 0.8]
[shading]
ambient = 0.1
[shading.light]
direction = [1, 0, 0]
intensity = 1.0
shadow = 1.0
[output]
frames = ["exr"]
exr_type = "float"
"""


def write_look(folder, text, name="look.toml", extra=""):
    """Write a look file into ``folder`` and return its path."""
    path = folder / name
    path.write_text(textwrap.dedent(text) + textwrap.dedent(extra))
    return path


def digests(folder, manifest=False):
    """sha256 of every file in ``folder``, by name; the render manifest only when ``manifest`` is true.

    The manifest lists the frames rendered, so a partial render's differs
    from a full one's by design; the images do not.
    """
    import hashlib
    from pathlib import Path

    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(Path(folder).iterdir())
            if manifest or not p.name.endswith(".render.json")}


def quiet_render(look, out, **kw):
    """``render`` into ``out`` without a progress bar."""
    from splatter.render import render

    return render(look, out_dir=str(out), progress=False, **kw)


def thread_counts():
    """Thread counts a determinism test compares: 1, the machine's cores, and
    more threads than cores (tests/conftest.py starts numba with them).

    Skips, saying why, when numba has only one thread (``NUMBA_NUM_THREADS=1``
    set for the run): there is then nothing to compare.
    """
    import os

    import numba
    import pytest

    most = numba.config.NUMBA_NUM_THREADS
    counts = sorted({1, min(os.cpu_count() or 1, most), most})
    if len(counts) < 2:
        pytest.skip("numba has one thread (NUMBA_NUM_THREADS=1): no second thread count to compare")
    return counts


def on_each_thread_count(fn):
    """``[fn() for each of thread_counts()]``, numba's thread count restored after."""
    import numba

    old = numba.get_num_threads()
    try:
        out = []
        for n in thread_counts():
            numba.set_num_threads(n)
            out.append(fn())
        return out
    finally:
        numba.set_num_threads(old)


def thread_digests(look, folder):
    """Digests of the look rendered on each of ``thread_counts()`` numba threads, in that order."""
    runs = iter(range(100))
    return on_each_thread_count(
        lambda: digests(quiet_render(look, folder / f"threads{next(runs)}").out_dir))

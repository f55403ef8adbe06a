"""Random legal looks, many at the extremes of their keys: never a traceback, memory bounded.

A few hundred looks (fixed seed, tiny images, few frames) go through
``splatter check`` in this process; a smaller number, those the check
estimates at a few seconds, are rendered for one frame. Every run must end
with exit 0 or 2 (refused, with a message), never an internal error, and
the memory Python allocates stays under a bound.
"""

import random
import tracemalloc

import pytest

from splatter.cli import main

N_CHECKS = 200
N_RENDERS = 12
CHECK_PEAK = 400 * 2**20
"""Bytes Python and numpy may allocate for one check (the sample holds a few hundred puffs)."""
RENDER_PEAK = 1024 * 2**20
AUTO, NEVER = '"auto"', '"never"'


def _pick(rng, *values):
    return rng.choice(values)


def _vec(rng, big=1e3):
    return [_pick(rng, 0.0, 1.0, -big, big, rng.uniform(-2, 2)) for _ in range(3)]


def _nonzero(rng):
    v = _vec(rng)
    return v if any(v) else [0.0, 1.0, 0.0]


def _range(rng, lo, hi, typical):
    a = _pick(rng, lo, hi, typical, rng.uniform(lo, min(hi, 10 * typical)))
    b = _pick(rng, a, hi, a * 1.5 if a * 1.5 <= hi else a)
    return [a, max(a, b)]


def random_look(rng: random.Random, folder) -> str:
    """A legal look file (see docs/look-reference.md for every key and its range) with keys often at an extreme."""
    lines = ['name = "fuzz"', f"seed = {rng.randrange(2**63)}"]
    out_dir = folder / "out"
    lines += ["[clip]", f"frames = {rng.randint(1, 3)}", f"fps = {_pick(rng, 1e-3, 240.0, 30.0, 7.5)}",
              f"substeps = {_pick(rng, 1, 2, 64)}",
              f'integrator = "{_pick(rng, "euler", "symplectic", "midpoint")}"',
              f'loop = "{_pick(rng, "none", "exact", "crossfade")}"', f"crossfade = {_pick(rng, 0.01, 0.5, 0.25)}",
              f"warmup = {_pick(rng, AUTO, 0, 0.5, 1e3)}"]
    lines += ["[image]", f"width = {_pick(rng, 8, 13, 32)}", f"height = {_pick(rng, 8, 21, 32)}"]
    lines += ["[camera]", f'projection = "{_pick(rng, "orthographic", "perspective")}"',
              f"eye = {_pick(rng, [0.0, 0.0, 10.0], [3.0, 2.0, 5.0], _vec(rng))}",
              f"view_width = {_pick(rng, 1e-6, 1e6, 4.0)}", f"fov = {_pick(rng, 1e-3, 170.0, 40.0)}",
              f"fit = {_pick(rng, 'true', 'false')}", f"margin = {_pick(rng, 0.0, 0.45, 0.05)}",
              f"fit_alpha = {_pick(rng, 1e-6, 0.5, 1 / 255)}"]
    for _ in range(rng.randint(1, 2)):
        life = _range(rng, 1e-3, 1e4, 2.0)
        size = _range(rng, 1e-4, 1e4, 0.2)
        burst = _pick(rng, 0, 0, 1, 1000, 1_000_000)
        # A look may hold 2,000,000 live puffs (rate x longest life + bursts) over all its sources.
        rate = min(_pick(rng, 0.0 if burst else 1e-3, 1e5, 50.0, 3.0), (1e6 - burst) / life[1])
        start = _pick(rng, 0.0, 0.05)
        lines += ["[[source]]", f'shape = "{_pick(rng, "point", "sphere", "box", "disc")}"',
                  f"rate = {rate}", f"life = {life}", f"size = {size}",
                  f"speed = {_range(rng, 0.0, 1e3, 1.0)}", f"spread = {_pick(rng, 0.0, 180.0, 10.0)}",
                  f"direction = {_nonzero(rng)}", f"normal = {_nonzero(rng)}",
                  f"grow = {_pick(rng, [[0, 1]], [[0, 1], [1, 1e4]], [[0, 0], [1, 3]])}",
                  f"opacity = {_pick(rng, 1.0, 0.0, [[0, 0], [0.1, 0.5], [1, 0]])}",
                  f"stretch = {_pick(rng, 0.0, 100.0)}", f"density = {_pick(rng, 0.0, 1.0, 1e4)}",
                  f"aspect = {_range(rng, 1e-6, 1.0, 0.5)}", f"follow = {_pick(rng, 0.0, 1.0)}",
                  f"elongation = {_pick(rng, 1.5, 1000.0, 10.0)}", f"start = {start}",
                  f"stop = {_pick(rng, NEVER, start + 0.02)}"]
        if burst:
            lines.append(f"bursts = [{{ time = {_pick(rng, 0.0, 0.03)}, count = {burst} }}]")
    for _ in range(rng.randint(0, 3)):
        kind = _pick(rng, "gravity", "wind", "drag", "lift", "swirl", "vortex")
        lines += ["[[force]]", f'kind = "{kind}"']
        lines += {
            "gravity": [f"accel = {_vec(rng)}"],
            "wind": [f"velocity = {_vec(rng)}", f"gust = {_pick(rng, 0.0, 1.0)}",
                     f"gust_period = {_pick(rng, 1e-3, 1e4, 2.0)}", f"grip = {_pick(rng, 0.0, 1e3, 1.0)}"],
            "drag": [f"rate = {_pick(rng, 0.0, 1e3, 0.5)}"],
            "lift": [f"accel = {_pick(rng, -1e3, 1e3, 2.0)}", f"cooling = {_pick(rng, 0.0, 1e3)}"],
            "swirl": [f"strength = {_pick(rng, 0.0, 1e3, 0.5)}", f"scale = {_pick(rng, 1e-3, 1e6, 1.0)}",
                      f"octaves = {_pick(rng, 1, 6, AUTO)}", f"evolve = {_pick(rng, 1e-3, 1e6, 2.0)}"],
            "vortex": [f"strength = {_pick(rng, -1e3, 1e3, 1.0)}", f"radius = {_pick(rng, 1e-3, 1e6, 0.5)}"],
        }[kind]
    if rng.random() < 0.3:
        lines += ["[[obstacle]]", f'kind = "{_pick(rng, "plane", "sphere")}"', f"bounce = {_pick(rng, 0.0, 1.0)}",
                  f"kill = {_pick(rng, 'true', 'false')}"]
    lines += ["[shading]", f'blend = "{_pick(rng, "over", "add", "absorb")}"',
              f"exposure = {_pick(rng, -32.0, 0.0, 32.0)}"]
    if rng.random() < 0.3:
        lines += ["[shading.light]", f"direction = {_nonzero(rng)}", f"shadow = {_pick(rng, 0.0, 1.0)}"]
    maps = rng.sample(["motion", "normal", "depth", "lightdirs"], rng.randint(0, 2))
    preview = rng.sample(["gif", "contact"], rng.randint(0, 1))
    lines += ["[output]", f'dir = "{out_dir}"', f"frames = {_pick(rng, ['png'], ['exr'], ['png', 'exr'])}", f"maps = {maps}",
              f"preview = {preview}", f"png_bits = {_pick(rng, 8, 16)}"]
    if rng.random() < 0.4:
        # Padding lies inside each cell and a power-of-two sheet needs power-of-two columns
        # (docs/look-reference.md), so the legal extremes for 8-32 px frames are small.
        pow2 = _pick(rng, "true", "false")
        lines.append(f"sheet = {{ padding = {_pick(rng, 0, 1, 3)}, pow2 = {pow2}, "
                     f"columns = {_pick(rng, 1, 2, 4) if pow2 == 'true' else _pick(rng, 1, 2, 3)} }}")
    return "\n".join(lines) + "\n"


def _run(argv):
    tracemalloc.start()
    try:
        code = main(argv)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    return code, peak


def test_random_legal_looks_check_and_render_without_a_traceback(tmp_path, capsys):
    rng = random.Random(20261203)
    renders = 0
    for i in range(N_CHECKS):
        folder = tmp_path / f"look{i:03d}"
        folder.mkdir()
        path = folder / "fuzz.toml"
        path.write_text(random_look(rng, folder))
        code, peak = _run(["check", str(path)])
        captured = capsys.readouterr()
        assert code in (0, 2), f"{path}:\n{path.read_text()}\n{captured.err}"
        assert code == 0 or "error:" in captured.err
        assert peak < CHECK_PEAK, f"{path}: check allocated {peak / 2**20:.0f} MiB"
        assert not (folder / "out").exists()
        if code == 0 and renders < N_RENDERS and _estimated_seconds(captured.out) < 3.0:
            renders += 1
            # A legal look may hold millions of puffs: the bound is the larger of a fixed one and
            # check's own estimate, which must not promise less than the render takes.
            bound = max(RENDER_PEAK, _estimated_bytes(captured.out))
            code, peak = _run(["render", str(path), "--frames", "0", "--quiet"])
            captured = capsys.readouterr()
            assert code in (0, 2), f"{path}:\n{path.read_text()}\n{captured.err}"
            assert peak < bound, f"{path}: render allocated {peak / 2**20:.0f} MiB, bound {bound / 2**20:.0f} MiB"
    assert renders == N_RENDERS


def _estimated_bytes(text):
    line = next(ln for ln in text.splitlines() if ln.startswith("memory"))
    value, unit = line.split("about ")[1].split()[:2]
    return float(value) * {"B": 1, "KiB": 2**10, "MiB": 2**20, "GiB": 2**30, "TiB": 2**40}[unit]


def _estimated_seconds(text):
    line = next(ln for ln in text.splitlines() if ln.startswith("time"))
    value, unit = line.split("roughly ")[1].split()[:2]
    return float(value) * {"s": 1, "min": 60, "h": 3600}[unit]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_the_generator_writes_legal_looks(tmp_path, seed):
    # The fuzz test is only as good as its looks: every one must load (exit 2 then means refused, not invalid).
    from splatter.look.load import load_look

    rng = random.Random(seed)
    for i in range(30):
        path = tmp_path / f"l{i}.toml"
        path.write_text(random_look(rng, tmp_path))
        load_look(path)

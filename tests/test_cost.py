"""What a render costs: estimates, refusals, a fast check that is a dry run, and looks at every extreme.

The cases are those of the issue on unbounded cost: each one a look at an
extreme of a key, run through the real command line.
"""

import math
import subprocess
import sys

import numpy as np
import pytest
from lookfiles import LONE_PUFF, SMALL_PLUME, write_look

from splatter.check import check_report
from splatter.cli import main
from splatter.cost import estimate_cost, format_bytes, parse_size, refuse_if_too_big
from splatter.core.errors import LookError
from splatter.deliver.sink import check_outputs
from splatter.look.load import load_look
from splatter.render import first_plan, pixel_size, plan_and_camera

_MEASURE = (
    "import resource, sys\n"
    "from splatter.cli import main\n"
    "code = main(sys.argv[1:])\n"
    "print('maxrss', resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr)\n"
    "sys.exit(code)\n"
)


def run_measured(*args):
    """The command line in a child process: (exit code, stdout, stderr, peak resident MiB)."""
    proc = subprocess.run([sys.executable, "-c", _MEASURE, *map(str, args)], capture_output=True, text=True)
    peak = [int(line.split()[1]) for line in proc.stderr.splitlines() if line.startswith("maxrss ")]
    return proc.returncode, proc.stdout, proc.stderr, (peak[0] / 1024 if peak else math.inf)


# ---------------------------------------------------------------------------------------------------------------
# Item 1: cost bounded by the image.

# A footprint far larger than the frame (the "size = 10000" and
# "view_width = 1e-6" once asked for 697 TiB and 34 GiB). The peak resident
# memory of the whole process stays under this, Python and numba included.
PEAK_MIB = 1500


@pytest.mark.parametrize("override", ["source.0.size=10000", "camera.view_width=1e-6", "source.0.size=1000",
                                      "source.0.aspect=1e-6"])
def test_a_footprint_far_larger_than_the_frame_renders_within_bounded_memory(tmp_path, override):
    look = write_look(tmp_path, LONE_PUFF)
    out = tmp_path / "o"
    # The last: a needle 1e4 units long and 1e-2 wide, whose float32 footprint once lost its positive determinant.
    extra = ["--set", "source.0.size=10000"] if "aspect" in override else []
    code, _, stderr, peak = run_measured("render", look, "--out", out, "--quiet", "--set", override, *extra)
    assert code == 0 and "Traceback" not in stderr, stderr
    assert peak < PEAK_MIB, f"{peak:.0f} MiB"
    assert sorted(p.name for p in out.iterdir() if p.suffix == ".exr") == [f"lone_puff.{f:04d}.exr" for f in range(3)]


HUGE = """
name = "huge"
[image]
width = 8192
height = 8192
[output]
frames = ["png", "exr"]
maps = ["motion", "normal", "depth", "lightdirs"]
preview = ["gif", "mp4", "contact"]
sheet = { format = "exr", cell = 1024 }
"""


def test_a_render_that_cannot_fit_is_refused_before_anything_is_written(tmp_path):
    # 8192 x 8192 with every map, sheet and preview: the motion and depth sheets alone
    # keep 64 frames x 4 float32 channels (with alpha) x 8192^2 px (64 GiB) until the end.
    look = write_look(tmp_path, HUGE)
    out = tmp_path / "o"
    code, _, stderr, _ = run_measured("render", look, "--out", out, "--max-memory", "64G")
    assert code == 2 and "Traceback" not in stderr
    assert "output.sheet" in stderr and "--max-memory" in stderr and "map channels" in stderr
    assert not out.exists()


def test_the_limit_is_an_option_and_check_says_what_render_would_do(tmp_path, capsys):
    look = write_look(tmp_path, HUGE)
    assert main(["check", str(look), "--max-memory", "64G"]) == 2
    captured = capsys.readouterr()
    assert "memory    about" in captured.out and "refused" in captured.out and "output.sheet" in captured.err
    assert main(["check", str(look), "--max-memory", "4T"]) == 0
    assert "refused" not in capsys.readouterr().out
    assert main(["check", str(look), "--max-memory", "lots"]) == 2
    assert "--max-memory" in capsys.readouterr().err


def test_the_estimate_counts_each_part_from_its_sizes():
    # Exact parts of the model (cost.py): a 512 x 256 frame with motion and depth
    # has 3 + 2 + 1 + 1 = 7 float32 channels, 7 frames in flight; an 8-bit PNG
    # sheet is 4 bytes a texel.
    # Motion and depth sheets keep every frame's map channels and alpha (2 + 1 + 1)
    # as float32 for their clip-wide ranges; the 8-bit map sheets cost their codes,
    # motion RGB and depth grey (3 + 1 bytes a texel) at most.
    look = load_look_text(SMALL_PLUME.replace("width = 48", "width = 512").replace("height = 48", "height = 256")
                          + 'maps = ["motion", "depth"]\nsheet = { columns = 4 }\n')
    plan = first_plan(look)
    est = estimate_cost(look, plan, 0.01, 12, limit=2**40)
    assert est.parts["frames"] == 512 * 256 * 7 * 4 * 7
    layout = check_outputs(look, 12)
    assert (layout.columns, layout.rows) == (4, 3)
    texels = layout.width * layout.height
    assert est.parts["sheets"] == texels * 4 + 512 * 256 * 4 * 4 * 12 + texels * 4
    assert est.puffs == pytest.approx(plan.steady_state_puffs)
    with pytest.raises(LookError, match="--max-memory"):
        refuse_if_too_big(look, estimate_cost(look, plan, 0.01, 12, limit=2**20))


def test_an_exact_loops_held_frames_are_counted_only_when_the_limit_leaves_room_for_them():
    # The twin driver (no warm-up) holds about 128 bytes a live puff a frame; the
    # estimate counts them, and lets them be held, only within HOLD_SHARE of the
    # headroom the other parts leave (else the warm-up driver runs, holding none).
    from splatter.cost import BYTES_PER_PUFF, HOLD_SHARE
    from splatter.sim.driver import TWIN_MEMORY, twin_hold_bytes

    look = load_look_text(SMALL_PLUME.replace("rate = 60", "rate = 100000"))  # an exact loop
    plan = first_plan(look)
    need = twin_hold_bytes(plan, 64)
    assert need == pytest.approx(128 * plan.steady_state_puffs * 64) and need > TWIN_MEMORY
    roomy = estimate_cost(look, plan, 0.01, 64, limit=2**40)
    others = roomy.peak - need
    assert roomy.hold == pytest.approx(HOLD_SHARE * (2**40 - others))
    assert roomy.parts["simulation"] == pytest.approx(roomy.puffs * BYTES_PER_PUFF + need)
    tight = estimate_cost(look, plan, 0.01, 64, limit=int(others + 1.5 * need))  # half the headroom < need
    assert tight.hold == pytest.approx(max(TWIN_MEMORY, 0.75 * need))
    assert tight.parts["simulation"] == pytest.approx(tight.puffs * BYTES_PER_PUFF)
    assert tight.fits
    # Little room: the hold is the room, not the driver's own 256 MB, so a resumed render
    # (fewer frames, perhaps few enough for the twins) stays within the limit too.
    small = estimate_cost(look, plan, 0.01, 64, limit=int(others + 100 * 2**20))
    assert small.hold == pytest.approx(100 * 2**20) and small.hold < TWIN_MEMORY
    assert small.parts["simulation"] == pytest.approx(small.puffs * BYTES_PER_PUFF) and small.fits
    assert estimate_cost(look, plan, 0.01, 64, limit=int(others) - 1).hold == 0.0


def test_render_lets_the_simulation_hold_what_its_limit_leaves(tmp_path, monkeypatch):
    import splatter.render as render_module

    seen = []
    real = render_module.simulate
    monkeypatch.setattr(render_module, "simulate", lambda *a, **k: (seen.append(k.get("hold")) if "sample" not in k else None,
                                                                real(*a, **k))[1])  # the frames, not the fit
    look = load_look_text(SMALL_PLUME, tmp_path)  # an exact loop
    for limit in (2**34, 2**29):
        seen.clear()
        render_module.render(look, out_dir=str(tmp_path / str(limit)), progress=False, max_memory=limit)
        plan, camera = plan_and_camera(look)
        est = estimate_cost(look, plan, pixel_size(camera), look.clip.frames, limit=limit)
        assert seen and all(h == est.hold for h in seen)


def load_look_text(text, tmp=None):
    import pathlib
    import tempfile

    folder = pathlib.Path(tmp or tempfile.mkdtemp())
    return load_look(write_look(folder, text))


def test_sizes_parse_and_print():
    assert parse_size("24G") == 24 * 2**30 and parse_size("512 MiB") == 512 * 2**20 and parse_size("100") == 100
    assert format_bytes(1.5 * 2**30) == "1.5 GiB"
    with pytest.raises(ValueError):
        parse_size("-3G")


# ---------------------------------------------------------------------------------------------------------------
# Item 2: a fast check that is a dry run.

def test_check_takes_renders_options_and_lists_what_that_render_would_write(tmp_path, capsys):
    look = write_look(tmp_path, SMALL_PLUME)
    out = tmp_path / "elsewhere"
    args = ["--frames", "2:5", "--out", str(out), "--seed", "3", "--set", "clip.fps=24", "--threads", "1"]
    assert main(["check", str(look), *args]) == 0
    text = capsys.readouterr().out
    assert f"writes    7 files to {out}/" in text  # frames 2, 3, 4 as PNG and EXR, and the manifest
    assert "small_plume.0002.png" in text and "small_plume.0005.png" not in text
    assert "(seed 3)" in text and "24 fps" in text
    assert not out.exists()


def test_sheet_options_that_cannot_hold_the_frames_fail_before_the_first_frame(tmp_path, capsys):
    # 16 px cells with 8 px of padding a side leave no room for the frame.
    look = write_look(tmp_path, SMALL_PLUME.replace("width = 48", "width = 16").replace("height = 48", "height = 16"),
                      extra="sheet = { cell = 16, padding = 8 }\n")
    assert main(["check", str(look)]) == 2
    assert "output.sheet" in capsys.readouterr().err
    out = tmp_path / "o"
    code, _, stderr, _ = run_measured("render", look, "--out", out)
    assert code == 2 and "output.sheet" in stderr and "Traceback" not in stderr
    assert not out.exists()


def test_the_sampled_check_agrees_with_the_full_one(tmp_path):
    # The sample frames on a subset of the puffs: its framing is close to the
    # full simulation's, and so is everything printed from the look alone.
    look = load_look(write_look(tmp_path, SMALL_PLUME))
    fast, est_fast = check_report(look)
    full, est_full = check_report(look, full=True)
    assert est_fast.parts["simulation"] == est_full.parts["simulation"]
    _, cam = plan_and_camera(look)
    assert "fill      smoke above 5% alpha" in fast and "fill      smoke above 5% alpha" in full
    assert [ln for ln in fast.splitlines() if ln.startswith("writes")] == \
        [ln for ln in full.splitlines() if ln.startswith("writes")]
    assert pixel_size(cam) > 0


def test_check_measures_the_share_of_the_frame_the_smoke_fills(tmp_path):
    # One still puff of peak opacity 0.8 and sigma 0.25 in a 4-unit view of 64 px:
    # alone, its alpha 0.8 exp(-r^2 / 2 sigma^2) reaches 5 % out to
    # r = sigma sqrt(2 ln 16) = 0.589, so the smoke spans 2r / 4 = 29.4 % of the
    # frame each way (a Gaussian footprint; the check counts the pixels whose
    # centres reach 5 %, so within a pixel or two: 2/64).
    look = load_look(write_look(tmp_path, LONE_PUFF))
    text, _ = check_report(look)
    line = next(ln for ln in text.splitlines() if ln.startswith("fill"))
    share = 2 * 0.25 * math.sqrt(2 * math.log(0.8 / 0.05)) / 4.0
    shown = float(line.split("spans ")[1].split("%")[0]) / 100
    assert shown == pytest.approx(share, abs=2 / 64)


# ---------------------------------------------------------------------------------------------------------------
# Issue 13 item 6: framing that uses the texture.

# The fit's rule and its tests are in tests/test_fit.py.


# ---------------------------------------------------------------------------------------------------------------
# Item 7: small slips.

def test_threads_above_the_cores_are_clamped_with_a_note(tmp_path, capsys):
    look = write_look(tmp_path, LONE_PUFF)
    assert main(["check", str(look), "--threads", "4096"]) == 0
    assert "--threads 4096" in capsys.readouterr().err
    assert main(["check", str(look), "--threads", "0"]) == 2


def test_a_seed_out_of_range_is_blamed_on_seed_and_an_unknown_set_key_on_set(tmp_path, capsys):
    look = write_look(tmp_path, LONE_PUFF)
    assert main(["check", str(look), "--seed", str(2**70)]) == 2
    err = capsys.readouterr().err
    assert "--seed" in err and "--set" not in err
    assert main(["check", str(look), "--set", "foo.bar=3"]) == 2
    err = capsys.readouterr().err
    assert "error: --set: foo" in err and str(look) not in err


def test_no_progress_bar_when_stderr_is_not_a_terminal(tmp_path):
    look = write_look(tmp_path, SMALL_PLUME)
    code, _, stderr, _ = run_measured("render", look, "--out", tmp_path / "o")
    assert code == 0 and "frame/s" not in stderr and "\r" not in stderr
    assert "rendered 12 frames" in stderr


def test_kernels_compiled_late_are_announced(monkeypatch, capsys):
    # prepare_kernels says so when compiling takes longer than COMPILE_NOTICE; stand a slow compile in.
    import time

    import splatter.render as render_module

    look = load_look_text(LONE_PUFF)
    monkeypatch.setattr(render_module, "COMPILE_NOTICE", 0.05)
    real = render_module.composite_features
    monkeypatch.setattr(render_module, "composite_features", lambda *a, **k: (time.sleep(0.3), real(*a, **k))[1])
    render_module.prepare_kernels(look)
    assert "compiling kernels" in capsys.readouterr().err
    monkeypatch.setattr(render_module, "composite_features", real)
    monkeypatch.setattr(render_module, "COMPILE_NOTICE", 60.0)
    render_module.prepare_kernels(look)  # done well within the notice: no note
    assert "compiling" not in capsys.readouterr().err


# ---------------------------------------------------------------------------------------------------------------
# Item 3 at the look level, and the vortex warning.

def test_a_stiff_vortex_is_warned_about_and_a_mild_one_is_not(tmp_path):
    # In a Rankine core the air turns at w = strength / radius; explicit Euler
    # multiplies the distance from the axis by sqrt(1 + (w h)^2) a step
    # (Hairer & Wanner, Solving ODEs II, IV.2 [from memory]).
    base = SMALL_PLUME + '\n[[force]]\nkind = "vortex"\nradius = 0.5\n'
    mild, _ = check_report(load_look(write_look(tmp_path, base + "strength = 0.2\n", name="mild.toml")))
    stiff, _ = check_report(load_look(write_look(tmp_path, base + "strength = 1000\n", name="stiff.toml")))
    assert "spiral" not in mild
    assert "force[3]: the vortex core turns" in stiff


def test_maximum_drag_and_grip_keep_a_render_finite(tmp_path):
    text = SMALL_PLUME + '\n[[force]]\nkind = "drag"\nrate = 1000\n'
    text = text.replace("gust_period = 0.5", "gust_period = 0.5\ngrip = 1000")
    look = load_look(write_look(tmp_path, text))
    from splatter.sim.driver import simulate

    plan, _ = plan_and_camera(look)
    for state in simulate(look, plan, frames=range(12)):
        # Wind of 0.6 (gusting by 40 %) and lift of 1: no puff can outrun about 2 units a second.
        assert np.all(np.isfinite(state.vel)) and np.abs(state.vel).max() < 20.0


def test_python_callers_and_batch_workers_are_refused_too(tmp_path):
    # The refusal is the render's own, not the command line's: splatter.render,
    # render_frames and a vary worker (which renders through splatter.render)
    # refuse the same look with a LookError naming the limit as Python spells it.
    from splatter.batch.worker import render_variation
    from splatter.render import render, render_frames

    look = load_look(write_look(tmp_path, HUGE))
    out = tmp_path / "o"
    with pytest.raises(LookError, match='max_memory="[0-9]+G"'):
        render(look, out_dir=str(out), progress=False, max_memory="64G")
    with pytest.raises(LookError, match='max_memory="'):  # one 8192 x 8192 frame with every map
        next(render_frames(look, frames=[0], max_memory=2**30))
    assert not out.exists()
    done = render_variation({"look": look.path, "sets": [], "folder": str(out), "threads": None, "name": "huge"})
    assert done["status"] == "failed" and "memory" in done["message"] and done["files"] == []
    assert not out.exists()


def test_vary_refuses_a_variation_too_big_for_its_worker_before_anything_is_written(tmp_path):
    # Every variation is checked before the first renders (docs/batches.md):
    # one estimated past its worker's share of memory is bad input, exit 2.
    from splatter.batch.run import vary

    look = write_look(tmp_path, HUGE)
    out = tmp_path / "batch"
    for dry_run in (True, False):
        with pytest.raises(LookError, match=r"variation seed2[^:]*: .*output\.sheet.*fewer --jobs"):
            vary(str(look), seeds="2:4", out=str(out), jobs=1, dry_run=dry_run, progress=False)
        assert not out.exists()


def test_the_compositing_estimate_counts_the_tiles_the_compositor_bins_a_splat_into():
    # The (tile, splat) pairs are what the compositor's binning makes
    # (splatter.raster._kernels._tile_boxes, the tiles each footprint touches):
    # the estimate's tiles per splat must never fall below the most a splat of
    # the estimated sigma really touches, and should not be far above it, or
    # safe looks are refused.
    from splatter.raster import _kernels

    sigma = 20.0
    look = load_look_text(SMALL_PLUME.replace("width = 48", "width = 2048").replace("height = 48", "height = 512")
                          + 'sheet = false\n')
    plan = first_plan(look)
    est = estimate_cost(look, plan, 0.01, 12, limit=2**40, sigma_px=sigma)
    n = est.puffs
    tables = min(64 * 2**20, n * 8.0 * min(3.0 * sigma + 10.0, 2048.0))
    tiles_estimated = (est.parts["compositing"] - tables) / (16.0 * n)
    # Splats of that sigma, opaque, centred on every 3 px of the frame.
    ys, xs = np.mgrid[1.5:512:3.0, 1.5:2048:3.0]
    means = np.stack([xs.ravel(), ys.ravel()], axis=1).astype(np.float32)
    covs = np.tile(np.eye(2, dtype=np.float32) * sigma**2, (len(means), 1, 1))
    boxes = np.empty((len(means), 4), np.int32)
    _kernels._tile_boxes(means, covs, np.full(len(means), 0.9, np.float32), 512, 2048, boxes)
    tiles_real = ((boxes[:, 1] - boxes[:, 0] + 1) * (boxes[:, 3] - boxes[:, 2] + 1)).max()
    assert tiles_real <= tiles_estimated <= 1.6 * tiles_real, (tiles_real, tiles_estimated)

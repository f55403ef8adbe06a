"""Batches of variations: `splatter vary` and splatter.vary.

Every variation must be the very file bytes `splatter render` writes for the
same seed and overrides; resume must skip only what finished unchanged; a
failing variation must fail alone; bad input must stop everything before
anything is written; the board must show one labelled cell per variation.
"""

import hashlib
import json
import os
import textwrap
from pathlib import Path

import numpy as np
import pytest
from lookfiles import write_look
from PIL import Image

import splatter
from splatter.cli import main

TAKE = """
name = "chimney_take"
[clip]
frames = 4
fps = 12
[image]
width = 32
height = 32
[camera]
fit = true
[[source]]
rate = 40
life = [0.6, 0.9]
size = [0.06, 0.1]
speed = [0.6, 1.0]
[[force]]
kind = "wind"
velocity = [0.4, 0, 0]
[output]
frames = ["png", "exr"]
exr_type = "half"
sheet = { columns = 2 }
"""


def files_of(folder):
    """sha256 of every file under ``folder``, by path relative to it, but the render manifest
    (``*.render.json`` names its own folder and look path, so it differs between folders by design)."""
    folder = Path(folder)
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file() and not p.name.endswith(".render.json")}


def vary_cli(*args):
    return main(["vary", *map(str, args), "--quiet"])


@pytest.fixture
def look(tmp_path):
    return write_look(tmp_path, TAKE, name="chimney_take.toml")


def test_seeds_by_sweep_are_the_bytes_of_single_renders(tmp_path, look):
    out = tmp_path / "takes"
    code = vary_cli(look, "--seeds", "1:3", "--sweep", "source.0.rate=20,60", "--out", out, "--jobs", "2")
    assert code == 0
    manifest = json.loads((out / "vary.json").read_text())
    names = [v["folder"] for v in manifest["variations"]]
    assert names == ["seed1_source.0.rate-20", "seed1_source.0.rate-60", "seed2_source.0.rate-20",
                     "seed2_source.0.rate-60"]
    for v in manifest["variations"]:
        assert v["status"] == "done" and v["message"] is None and v["seconds"] > 0
        single = tmp_path / "single" / v["folder"]
        rate = v["overrides"]["source.0.rate"]
        assert main(["render", str(look), "--seed", str(v["seed"]), "--set", f"source.0.rate={rate}",
                     "--out", str(single), "--quiet"]) == 0
        expected = files_of(single)
        assert len(expected) == 4 + 4 + 2  # png and exr frames, sheet and its json
        assert files_of(out / v["folder"]) == expected
        assert sorted(f["path"] for f in v["files"]) == sorted(f"{v['folder']}/{k}" for k in
                                                               [*expected, "chimney_take.render.json"])
    # Different takes really differ (the seeds and rates reached the renders).
    frames = {n: files_of(out / n)["chimney_take.0002.png"] for n in names}
    assert len(set(frames.values())) == 4


def test_resume_skips_finished_and_redoes_deleted_or_changed(tmp_path, look):
    out = tmp_path / "takes"
    args = [look, "--seeds", "1:3", "--out", out, "--jobs", "1"]
    assert vary_cli(*args) == 0
    first = files_of(out)
    stamp = {p: os.stat(out / p).st_mtime_ns for p in first if p.startswith("seed")}

    m = splatter.vary(look, seeds="1:3", out=str(out), jobs=1, progress=False)
    assert (m["summary"]["rendered"], m["summary"]["reused"]) == (0, 2)
    assert {p: os.stat(out / p).st_mtime_ns for p in stamp} == stamp  # nothing rewritten

    (out / "seed2" / "chimney_take.0003.exr").unlink()
    m = splatter.vary(look, seeds="1:3", out=str(out), jobs=1, progress=False)
    assert (m["summary"]["rendered"], m["summary"]["reused"]) == (1, 1)
    assert [v.get("reused", False) for v in m["variations"]] == [True, False]
    assert files_of(out / "seed2") == {k[len("seed2/"):]: h for k, h in first.items() if k.startswith("seed2/")}

    # A changed look is a new variation, not a skip (the folder name does not change, the digest does).
    look.write_text(TAKE.replace("rate = 40", "rate = 45"))
    m = splatter.vary(look, seeds="1:3", out=str(out), jobs=1, progress=False)
    assert (m["summary"]["rendered"], m["summary"]["reused"]) == (2, 0)
    assert files_of(out / "seed1")["chimney_take.0002.exr"] != first["seed1/chimney_take.0002.exr"]


def test_a_failing_variation_fails_alone(tmp_path, look, capsys):
    out = tmp_path / "takes"
    out.mkdir()
    (out / "seed2").write_text("a file where the variation's folder goes")
    code = main(["vary", str(look), "--seeds", "1:4", "--out", str(out), "--jobs", "1"])
    err = capsys.readouterr().err
    assert code == 1
    manifest = json.loads((out / "vary.json").read_text())
    status = {v["folder"]: (v["status"], v["message"]) for v in manifest["variations"]}
    assert status["seed1"] == ("done", None) and status["seed3"] == ("done", None)
    assert status["seed2"][0] == "failed" and "seed2" in status["seed2"][1] and "which is a file" in status["seed2"][1]
    assert "1 failed" in err and f"failed: seed2: {status['seed2'][1]}" in err
    # Mend it and run again: only the failed one renders.
    (out / "seed2").unlink()
    m = splatter.vary(look, seeds="1:4", out=str(out), jobs=1, progress=False)
    assert (m["summary"]["rendered"], m["summary"]["reused"], m["summary"]["failed"]) == (1, 2, 0)


@pytest.mark.parametrize("args, fragments", [
    (["--seeds", "1:3", "--sweep", "source.0.rate=20,-5"],
     ["variation seed1_source.0.rate--5", "source[0].rate", "expected a number"]),
    (["--sweep", "clip.fps=12,twelve"], ["variation seed0_clip.fps-twelve", "clip.fps", "expected"]),
    (["--seeds", "5:2"], ["--seeds", "A < B"]),
    (["--sweep", "source.0.rate=20,40", "--sweep", "clip.fps=12,24,30", "--zip"], ["--zip", "equal length"]),
    (["--sweep", "source.0.rate=1:10:1"], ["source.0.rate", "COUNT from 2"]),
    (["--sweep", "norate"], ["--sweep", "KEY=V1,V2"]),
    (["--jobs", "0"], ["--jobs"]),
    (["--cluster", "tcp://127.0.0.1:9"], ["--cluster", "Dask scheduler"]),
])
def test_bad_input_exits_2_before_writing_anything(tmp_path, look, capsys, args, fragments):
    out = tmp_path / "takes"
    assert main(["vary", str(look), "--out", str(out), "--quiet", *args]) == 2
    err = capsys.readouterr().err
    for fragment in fragments:
        assert fragment in err
    assert not out.exists()


def test_batch_file_equals_the_command_line(tmp_path, look):
    batch = tmp_path / "batches" / "chimney_takes.toml"
    batch.parent.mkdir()
    batch.write_text(textwrap.dedent("""
        look = "../chimney_take.toml"
        seeds = "3:5"
        zip = true
        out = "%s"
        set = ["clip.frames=3"]
        [sweep]
        source.0.rate = [20, 40, 60]
        "shading.exposure" = "-1.0:1:3"
    """ % (tmp_path / "from_file").as_posix()))
    from_file = splatter.vary(str(batch), dry_run=True)
    from_cli = splatter.vary(look, seeds=[3, 4], zip=True, sets=["clip.frames=3"], out=str(tmp_path / "from_file"),
                             sweep={"source.0.rate": [20, 40, 60], "shading.exposure": "-1.0:1:3"}, dry_run=True)
    assert from_file["variations"] == from_cli["variations"]
    assert [v["overrides"] for v in from_file["variations"][:3]] == [
        {"source.0.rate": "20", "shading.exposure": "-1.0"},
        {"source.0.rate": "40", "shading.exposure": "0.0"},
        {"source.0.rate": "60", "shading.exposure": "1.0"}]
    assert len(from_file["variations"]) == 6 and not (tmp_path / "from_file").exists()  # dry run writes nothing
    assert main(["vary", str(batch), "--dry-run"]) == 0


def _srgb_decode(v):
    # IEC 61966-2-1 transfer function.
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def _srgb_encode(v):
    return np.where(v <= 0.0031308, 12.92 * v, 1.055 * np.power(v, 1 / 2.4) - 0.055)


def _expected_cell(png_path, size):
    """Independent reference for one board cell: the frame PNG (straight alpha, sRGB), premultiplied in
    linear light, resized by Pillow, over a checker of sRGB greys 102 and 153, encoded back to sRGB."""
    codes = np.asarray(Image.open(png_path).convert("RGBA"), dtype=np.float64) / 255.0
    a = codes[..., 3:4]
    premult = np.concatenate([_srgb_decode(codes[..., :3]) * a, a], axis=-1).astype(np.float32)
    w, h = size
    method = Image.Resampling.NEAREST if w > premult.shape[1] else Image.Resampling.LANCZOS
    planes = np.stack([np.asarray(Image.fromarray(premult[..., c], mode="F").resize(size, method))
                       for c in range(4)], axis=-1).astype(np.float64)
    sq = max(4, min(size) // 12)
    yy, xx = np.mgrid[0:h, 0:w]
    grey = _srgb_decode(np.where(((yy // sq) + (xx // sq)) % 2 == 0, 102, 153) / 255.0)[..., None]
    alpha = np.clip(planes[..., 3:4], 0, 1)
    lin = np.clip(np.clip(planes[..., :3], 0, None) + (1 - alpha) * grey, 0, 1)
    return np.floor(_srgb_encode(lin) * 255 + 0.5)


def test_board_has_one_labelled_cell_per_variation(tmp_path, look):
    out = tmp_path / "takes"
    m = splatter.vary(look, seeds="1:4", sweep={"source.0.rate": [20, 60]}, out=str(out), jobs=1, progress=False)
    variations = m["variations"]
    cells = m["board"]["cells"]
    assert len(cells) == len(variations) == 6
    board = np.asarray(Image.open(out / "board.png").convert("RGB"), dtype=np.float64)
    mids = [out / v["folder"] / "chimney_take.0002.png" for v in variations]  # middle of 4 frames
    labels = []
    for i, (cell, v) in enumerate(zip(cells, variations)):
        assert cell["text"] == [f"seed {v['seed']}", f"source.0.rate {v['overrides']['source.0.rate']}"]
        x, y, w, h = cell["box"]
        shown = board[y:y + h, x:x + w]
        # The cell shows its own variation's frame: closer to it than to any other variation's.
        errors = [np.mean((shown - _expected_cell(p, (w, h))) ** 2) for p in mids]
        assert int(np.argmin(errors)) == i and errors[i] < 1.0, errors
        lx, ly, lw, lh = cell["label"]
        band = board[ly:ly + lh, lx:lx + lw].mean(axis=2)
        ink_rows = np.flatnonzero((band > 180).any(axis=1))
        assert ink_rows.size, f"cell {i} has no label text"
        # Legible at 100 %: two lines, each taller than 9 px from ascender to baseline.
        assert ink_rows[-1] - ink_rows[0] >= 2 * 9
        labels.append(band)
    for i in range(len(labels)):
        for j in range(i):
            assert not np.array_equal(labels[i], labels[j]), f"cells {i} and {j} have the same label"
    gif = Image.open(out / "board.gif")
    assert gif.n_frames == 4 and gif.info.get("loop") == 0 and gif.size == (board.shape[1], board.shape[0])


def test_dask_cluster_gives_the_local_bytes_and_survives_a_killed_worker(tmp_path, look):
    # A real cluster on localhost: scheduler, two worker processes (each behind a nanny that restarts it).
    import signal
    import threading
    import time

    from distributed import Client, LocalCluster

    local = tmp_path / "local"
    splatter.vary(look, seeds="1:5", out=str(local), jobs=1, progress=False)
    farm = tmp_path / "farm"
    killed = []
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster, \
            Client(cluster) as client:

        def kill_a_busy_worker():
            deadline = time.monotonic() + 120
            while time.monotonic() < deadline and not killed:
                busy = [w for w, keys in client.processing().items()
                        if any(str(k).startswith("splatter-vary") for k in keys)]
                if busy:
                    pid = cluster.scheduler.workers[busy[0]].pid
                    os.kill(pid, signal.SIGKILL)  # mid-variation: it is lost, not finished
                    killed.append(pid)
                time.sleep(0.02)

        killer = threading.Thread(target=kill_a_busy_worker)
        killer.start()
        m = splatter.vary(look, seeds="1:5", out=str(farm), cluster=cluster.scheduler_address, progress=False)
        killer.join()
    assert killed, "no worker was seen busy with a variation"
    assert [v["status"] for v in m["variations"]] == ["done"] * 4, [v["message"] for v in m["variations"]]
    assert m["summary"]["cluster"] == cluster.scheduler_address
    for v in m["variations"]:
        assert files_of(farm / v["folder"]) == files_of(local / v["folder"])


def test_shipped_batch_file_plans():
    batch = Path(__file__).resolve().parents[1] / "looks" / "batches" / "chimney_takes.toml"
    m = splatter.vary(str(batch), dry_run=True)
    assert len(m["variations"]) == 20 and m["name"] == "harbour_chimney"
    assert {v["overrides"]["force.0.velocity"] for v in m["variations"]} == {"[0.6, 0, 0]", "[1.8, 0, 0]"}


def test_a_killed_local_worker_loses_no_variation(tmp_path, look):
    import signal
    import threading
    import time

    import psutil  # installed with distributed

    inline = tmp_path / "inline"
    splatter.vary(look, seeds="1:4", out=str(inline), jobs=1, progress=False)
    killed = []
    stop = threading.Event()

    def kill_a_worker():
        me = psutil.Process()
        while not stop.is_set() and not killed:
            for child in me.children():
                try:
                    busy = "spawn_main" in " ".join(child.cmdline()) and sum(child.cpu_times()[:2]) > 0.5
                except psutil.Error:
                    continue
                if busy:
                    os.kill(child.pid, signal.SIGKILL)
                    killed.append(child.pid)
                    break
            time.sleep(0.02)

    killer = threading.Thread(target=kill_a_worker)
    killer.start()
    try:
        m = splatter.vary(look, seeds="1:4", out=str(tmp_path / "pool"), jobs=2, progress=False)
    finally:
        stop.set()
        killer.join()
    assert killed, "no busy worker process was seen"
    assert [v["status"] for v in m["variations"]] == ["done"] * 3, [v["message"] for v in m["variations"]]
    for v in m["variations"]:
        assert files_of(tmp_path / "pool" / v["folder"]) == files_of(inline / v["folder"])


def test_local_workers_render_within_their_share_of_the_memory(tmp_path, look, monkeypatch):
    # Each local worker's render (its refusal and what its simulation may hold)
    # gets the share of the machine's memory the batch checked it against; a
    # cluster's workers judge their own machines (None: the render's default).
    import splatter.batch.run as run
    import splatter.cost as cost

    monkeypatch.setattr(cost, "memory_limit", lambda option=None: 8 * 2**30)
    seen = []
    monkeypatch.setattr(run, "_run_local", lambda tasks, jobs, done: seen.extend(tasks))
    splatter.vary(str(look), seeds="1:4", jobs=2, out=str(tmp_path / "out"), progress=False)
    assert [t["max_memory"] for t in seen] == [4 * 2**30] * 3
    # More workers asked for than variations: only three start, so each gets a third.
    more = []
    monkeypatch.setattr(run, "_run_local", lambda tasks, jobs, done: more.extend(tasks))
    splatter.vary(str(look), seeds="1:4", jobs=8, out=str(tmp_path / "out8"), progress=False)
    assert [t["max_memory"] for t in more] == [8 * 2**30 // 3] * 3
    from splatter.batch.worker import render_variation
    import splatter.render as render_module

    got = []
    monkeypatch.setattr(render_module, "render", lambda look, **kw: got.append(kw["max_memory"]) or 1 / 0)
    render_variation(dict(seen[0], folder=str(tmp_path / "w")))
    assert got == [4 * 2**30]

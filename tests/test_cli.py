"""The command line: exit codes, messages that name file and key, nothing half-written."""

import json
import os
import subprocess
import sys

import numpy as np
import pytest
from lookfiles import LONE_PUFF, SMALL_PLUME, write_look

from splatter.cli import main


def run(*args):
    """Run the real console entry in a child process; return (code, stdout, stderr).

    Only test_render_writes_named_frames_and_summary uses it (a child process
    starts numba afresh); the other cases call ``main`` in this process
    through the ``cli`` fixture, which is the same code without the start-up.
    """
    proc = subprocess.run([sys.executable, "-m", "splatter", *map(str, args)], capture_output=True, text=True)
    return proc.returncode, proc.stdout, proc.stderr


@pytest.fixture
def cli(capsys):
    """``main`` in this process: ``cli(*args)`` returns (code, stdout, stderr)."""
    def call(*args):
        code = main([str(a) for a in args])
        out, err = capsys.readouterr()
        return code, out, err
    return call


BAD_LOOKS = [
    # (what is wrong, look text, key the message must name)
    ("malformed TOML", "[clip\nframes = 3\n", "bad.toml:1"),
    ("unknown key", "[clip]\nframez = 3\n[[source]]\nrate = 1\n", "clip.framez"),
    ("wrong type", '[clip]\nframes = "three"\n[[source]]\nrate = 1\n', "clip.frames"),
    ("absurd size", "[image]\nwidth = 99999\n[[source]]\nrate = 1\n", "image.width"),
    ("NaN", "[clip]\nfps = nan\n[[source]]\nrate = 1\n", "clip.fps"),
    ("bad colour", '[[source]]\ncolor = "#zzzzzz"\n', "source[0].color"),
    ("unknown kind", '[[force]]\nkind = "breeze"\n[[source]]\nrate = 1\n', "force[0].kind"),
    ("missing base", 'base = "gone.toml"\n[[source]]\nrate = 1\n', "base"),
]


@pytest.mark.parametrize("what, text, key", BAD_LOOKS, ids=[b[0] for b in BAD_LOOKS])
@pytest.mark.parametrize("command", ["render", "check", "simulate"])
def test_bad_look_exits_2_names_file_and_key_and_writes_nothing(cli, tmp_path, what, text, key, command):
    look = tmp_path / "bad.toml"
    look.write_text(text)
    out = tmp_path / "out"
    args = [command, look, "--out", out / "x.npz" if command == "simulate" else out]
    if command == "check":
        args = [command, look]
    code, stdout, stderr = cli(*args)
    assert code == 2, stderr
    assert str(look) in stderr and key in stderr
    assert "expected" in stderr and "got" in stderr
    assert "Traceback" not in stderr
    assert not out.exists()


@pytest.mark.parametrize(
    "args, fragment",
    [
        (["--set", "clip.frames=-4"], "clip.frames"),
        (["--set", "source.0.rat=4"], 'did you mean "rate"'),
        (["--frames", "9:3"], "--frames"),
        (["--frames", "a:b"], "--frames"),
        (["--threads", "0"], "--threads"),
        (["--seed", "-1"], "--seed"),
    ],
)
def test_bad_command_line_values_exit_2(cli, tmp_path, args, fragment):
    look = write_look(tmp_path, LONE_PUFF)
    out = tmp_path / "out"
    code, _, stderr = cli("render", look, "--out", out, *args)
    assert code == 2 and fragment in stderr and "Traceback" not in stderr
    assert not out.exists()


def test_unknown_option_and_missing_file_exit_2(tmp_path):
    assert main(["render"]) == 2
    assert main(["render", str(tmp_path / "nowhere.toml")]) == 2
    assert main(["frobnicate"]) == 2


def test_check_summarises_without_writing(tmp_path, capsys):
    look = write_look(tmp_path, SMALL_PLUME, extra='\n')
    code = main(["check", str(look), "--set", f"output.dir='{tmp_path / 'never'}'"])
    text = capsys.readouterr().out
    assert code == 0
    assert "12 frames" in text and "48 x 48" in text and "alive at steady state" in text
    assert "small_plume.0000.png" in text
    assert not (tmp_path / "never").exists()


def test_render_writes_named_frames_and_summary(tmp_path):
    look = write_look(tmp_path, SMALL_PLUME)
    out = tmp_path / "r"
    code, _, stderr = run("render", look, "--out", out / "{name}-{seed}", "--seed", 9)
    assert code == 0, stderr
    folder = out / "small_plume-9"
    names = sorted(p.name for p in folder.iterdir())
    assert names[:2] == ["small_plume.0000.exr", "small_plume.0000.png"]
    assert len([n for n in names if n.endswith(".png")]) == 12
    assert not [n for n in names if n.startswith(".")]  # no temporary files left
    assert "rendered 12 frames" in stderr


def test_simulate_writes_the_spec_arrays(tmp_path):
    look = write_look(tmp_path, SMALL_PLUME)
    npz = tmp_path / "states.npz"
    assert main(["simulate", str(look), "--out", str(npz)]) == 0
    data = np.load(npz)
    fs = data["frame_start"]
    assert fs.shape == (13,) and fs[0] == 0 and fs[-1] == len(data["id"])
    for key, tail in [("pos", (3,)), ("vel", (3,)), ("age", ()), ("life", ()), ("size", ()), ("opacity", ())]:
        assert data[key].shape == (fs[-1],) + tail
    assert np.all(data["age"] <= data["life"])


def test_pack_builds_a_sheet_from_rendered_frames(tmp_path):
    look = write_look(tmp_path, SMALL_PLUME)
    out = tmp_path / "r"
    assert main(["render", str(look), "--out", str(out), "--quiet", "--set", 'output.frames=["png"]']) == 0
    assert main(["pack", str(out), "--columns", "4", "--padding", "1"]) == 0
    meta = json.loads((out / "small_plume.sheet.json").read_text())
    assert (meta["columns"], meta["rows"], meta["frames"]) == (4, 3, 12)
    assert main(["pack", str(tmp_path / "empty-nowhere")]) == 2


def test_smoke_cut_by_the_frame_border_is_warned_about(cli, tmp_path):
    # A puff twice as wide as a tight view: the sprite is visibly cut off.
    look = write_look(tmp_path, LONE_PUFF)
    code, stdout, stderr = cli("render", look, "--out", tmp_path / "o", "--set", "camera.view_width=0.8")
    assert code == 0
    assert "frame border" in stderr and "camera.fit" in stderr
    code, stdout, _ = cli("check", look, "--set", "camera.view_width=0.8")
    assert code == 0 and "cross the frame border" in stdout
    # Framed with room to spare, neither says a word about it.
    code, stdout, stderr = cli("render", look, "--out", tmp_path / "p")
    assert code == 0 and "frame border" not in stderr


def test_unusable_output_paths_exit_2_naming_the_path_given(tmp_path, capsys, monkeypatch):
    # Bad input, not an internal failure: exit 2, the path as given, no traceback,
    # no hidden temporary name, nothing written.
    look = write_look(tmp_path, LONE_PUFF)
    blocker = tmp_path / "a_file"
    blocker.write_text("")
    cases = [(blocker, "which is a file"), (blocker / "frames", "a folder splatter can make")]
    taken = tmp_path / "taken"
    (taken / "lone_puff.0000.exr").mkdir(parents=True)  # a frame's path is a folder
    cases.append((taken, "lone_puff.0000.exr"))
    for out, fragment in cases:
        assert main(["render", str(look), "--out", str(out), "--quiet"]) == 2
        err = capsys.readouterr().err
        assert str(out) in err and fragment in err and "Traceback" not in err and ".tmp" not in err
    assert sorted(p.name for p in taken.iterdir()) == ["lone_puff.0000.exr"]
    # An unwritable folder (the tests may run as root, who may write anywhere, so access is denied here).
    locked = tmp_path / "locked"
    locked.mkdir()
    real = os.access
    monkeypatch.setattr(os, "access", lambda p, mode, **kw: False if str(p) == str(locked) else real(p, mode, **kw))
    assert main(["render", str(look), "--out", str(locked), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert str(locked) in err and "not writable" in err and not any(locked.iterdir())


def test_a_loop_that_cannot_close_is_named_even_when_quiet(cli, tmp_path):
    text = LONE_PUFF.replace("[clip]", '[clip]\nloop = "exact"')
    look = write_look(tmp_path, text)
    code, stdout, _ = cli("check", look)
    assert code == 0 and "source[0].bursts" in stdout and "seam" in stdout
    code, _, stderr = cli("render", look, "--out", tmp_path / "o", "--quiet")
    assert code == 0 and "source[0].bursts" in stderr and "seam" in stderr

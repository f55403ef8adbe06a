"""Honest output folders: partial renders, the render manifest, stale files, --resume, pack, file-system errors."""

import json

import pytest
from lookfiles import SMALL_PLUME, digests, quiet_render, write_look

from splatter.look.load import load_look

SHEET = "[output]\nframes = ['png']\nsheet = { columns = 4, rows = 3, padding = 1 }\n"


def _plume(tmp_path, extra="", **kw):
    text = SMALL_PLUME.replace('[output]\nframes = ["png", "exr"]\nexr_type = "float"\n', "")
    return load_look(write_look(tmp_path, text, extra=SHEET + extra), **kw)


def _render(look, folder, **kw):
    quiet_render(look, folder, **kw)
    return folder


def _meta(folder, stem="small_plume"):
    return json.loads((folder / f"{stem}.sheet.json").read_text())


def test_partial_renders_number_cells_by_frame_size_the_grid_and_do_not_claim_a_loop(tmp_path):
    # A sheet is what an engine plays: cell k is frame cells[k].frame; a part of
    # a loop played on repeat jumps at the seam, so only the whole clip is "exact".
    look = _plume(tmp_path)
    whole = _meta(_render(look, tmp_path / "whole"))
    assert (whole["columns"], whole["rows"], whole["loop"]) == (4, 3, "exact")
    assert [c["frame"] for c in whole["cells"]] == list(range(12))
    part = _meta(_render(look, tmp_path / "part", frames=range(4, 8)))
    assert [c["frame"] for c in part["cells"]] == [4, 5, 6, 7]
    assert (part["columns"], part["rows"], part["frames"], part["loop"]) == (4, 1, 4, "none")
    assert (part["width"], part["height"]) == (4 * 50, 50)  # 48 px frames, 1 px gutter: 50 px cells
    tail = _meta(_render(look, tmp_path / "tail", frames=range(10, 12)))
    assert (tail["columns"], tail["rows"], [c["frame"] for c in tail["cells"]]) == (2, 1, [10, 11])
    one = _meta(_render(look, tmp_path / "one", frames=[0]))
    assert (one["columns"], one["rows"], one["width"], one["cells"][0]["frame"]) == (1, 1, 50, 0)


FULL = ("[output]\nframes = ['png', 'exr']\nexr_type = 'float'\nmaps = ['motion', 'depth']\n"
        "preview = ['gif', 'contact']\nsheet = { columns = 4, padding = 1 }\n")
# Every map and preview: the normal and light sheets and the MP4 are encoded as frames
# arrive (their shares are kept for --resume; an interrupted MP4 must leave no file).
FULL_STREAMED = FULL.replace("'motion', 'depth'", "'motion', 'depth', 'normal', 'lightdirs'").replace(
    "'gif', 'contact'", "'gif', 'mp4', 'contact'")


def _interrupt_after(monkeypatch, n):
    """Make the sink raise KeyboardInterrupt (Ctrl-C) when frame number ``n`` arrives."""
    from splatter.deliver import sink

    real = sink.OutputSink.add

    def add(self, frame, rgba, layers):
        if frame == n:
            raise KeyboardInterrupt
        return real(self, frame, rgba, layers)

    monkeypatch.setattr(sink.OutputSink, "add", add)


def _whole_and_interrupted(tmp_path, monkeypatch, extra):
    """The small plume with ``extra`` output keys: rendered whole (digests), and interrupted at frame 5."""
    text = SMALL_PLUME.replace('[output]\nframes = ["png", "exr"]\nexr_type = "float"\n', "")
    look = load_look(write_look(tmp_path, text, extra=extra))
    whole = digests(_render(look, tmp_path / "whole"), manifest=True)
    folder = tmp_path / "resumed"
    with monkeypatch.context() as m:
        _interrupt_after(m, 5)
        with pytest.raises(KeyboardInterrupt):
            quiet_render(look, folder)
    return look, whole, folder


def test_interrupted_then_resumed_render_has_the_bytes_of_an_uninterrupted_one(tmp_path, monkeypatch):
    text = SMALL_PLUME.replace('[output]\nframes = ["png", "exr"]\nexr_type = "float"\n', "")
    look = load_look(write_look(tmp_path, text, extra=FULL_STREAMED))
    whole = digests(_render(look, tmp_path / "whole"), manifest=True)
    assert {"small_plume.render.json", "small_plume.sheet.png", "small_plume.motion.sheet.png",
            "small_plume.normal.sheet.png", "small_plume.lightdirs_neg.sheet.png",
            "small_plume.preview.mp4"} <= whole.keys()
    folder = tmp_path / "resumed"
    with monkeypatch.context() as m:
        _interrupt_after(m, 5)
        with pytest.raises(KeyboardInterrupt):
            quiet_render(look, folder)
    manifest = json.loads((folder / "small_plume.render.json").read_text())
    done = manifest["frames"]  # frames still queued for the writer when Ctrl-C came are dropped
    assert manifest["state"] == "rendering" and 2 <= len(done) <= 5 and done == list(range(len(done)))
    assert not (folder / "small_plume.sheet.png").exists() and not (folder / "small_plume.preview.gif").exists()
    with monkeypatch.context() as m:  # resuming renders only the frames not done
        rendered = []
        from splatter.deliver import sink

        real = sink.OutputSink.add
        m.setattr(sink.OutputSink, "add", lambda self, f, *a: rendered.append(f) or real(self, f, *a))
        quiet_render(look, folder, resume=True)
    assert rendered == list(range(len(done), 12))
    assert digests(folder, manifest=True) == whole  # every file, sheets, map sheets, previews and the manifest included
    assert not (folder / ".small_plume.resume").exists()
    # Resuming a render that completed does nothing and changes nothing.
    assert quiet_render(look, folder, resume=True).files == []
    assert digests(folder, manifest=True) == whole


def test_another_seed_interrupted_leaves_nothing_of_the_old_render(tmp_path, monkeypatch):
    text = SMALL_PLUME.replace('[output]\nframes = ["png", "exr"]\nexr_type = "float"\n', "")
    path = write_look(tmp_path, text, extra=FULL_STREAMED)
    folder = tmp_path / "out"
    _render(load_look(path), folder)
    old = {p.name: p.read_bytes() for p in folder.iterdir()}
    with monkeypatch.context() as m:
        _interrupt_after(m, 3)
        with pytest.raises(KeyboardInterrupt):
            quiet_render(load_look(path, seed=9, overrides=["clip.frames=8"]), folder)
    manifest = json.loads((folder / "small_plume.render.json").read_text())
    assert manifest["seed"] == 9 and manifest["state"] == "rendering"
    left = {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()}  # the hidden .resume folder stays
    # no sheet, map sheet or preview of either render, and no frame of the old one
    assert not [n for n in left if ".sheet." in n or ".preview." in n or ".contact." in n]
    assert set(left) == set(manifest["files"])
    assert all(left[n] != old[n] for n in left if n in old and n != "small_plume.render.json")
    # the finished render lists exactly what is in the folder: frames 8 to 11 of the longer clip are gone
    quiet_render(load_look(path, seed=9, overrides=["clip.frames=8"]), folder)
    manifest = json.loads((folder / "small_plume.render.json").read_text())
    assert sorted(p.name for p in folder.iterdir()) == manifest["files"]
    assert manifest["frames"] == list(range(8)) and manifest["state"] == "complete"
    assert not (folder / "small_plume.0011.png").exists()


def test_chunks_of_one_take_add_up_and_strays_are_listed_not_deleted(tmp_path):
    look = _plume(tmp_path)
    folder = tmp_path / "out"
    quiet_render(look, folder, frames=range(0, 6))
    (folder / "small_plume.0040.png").write_bytes(b"not ours")  # named like ours, listed by no manifest
    with pytest.warns(UserWarning, match="small_plume.0040.png"):
        quiet_render(look, folder, frames=range(6, 12))
    manifest = json.loads((folder / "small_plume.render.json").read_text())
    assert manifest["frames"] == list(range(12)) and manifest["rendered"] == list(range(6, 12))
    assert manifest["stale"] == ["small_plume.0040.png"] and (folder / "small_plume.0040.png").exists()
    assert [c["frame"] for c in _meta(folder)["cells"]] == list(range(6, 12))  # the sheet holds this render


def test_pack_keeps_the_renders_metadata_or_refuses_without_force(tmp_path, capsys):
    from splatter.cli import main
    from splatter.deliver.pack import pack_folder

    text = SMALL_PLUME.replace('[output]\nframes = ["png", "exr"]\nexr_type = "float"\n', "")
    look = load_look(write_look(tmp_path, text, extra=FULL.replace("['png', 'exr']", "['png']")))
    folder = _render(look, tmp_path / "out")
    before = _meta(folder)
    assert (before["fps"], before["loop"], sorted(before["maps"])) == (12.0, "exact", ["depth", "motion"])
    # The same layout: fps, loop and the map entries stay.
    pack_folder(folder, columns=4, padding=1)
    after = _meta(folder)
    assert {k: after[k] for k in ("fps", "loop", "maps", "cells")} == {k: before[k] for k in ("fps", "loop", "maps",
                                                                                          "cells")}
    # Another layout would leave the map sheets wrong: refused (exit 2), nothing changed.
    sheet = (folder / "small_plume.sheet.json").read_bytes()
    assert main(["pack", str(folder), "--columns", "8"]) == 2
    assert "--force" in capsys.readouterr().err and (folder / "small_plume.sheet.json").read_bytes() == sheet
    # With --force the sheet is rewritten without them and the map sheets go; fps and loop stay.
    assert main(["pack", str(folder), "--columns", "8", "--force"]) == 0
    forced = _meta(folder)
    assert (forced["columns"], forced["fps"], forced["loop"], forced["maps"]) == (8, 12.0, "exact", {})
    assert not (folder / "small_plume.motion.sheet.png").exists()
    manifest = json.loads((folder / "small_plume.render.json").read_text())
    assert sorted(p.name for p in folder.iterdir()) == manifest["files"]


def test_pack_ignores_frames_the_manifest_does_not_list(tmp_path):
    from splatter.deliver.pack import pack_folder

    look = _plume(tmp_path)
    folder = _render(look, tmp_path / "out", frames=range(0, 4))
    # a frame of another take, copied in by hand: named like ours, listed by no manifest
    (folder / "small_plume.0004.png").write_bytes((folder / "small_plume.0000.png").read_bytes())
    written = pack_folder(folder)
    meta = json.loads(open(written[1]).read())
    assert [c["frame"] for c in meta["cells"]] == [0, 1, 2, 3] and meta["loop"] == "none"
    # the whole clip, rendered: pack calls it the exact loop it is
    quiet_render(look, folder)
    assert json.loads(open(pack_folder(folder, columns=6)[1]).read())["loop"] == "exact"


def test_a_refusal_at_the_final_framing_removes_every_folder_level_it_made_and_nothing_else(tmp_path, monkeypatch):
    # The final memory check runs after the output folder is made (check_folder
    # makes it, parents and all, as os.makedirs does); a refusal there must
    # leave the disk as it was: every level this render made goes, every
    # folder that was there stays with what it holds. The refusal is planted
    # (only the check given the final framing refuses), since a look whose
    # framing alone tips the estimate over would be slow to simulate.
    import importlib

    from splatter.core.errors import LookError
    from splatter.deliver.folder import missing_folders

    render_module = importlib.import_module("splatter.render")
    real = render_module.refuse_if_over_memory

    def refuse_final(look, n_frames, *, plan=None, **kw):
        if plan is not None:
            raise LookError(look.path, "output.sheet", "a render that fits in memory", "more (planted)")
        return real(look, n_frames, plan=plan, **kw)

    monkeypatch.setattr(render_module, "refuse_if_over_memory", refuse_final)
    look = _plume(tmp_path)
    quay = tmp_path / "quay"
    quay.mkdir()
    (quay / "notes.txt").write_text("kept")
    before = sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*"))
    for out in (quay / "vents" / "take_2" / "frames", f"{quay}/a/../b/c/", quay, quay / "new"):
        with pytest.raises(LookError, match="planted"):
            render_module.render(look, out_dir=str(out), progress=False)
        assert sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*")) == before, out
    assert (quay / "notes.txt").read_text() == "kept"
    # The walk mirrors os.makedirs: "a/../b" makes a, then b beside it.
    levels = missing_folders(f"{quay}/a/../b/c")
    assert [p.replace(str(quay), "") for p in levels] == ["/a/../b/c", "/a/../b", "/a/..", "/a"]


def test_shares_kept_by_another_version_are_rendered_again_not_trusted(tmp_path, monkeypatch):
    # What a frame's kept share holds changes between versions (normal and light
    # sheets keep encoded tiles now); a share without this version's mark is not
    # used, so --resume renders that frame again and the files still come out whole.
    import numpy as np

    look, whole, folder = _whole_and_interrupted(tmp_path, monkeypatch, FULL_STREAMED)
    parts = sorted((folder / ".small_plume.resume").glob("*.npz"))
    assert parts
    with np.load(parts[0]) as z:  # the first frame's share, as an older version kept it
        old = {k: z[k] for k in z.files if k != "parts_version" and not k.startswith("map:")}
    np.savez(parts[0], **old)
    with monkeypatch.context() as m:
        rendered = []
        from splatter.deliver import sink

        real = sink.OutputSink.add
        m.setattr(sink.OutputSink, "add", lambda self, f, *a: rendered.append(f) or real(self, f, *a))
        quiet_render(look, folder, resume=True)
    assert rendered[0] == 0 and rendered[1:] == list(range(len(parts), 12))
    assert digests(folder, manifest=True) == whole


@pytest.mark.parametrize("extra", [
    "[output]\nframes = ['png']\n",  # frames only: nothing of a finished frame needs keeping
    "[output]\nframes = ['png']\nmaps = ['motion']\nmap_frames = true\n",  # per-frame maps with the clip's range
])
def test_resume_without_a_sheet_or_preview_has_the_bytes_of_an_uninterrupted_render(tmp_path, monkeypatch, extra):
    look, whole, folder = _whole_and_interrupted(tmp_path, monkeypatch, extra)
    quiet_render(look, folder, resume=True)
    assert digests(folder, manifest=True) == whole


def test_a_killed_renders_temporary_files_go_and_damaged_shares_are_rendered_again(tmp_path, monkeypatch):
    # A render killed outright (no Python clean-up) leaves its hidden temporaries; the next render
    # of the same files removes them, and leaves other hidden files alone. A damaged kept share
    # (a truncated zip) is not a traceback: its frame is rendered again.
    look, whole, folder = _whole_and_interrupted(tmp_path, monkeypatch, FULL)
    left = folder / ".small_plume.preview.gif.0a1b2c3d.tmp.gif"
    left.write_bytes(b"half a gif")
    other = folder / ".notes.0a1b2c3d.tmp"
    other.write_bytes(b"someone else's")
    share = sorted((folder / ".small_plume.resume").glob("*.npz"))[0]
    share.write_bytes(share.read_bytes()[:40])
    quiet_render(look, folder, resume=True)
    assert not left.exists() and other.read_bytes() == b"someone else's"
    other.unlink()
    assert digests(folder, manifest=True) == whole

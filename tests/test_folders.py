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


def _interrupt_after(monkeypatch, n):
    """Make the sink raise KeyboardInterrupt (Ctrl-C) when frame number ``n`` arrives."""
    from splatter.deliver import sink

    real = sink.OutputSink.add

    def add(self, frame, rgba, layers):
        if frame == n:
            raise KeyboardInterrupt
        return real(self, frame, rgba, layers)

    monkeypatch.setattr(sink.OutputSink, "add", add)


def test_interrupted_then_resumed_render_has_the_bytes_of_an_uninterrupted_one(tmp_path, monkeypatch):
    text = SMALL_PLUME.replace('[output]\nframes = ["png", "exr"]\nexr_type = "float"\n', "")
    look = load_look(write_look(tmp_path, text, extra=FULL))
    whole = digests(_render(look, tmp_path / "whole"))
    assert {"small_plume.render.json", "small_plume.sheet.png", "small_plume.motion.sheet.png"} <= whole.keys()
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
    assert digests(folder) == whole  # every file, sheets, map sheets, previews and the manifest included
    assert not (folder / ".small_plume.resume").exists()

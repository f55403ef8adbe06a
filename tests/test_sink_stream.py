"""The output sink holds only what the clip-wide outputs need: memory stays bounded and an abort leaves no file."""

import numpy as np
from lookfiles import write_look

from splatter.deliver.sink import OutputSink
from splatter.look.load import load_look

LOOK = """
name = "quay_lamp"
[clip]
frames = 4
[image]
width = 24
height = 16
[[source]]
rate = 10
life = 1
[output]
frames = []
maps = ["motion", "depth", "normal", "lightdirs"]
preview = ["mp4"]
sheet = { columns = 2, padding = 1 }
"""


def _frame(k, h=16, w=24):
    """A premultiplied RGBA frame with a soft blob and straight map layers of every kind."""
    yy, xx = np.mgrid[0:h, 0:w]
    a = np.clip(1.0 - np.hypot(yy - 8, xx - 6 - 3 * k) / 6.0, 0, 1).astype(np.float32)
    rgba = np.stack([0.5 * a, 0.4 * a, 0.3 * a, a], -1).astype(np.float32)
    layers = {"motion.x": np.full((h, w), 0.5 + k, np.float32), "motion.y": np.zeros((h, w), np.float32),
              "depth.z": np.full((h, w), 3.0 + k, np.float32)}
    for c, v in zip("xyz", (0.0, 0.0, 1.0)):
        layers[f"normal.{c}"] = np.full((h, w), v, np.float32)
    for sign in ("pos", "neg"):
        for c in "xyz":
            layers[f"lightdirs_{sign}.{c}"] = a * 0.5
    return rgba, layers


def test_only_motion_and_depth_layers_wait_for_the_end(tmp_path):
    # Normal and light-direction sheets need no clip-wide range, so they are encoded
    # as frames arrive and their 9 channels are not kept; motion and depth (3) are,
    # for their clip-wide scale and range, with alpha as its own small array (a view
    # would keep each whole RGBA frame alive).
    look = load_look(write_look(tmp_path, LOOK))
    sink = OutputSink(look, str(tmp_path), 4)
    for k in range(4):
        sink.add(k, *_frame(k))
    kept = sink._sheet_layers
    assert sorted(kept) == ["depth.z", "motion.x", "motion.y"]
    assert all(a.base is None and a.shape == (16, 24) for a in sink._sheet_alpha)
    files = sorted(p.rsplit("/", 1)[-1] for p in sink.finish())
    assert files == ["quay_lamp.depth.sheet.png", "quay_lamp.lightdirs_neg.sheet.png",
                     "quay_lamp.lightdirs_pos.sheet.png", "quay_lamp.motion.sheet.png", "quay_lamp.normal.sheet.png",
                     "quay_lamp.preview.mp4", "quay_lamp.sheet.json", "quay_lamp.sheet.png"]


def test_an_aborted_sink_leaves_no_unfinished_mp4(tmp_path):
    # The MP4 is encoded as frames arrive, into a hidden temporary file; a render that
    # stops (Ctrl-C, an error) must not leave it behind (no half-written files).
    look = load_look(write_look(tmp_path, LOOK))
    out = tmp_path / "out"
    out.mkdir()
    sink = OutputSink(look, str(out), 4)
    for k in range(3):
        sink.add(k, *_frame(k))
    for fut in list(sink._pending):
        fut.result()
    assert [p.name for p in out.iterdir()][0].startswith(".quay_lamp.preview.mp4")  # under way
    sink.abort()
    assert list(out.iterdir()) == []

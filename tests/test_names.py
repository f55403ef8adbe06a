"""One source for file names: what ``check`` lists is what ``render`` writes."""

from pathlib import Path

import pytest

from splatter.deliver.names import FRAME_FILE, planned_files
from splatter.look.load import load_look
from splatter.render import render

LOOKS = sorted((Path(__file__).resolve().parents[1] / "looks").glob("*.toml"))


@pytest.mark.filterwarnings("ignore::UserWarning")  # 24 px frames cut the smoke; only names matter here
@pytest.mark.parametrize("path", LOOKS, ids=lambda p: p.stem)
def test_check_lists_exactly_the_files_render_writes(path, tmp_path):
    # Every demo look, shrunk to a few small frames (the names do not depend on size).
    look = load_look(path, overrides=["clip.frames=3", "image.width=24", "image.height=24"])
    frames = range(1, 3)
    result = render(look, out_dir=str(tmp_path), frames=frames, progress=False)
    assert sorted(result.files) == sorted(planned_files(look, str(tmp_path), frames))
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(Path(f).name for f in result.files)


def test_frame_pattern_recognises_written_frames_only():
    assert FRAME_FILE.match("quay_dust.0012.png")["frame"] == "0012"
    for name in ("quay_dust.sheet.png", "quay_dust.motion.sheet.exr", "quay_dust.12.png", "quay.dust.0001.png"):
        assert FRAME_FILE.match(name) is None, name

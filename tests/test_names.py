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


@pytest.mark.filterwarnings("ignore::UserWarning")  # 24 px frames cut the smoke; only names matter here
def test_output_stem_names_every_file_and_check_lists_them(tmp_path):
    # Twenty takes of one look in one folder need twenty sets of names: {seed} in output.stem.
    path = LOOKS[0]
    names = set()
    for seed in (3, 11):
        look = load_look(path, seed=seed, overrides=["clip.frames=2", "image.width=24", "image.height=24",
                                                     'output.stem="{name}_s{seed}"', "output.preview=['gif']",
                                                     "output.sheet={columns=2}"])
        result = render(look, out_dir=str(tmp_path), progress=False)
        assert sorted(result.files) == sorted(planned_files(look, str(tmp_path), range(2)))
        assert all(Path(f).name.startswith(f"{look.name}_s{seed}.") for f in result.files)
        names |= {Path(f).name for f in result.files}
    # nothing of the first take was overwritten by the second
    assert {p.name for p in tmp_path.iterdir()} >= names and len(names) == 2 * len(result.files)
    meta = (tmp_path / f"{look.name}_s11.sheet.json").read_text()
    assert f'"image": "{look.name}_s11.sheet.png"' in meta

"""The public Python API: load_look from a dict, render_frames, splatter.render, and the README's example."""

import re
import tomllib
from pathlib import Path

import numpy as np
import pytest

import splatter
from splatter.deliver.exr import read_exr

README = Path(__file__).resolve().parent.parent / "README.md"

HAZE = {
    "name": "lamp_haze",
    "seed": 3,
    "clip": {"frames": 5, "loop": "crossfade", "crossfade": 0.4},
    "image": {"width": 40, "height": 32},
    "camera": {"fit": True},
    "source": [{"rate": 40, "life": [0.8, 1.2], "size": [0.08, 0.12], "speed": 0.8}],
    "force": [{"kind": "swirl", "strength": 0.3, "scale": 0.5, "octaves": 2}],
    "output": {"frames": ["exr"], "exr_type": "float", "maps": ["motion", "depth"]},
}


def test_readme_example_runs(tmp_path, monkeypatch):
    # The README's "From Python" block, run as a user would paste it.
    text = README.read_text()
    block = re.search(r"## From Python.*?```python\n(.*?)```", text, re.S)
    assert block, "README.md has no ## From Python section with a python block"
    monkeypatch.chdir(tmp_path)
    exec(compile(block.group(1), "README.md", "exec"), {})
    assert sorted(p.name for p in (tmp_path / "renders" / "quay_wisp").glob("quay_wisp.*.png"))[:1] == [
        "quay_wisp.0000.png"]


def test_render_frames_are_the_written_frames(tmp_path):
    # The arrays a script gets are the pixels the EXR files hold (float EXR is lossless for float32),
    # crossfade included; maps by name with their channels stacked.
    got = list(splatter.render_frames(HAZE))
    assert [f.frame for f in got] == list(range(5))
    result = splatter.render(HAZE, out_dir=str(tmp_path), progress=False)
    assert result.name == "lamp_haze"
    for f in got:
        assert f.rgba.dtype == np.float32 and f.rgba.shape == (32, 40, 4)
        assert set(f.maps) == {"motion", "depth"}
        assert f.maps["motion"].shape == (32, 40, 2) and f.maps["depth"].shape == (32, 40)
        ch = read_exr(tmp_path / f"lamp_haze.{f.frame:04d}.exr")
        np.testing.assert_array_equal(np.stack([ch[c] for c in "RGBA"], axis=-1), f.rgba)
        np.testing.assert_array_equal(ch["motion.x"] if "motion.x" in ch else ch[_layer(ch, "x")],
                                      f.maps["motion"][..., 0])
    assert got[2].rgba[..., 3].max() > 0.05  # something was drawn


def _layer(ch, axis):
    names = [k for k in ch if k.lower().endswith(axis) and k not in "RGBA"]
    assert names, f"no {axis} layer in {sorted(ch)}"
    return names[0]


def test_render_frames_subset_and_maps_override():
    full = {f.frame: f for f in splatter.render_frames(HAZE)}
    part = list(splatter.render_frames(HAZE, frames=[3, 1], maps=[]))
    assert [f.frame for f in part] == [1, 3]  # in frame order, as the simulation runs
    for f in part:
        assert f.maps == {}
        np.testing.assert_array_equal(f.rgba, full[f.frame].rgba)
    with pytest.raises(ValueError, match=r"maps: expected one of .*'motion'.*got 'moton'"):
        next(splatter.render_frames(HAZE, maps=["moton"]))


def _toml(value):
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml(v)}" for k, v in value.items()) + " }"
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f'"{value}"'
    return repr(value)


def _as_toml(look):
    lines = [f"{k} = {_toml(v)}" for k, v in look.items()]
    text = "\n".join(lines) + "\n"
    assert tomllib.loads(text) == look  # the file says what the dict says
    return text


@pytest.mark.parametrize("bad, key", [
    ({"clip": {"frames": 0}}, "clip.frames"),
    ({"image": {"width": "wide"}}, "image.width"),
    ({"camera": {"projection": "fisheye"}}, "camera.projection"),
    ({"clip": {"frmaes": 8}}, "clip"),
    ({"source": [{"rate": 10}, {"life": [3, 1]}]}, "source"),
])
def test_dict_look_has_the_file_checks_and_messages(tmp_path, bad, key):
    path = tmp_path / "quay_mist.toml"
    path.write_text(_as_toml(bad))
    with pytest.raises(splatter.LookError) as from_file:
        splatter.load_look(path)
    with pytest.raises(splatter.LookError) as from_dict:
        splatter.load_look(bad)
    assert key in str(from_file.value)
    assert str(from_dict.value) == str(from_file.value).replace(str(path), "<dict>")


def test_dict_look_equals_file_look_and_is_not_changed(tmp_path):
    path = tmp_path / "lamp_haze.toml"
    path.write_text(_as_toml(HAZE))
    before = repr(HAZE)
    a = splatter.load_look(HAZE, overrides=["source.0.rate=55"], seed=9)
    b = splatter.load_look(path, overrides=["source.0.rate=55"], seed=9)
    assert repr(HAZE) == before  # the caller's dict is left alone
    assert a.__class__(**{**vars(a), "path": None}) == b.__class__(**{**vars(b), "path": None})
    assert a.sources[0].rate == 55 and a.seed == 9
    assert splatter.load_look({}).name == "look"


def test_dict_base_is_relative_to_the_working_folder(tmp_path, monkeypatch):
    (tmp_path / "quay.toml").write_text("[clip]\nframes = 7\n[image]\nwidth = 24\n")
    monkeypatch.chdir(tmp_path)
    look = splatter.load_look({"base": "quay.toml", "image": {"height": 16}})
    assert (look.clip.frames, look.image.width, look.image.height) == (7, 24, 16)

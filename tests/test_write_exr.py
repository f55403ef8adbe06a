"""EXR write/read-back through the official OpenEXR bindings."""

import os

import numpy as np
import OpenEXR
import pytest

from splatter.deliver.exr import channel_types, read_exr, rgba_channels, write_exr


def _frame(h=5, w=7, seed=0):
    rng = np.random.default_rng(seed)
    a = rng.uniform(0, 1, (h, w, 1)).astype(np.float32)
    rgb = rng.uniform(0, 4, (h, w, 3)).astype(np.float32) * a  # HDR, premultiplied
    return np.concatenate([rgb, a], axis=2)


def test_channel_names_layers_and_types(tmp_path):
    # OpenEXR Technical Introduction: channels R, G, B, A; layers "layer.channel".
    rgba = _frame()
    ch = rgba_channels(rgba)
    ch["motion.x"] = np.full((5, 7), 0.25, np.float32)
    ch["motion.y"] = np.full((5, 7), -0.5, np.float32)
    ch["depth.z"] = np.linspace(1, 9, 35, dtype=np.float32).reshape(5, 7)
    p = tmp_path / "f.exr"
    write_exr(p, ch, pixel_type={"depth.z": "float"})
    assert OpenEXR.isOpenExrFile(str(p))
    back = read_exr(p)
    assert set(back) == {"R", "G", "B", "A", "motion.x", "motion.y", "depth.z"}
    types = channel_types(p)
    assert types["R"] == "half" and types["motion.x"] == "half" and types["depth.z"] == "float"
    assert back["R"].shape == (5, 7) and back["R"].dtype == np.float32


def test_half_roundtrip_is_bit_exact_float16(tmp_path):
    # OpenEXR Technical Introduction: HALF is IEEE binary16 and ZIP is lossless,
    # so values come back exactly as numpy's float16 rounding of the input.
    rgba = _frame(seed=1)
    p = tmp_path / "h.exr"
    write_exr(p, rgba_channels(rgba), pixel_type="half")
    back = read_exr(p)
    for i, c in enumerate("RGBA"):
        np.testing.assert_array_equal(back[c], rgba[..., i].astype(np.float16).astype(np.float32))
    # float16(0.18) = 0.18005371 (IEEE 754 binary16).
    write_exr(p, {"R": np.full((2, 2), 0.18, np.float32)})
    assert read_exr(p)["R"][0, 0] == pytest.approx(0.18005371, abs=1e-8)
    assert abs(read_exr(p)["R"][0, 0] - 0.18) / 0.18 <= 2.0**-11


def test_float_roundtrip_preserves_premultiplied_hdr(tmp_path):
    # OpenEXR convention: linear, premultiplied, 1.0 is not a clamp.
    rgba = _frame(seed=2)
    rgba[0, 0] = (3.5, 0.0, 0.0, 0.5)  # colour > alpha is legal (emission)
    p = tmp_path / "f.exr"
    write_exr(p, rgba_channels(rgba), pixel_type="float")
    assert channel_types(p) == {c: "float" for c in "RGBA"}
    back = read_exr(p)
    np.testing.assert_array_equal(np.stack([back[c] for c in "RGBA"], -1), rgba)


def test_zip_compression_and_attributes(tmp_path):
    p = tmp_path / "a.exr"
    write_exr(p, {"R": np.zeros((3, 3), np.float32)}, attributes={"splatter.frame": 12, "comment": "harbour"})
    _, header = read_exr(p, with_header=True)
    assert header["compression"] == OpenEXR.ZIP_COMPRESSION
    assert header["splatter.frame"] == 12 and header["comment"] == "harbour"


def test_write_is_atomic(tmp_path):
    p = tmp_path / "x.exr"
    with pytest.raises(ValueError, match="channels"):
        write_exr(p, {"R": np.zeros((3, 3)), "G": np.zeros((3, 4))})
    assert os.listdir(tmp_path) == []
    write_exr(p, {"R": np.zeros((3, 3))})
    assert os.listdir(tmp_path) == ["x.exr"]


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"channels": {}}, "channels"),
        ({"channels": {"bad name": np.zeros((2, 2))}}, "channels"),
        ({"channels": {"R": np.zeros((2, 2, 3))}}, "channels"),
        ({"channels": {"R": np.zeros((2, 2))}, "pixel_type": "double"}, "pixel_type"),
        ({"channels": {"R": np.zeros((2, 2))}, "attributes": {"channels": 1}}, "attributes"),
    ],
)
def test_bad_input(tmp_path, kwargs, match):
    with pytest.raises(ValueError, match=match):
        write_exr(tmp_path / "e.exr", **kwargs)

"""Display encoding, quantization, dilation and data-map encoders."""

import numpy as np
import pytest
from scipy import ndimage

from splatter.deliver.dilate import dilate_colour
from splatter.deliver.display import quantize, to_display, unpremultiply
from splatter.deliver.map_encode import encode_depth, encode_normal, encode_signed


def _px(r, g, b, a):
    return np.array([[[r, g, b, a]]], np.float32)


def test_srgb_reference_values():
    # IEC 61966-2-1:1999 encode: 0.0031308 -> 0.0404499, 0.01 -> 0.0998528,
    # 0.18 -> 0.4613561, 0.5 -> 0.7353570, 1.0 -> 1.0.
    lin = np.array([0.0031308, 0.01, 0.18, 0.5, 1.0], np.float32)
    img = np.ones((1, 5, 4), np.float32)
    img[0, :, :3] = lin[:, None]
    out = to_display(img)
    np.testing.assert_allclose(out[0, :, 0], [0.0404499, 0.0998528, 0.4613561, 0.7353570, 1.0], atol=1e-6)
    np.testing.assert_array_equal(quantize(out[0, :, 0], 8), [10, 25, 118, 188, 255])


def test_srgb_linear_segment_below_the_knee():
    # IEC 61966-2-1:1999: V = 12.92 L for L <= 0.0031308. At the knee both
    # branches agree to 3e-8, so only values well below it tell an encoder
    # without the linear segment (it gives 1.055 * 0.001^(1/2.4) - 0.055 =
    # 0.0043 for 0.001, not 0.01292) from the standard one.
    lin = np.array([0.0, 0.0005, 0.001, 0.002, 0.003], np.float32)
    img = np.ones((1, lin.size, 4), np.float32)
    img[0, :, :3] = lin[:, None]
    out = to_display(img)[0, :, 0]
    np.testing.assert_allclose(out, [0.0, 0.00646, 0.01292, 0.02584, 0.03876], atol=1e-7)
    # 8-bit codes round(255 V): 0, 2 (1.647), 3 (3.295), 7 (6.589), 10 (9.884).
    np.testing.assert_array_equal(quantize(out, 8), [0, 2, 3, 7, 10])


def test_srgb_decode_published_values_on_the_look_colour_path():
    # IEC 61966-2-1:1999 decode (reference-checks): 118 -> 0.1811642,
    # 188 -> 0.5028865; below the knee V / 12.92: 5 -> 0.0015176349.
    # hex_to_linear is what the look loader decodes "#rrggbb" colours with.
    from splatter.core.colorspace import hex_to_linear

    got = hex_to_linear("#76bc05")  # 0x76 = 118, 0xbc = 188, 0x05 = 5
    np.testing.assert_allclose(got, [0.1811642, 0.5028865, 5 / 255 / 12.92], atol=1e-6, rtol=0)
    assert got[2] == pytest.approx(0.0015176349, rel=1e-7)


def test_unpremultiply():
    # W3C PNG spec, "Alpha representation": straight = premultiplied / alpha; alpha 0 -> colour 0.
    out = unpremultiply(np.concatenate([_px(0.25, 0.1, 0.0, 0.5), _px(0.3, 0.3, 0.3, 0.0)], axis=1))
    np.testing.assert_allclose(out[0, 0], [0.5, 0.2, 0.0, 0.5], rtol=1e-6)
    np.testing.assert_array_equal(out[0, 1], [0, 0, 0, 0])
    assert out.dtype == np.float32


def test_to_display_modes():
    p = _px(0.25, 0.0, 0.0, 0.5)
    # straight sRGB: srgb(0.5) = 0.7353570 (IEC 61966-2-1)
    assert to_display(p)[0, 0, 0] == pytest.approx(0.7353570, abs=1e-6)
    # premultiplied sRGB: encode straight then multiply by alpha (common practice)
    assert to_display(p, alpha="premultiplied")[0, 0, 0] == pytest.approx(0.7353570 * 0.5, abs=1e-6)
    # linear straight / premultiplied
    assert to_display(p, color="linear")[0, 0, 0] == pytest.approx(0.5)
    assert to_display(p, color="linear", alpha="premultiplied")[0, 0, 0] == pytest.approx(0.25)
    # exposure in stops: +1 doubles linear colour, alpha unchanged
    e = to_display(_px(0.09, 0.0, 0.0, 1.0), exposure=1.0, color="linear")
    assert e[0, 0, 0] == pytest.approx(0.18) and e[0, 0, 3] == 1.0
    # HDR colour clips to 1 in display values
    assert to_display(_px(3.0, 0.0, 0.0, 1.0))[0, 0, 0] == 1.0
    with pytest.raises(ValueError, match="alpha"):
        to_display(p, alpha="assoc")
    with pytest.raises(ValueError, match="color"):
        to_display(p, color="rec709")
    with pytest.raises(ValueError, match="rgba_premult_linear"):
        to_display(np.zeros((2, 2, 3), np.float32))


def test_quantize_round_half_up_and_clip():
    # round half up: 0.5 * 255 = 127.5 -> 128; clip outside [0, 1]
    x = np.array([-0.2, 0.0, 127.5 / 255, 127.49 / 255, 1.0, 1.7, np.nan])
    np.testing.assert_array_equal(quantize(x, 8), [0, 0, 128, 127, 255, 255, 0])
    q16 = quantize(np.array([0.5, 1.0]), 16)
    assert q16.dtype == np.uint16 and list(q16) == [32768, 65535]
    with pytest.raises(ValueError, match="bits"):
        quantize(x, 10)


def _display_chain(rgba, alpha, exposure, color="srgb"):
    """to_display's straight and sRGB paths written as plain numpy steps: exposure, clipped
    alpha, straight colour (W3C PNG: premultiplied / alpha, 0 at alpha 0), clipped, sRGB
    encoded (srgb_encode, checked against IEC 61966-2-1 above), times alpha when premultiplied."""
    from splatter.core.colorspace import srgb_encode

    a = rgba.copy()
    a[..., :3] *= np.float32(2.0 ** exposure)
    np.clip(a[..., 3], 0.0, 1.0, out=a[..., 3])
    out = np.zeros_like(a)
    out[..., 3] = a[..., 3]
    covered = a[..., 3] > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        np.divide(a[..., :3], a[..., 3:4], out=out[..., :3], where=covered[..., None])
    np.clip(out[..., :3], 0.0, 1.0, out=out[..., :3])
    if color == "srgb":
        out[..., :3] = srgb_encode(out[..., :3])
    if alpha == "premultiplied":
        out[..., :3] *= out[..., 3:4]
    return out


def test_display_and_quantize_give_the_numpy_steps_bit_for_bit():
    # The writer's sRGB path and quantize run as compiled loops; every value must be the
    # one the numpy steps give (numpy: the general-purpose reference), NaN, infinities,
    # negative and over-range values, alpha 0 and the sRGB knee included.
    rng = np.random.default_rng(19)
    img = rng.uniform(-0.2, 1.3, (61, 67, 4)).astype(np.float32)
    img[..., 3] = rng.choice([0.0, 1e-8, 0.3, 1.0, 1.2, -0.1], img.shape[:2]) * rng.uniform(0.5, 1, img.shape[:2])
    img[0, :4, :3] = np.float32(0.0031308)  # exactly at the knee: the linear segment
    img[0, :4, 3] = 1.0
    for value in (np.nan, np.inf, -np.inf):
        img.flat[rng.integers(0, img.size, 25)] = value
    for color, alpha in (("srgb", "straight"), ("srgb", "premultiplied"), ("linear", "straight")):
        for exposure in (0.0, 1.5):
            got = to_display(img, alpha=alpha, exposure=exposure, color=color)
            want = _display_chain(img, alpha, exposure, color)
            assert got.dtype == np.float32
            np.testing.assert_array_equal(got, want)  # NaN where NaN
            for bits, top in ((8, 255.0), (16, 65535.0)):
                ref = np.floor(np.clip(np.nan_to_num(want.astype(np.float64), nan=0.0), 0, 1) * top + 0.5)
                np.testing.assert_array_equal(quantize(got, bits), ref)
    assert to_display(img)[0, 0, 0] == pytest.approx(12.92 * 0.0031308, rel=1e-6)


def test_dilation_matches_exact_nearest_texel():
    # Reference: scipy's exact Euclidean distance transform gives the distance
    # to the nearest covered texel (ours is a separate implementation after
    # Felzenszwalb and Huttenlocher, Theory of Computing 8, 2012); the texel we copy from must be at that
    # distance (ties may pick a different texel at the same distance).
    rng = np.random.default_rng(3)
    h, w = 97, 130
    img = np.zeros((h, w, 4), np.float32)
    covered = rng.random((h, w)) < 0.004
    covered[40:50, 60:75] = True
    img[covered, :3] = rng.random((covered.sum(), 3))
    img[covered, 3] = rng.uniform(0.1, 1, covered.sum())
    out = dilate_colour(img)
    np.testing.assert_array_equal(out[covered], img[covered])  # covered unchanged
    np.testing.assert_array_equal(out[..., 3], img[..., 3])  # alpha unchanged
    dist = ndimage.distance_transform_edt(~covered)
    # Recover which texel was copied: every covered colour is unique.
    lookup = {tuple(img[r, c, :3]): (r, c) for r, c in zip(*np.nonzero(covered))}
    rr, cc = np.mgrid[0:h, 0:w]
    got = np.zeros((h, w))
    for r, c in zip(*np.nonzero(~covered)):
        sr, sc = lookup[tuple(out[r, c, :3])]
        got[r, c] = np.hypot(sr - r, sc - c)
    # The separable transform is exact: every copied texel is a nearest one.
    np.testing.assert_allclose(got[~covered], dist[~covered], atol=1e-9)


def test_dilation_edge_cases():
    empty = np.zeros((5, 5, 4), np.float32)
    np.testing.assert_array_equal(dilate_colour(empty), empty)  # fully transparent stays 0
    one = empty.copy()
    one[2, 3] = (0.2, 0.4, 0.6, 1.0)
    out = dilate_colour(one)
    np.testing.assert_allclose(out[..., :3], np.broadcast_to([0.2, 0.4, 0.6], (5, 5, 3)))
    np.testing.assert_array_equal(out[..., 3], one[..., 3])
    # Ties: a texel equally far from two covered texels takes the first in scan
    # order (left in a row, upper in a column), hand-checked, so the fill is a
    # fixed rule rather than whatever a run happens to pick.
    row = np.zeros((1, 5, 4), np.float32)
    row[0, 0], row[0, 4] = (1, 0, 0, 1), (0, 0, 1, 1)
    np.testing.assert_array_equal(dilate_colour(row)[0, :, :3],
                                  [[1, 0, 0], [1, 0, 0], [1, 0, 0], [0, 0, 1], [0, 0, 1]])
    col = row.transpose(1, 0, 2).copy()
    np.testing.assert_array_equal(dilate_colour(col)[:, 0, :3],
                                  [[1, 0, 0], [1, 0, 0], [1, 0, 0], [0, 0, 1], [0, 0, 1]])
    with pytest.raises(ValueError, match="mask"):
        dilate_colour(row, mask=np.ones((3, 3), bool))


def test_dilation_does_not_depend_on_thread_count():
    from lookfiles import on_each_thread_count

    rng = np.random.default_rng(9)
    img = np.where(rng.random((64, 80, 1)) < 0.01, rng.random((64, 80, 4)), 0).astype(np.float32)
    one, *more = on_each_thread_count(lambda: dilate_colour(img))
    for many in more:
        np.testing.assert_array_equal(one, many)


def test_encode_signed():
    # 0.5 + 0.5 clamp(d / s, -1, 1) (common practice for motion maps)
    out = encode_signed(np.array([0.0, 0.01, -0.02, 0.5]), 0.02)
    np.testing.assert_allclose(out, [0.5, 0.75, 0.0, 1.0])
    with pytest.raises(ValueError, match="strength"):
        encode_signed(np.zeros(2), 0.0)


def test_encode_depth():
    out = encode_depth(np.array([2.0, 6.0, 10.0, 12.0, np.inf, np.nan]), 2.0, 10.0)
    np.testing.assert_allclose(out, [0.0, 0.5, 1.0, 1.0, 1.0, 1.0])
    with pytest.raises(ValueError, match="near"):
        encode_depth(np.zeros(2), 5.0, 5.0)


def test_encode_normal():
    # glTF 2.0: flat normal (0, 0, 1) -> (0.5, 0.5, 1.0); +Y up. (Y-down is
    # flipped before encoding: tests/test_engine_maps.py.)
    n = np.array([[0.0, 0.0, 1.0], [0.0, 1.0, 0.0], [1.0, 0.0, 0.0]])
    np.testing.assert_allclose(encode_normal(n), [[0.5, 0.5, 1.0], [0.5, 1.0, 0.5], [1.0, 0.5, 0.5]])
    with pytest.raises(ValueError, match="n"):
        encode_normal(np.zeros((2, 2)))

"""PNG write/read-back: chunks, bit depths, straight alpha, sRGB codes."""

import os
import struct
import zlib

import numpy as np
import pytest
from PIL import Image

from splatter.deliver.png import (
    read_png,
    read_png_linear,
    write_png,
    write_png_encoded,
    write_png_map,
)


def _chunks(path):
    """Tiny independent PNG chunk parser (W3C PNG spec, "Chunk layout")."""
    blob = open(path, "rb").read()
    assert blob[:8] == b"\x89PNG\r\n\x1a\n"
    pos, out = 8, []
    while pos < len(blob):
        n = struct.unpack(">I", blob[pos : pos + 4])[0]
        kind, data = blob[pos + 4 : pos + 8], blob[pos + 8 : pos + 8 + n]
        crc = struct.unpack(">I", blob[pos + 8 + n : pos + 12 + n])[0]
        assert crc == zlib.crc32(kind + data) & 0xFFFFFFFF
        out.append((kind.decode(), data))
        pos += 12 + n
    return out


def _premult(straight_rgb, a):
    h, w = a.shape
    out = np.zeros((h, w, 4), np.float32)
    out[..., :3] = straight_rgb * a[..., None]
    out[..., 3] = a
    return out


def test_srgb_codes(tmp_path):
    # IEC 61966-2-1: linear 0.0031308, 0.01, 0.18, 0.5, 1.0 -> 8-bit codes 10, 25, 118, 188, 255.
    lin = np.array([0.0031308, 0.01, 0.18, 0.5, 1.0], np.float32)
    img = _premult(np.repeat(lin[None, :, None], 3, axis=2), np.ones((1, 5), np.float32))
    p = tmp_path / "codes.png"
    write_png(p, img)
    px = np.asarray(Image.open(p))
    np.testing.assert_array_equal(px[0, :, 0], [10, 25, 118, 188, 255])
    np.testing.assert_array_equal(px[0, :, 3], 255)


def test_premultiplied_input_written_as_straight(tmp_path):
    # W3C PNG spec (third edition), "Alpha representation": PNG alpha is
    # unassociated. Premultiplied 0.25 at alpha 0.5 is straight 0.5 -> code 188 (IEC 61966-2-1).
    img = np.zeros((2, 3, 4), np.float32)
    img[..., 0] = 0.25
    img[..., 3] = 0.5
    img[1, 2] = 0.0  # alpha 0 -> colour 0
    p = tmp_path / "s.png"
    write_png(p, img)
    px = np.asarray(Image.open(p))
    assert tuple(px[0, 0]) == (188, 0, 0, 128)
    assert tuple(px[1, 2]) == (0, 0, 0, 0)


def test_premultiplied_option_stores_encoded_times_alpha(tmp_path):
    # Convention for premultiplied 8-bit textures (common practice): srgb(straight) * alpha.
    img = np.zeros((1, 1, 4), np.float32)
    img[..., 0] = 0.25
    img[..., 3] = 0.5
    p = tmp_path / "pm.png"
    write_png(p, img, alpha="premultiplied")
    px = np.asarray(Image.open(p))
    assert tuple(px[0, 0]) == (int(np.floor(0.7353570 * 0.5 * 255 + 0.5)), 0, 0, 128)
    # and reads back to the same linear premultiplied value
    back = read_png_linear(p)
    assert back[0, 0, 0] == pytest.approx(0.25, abs=3e-3)


@pytest.mark.parametrize("bits", [8, 16])
def test_mode_bit_depth_and_colour_chunks(tmp_path, bits):
    img = _premult(np.full((4, 6, 3), 0.18, np.float32), np.linspace(0, 1, 24, dtype=np.float32).reshape(4, 6))
    p = tmp_path / f"c{bits}.png"
    write_png(p, img, bits=bits)
    chunks = _chunks(p)
    kinds = [k for k, _ in chunks]
    # W3C PNG spec: IHDR first, IEND last, colour chunks before IDAT.
    assert kinds[0] == "IHDR" and kinds[-1] == "IEND"
    assert kinds.index("sRGB") < kinds.index("IDAT") and kinds.index("gAMA") < kinds.index("IDAT")
    w, h, depth, ctype = struct.unpack(">IIBB", chunks[0][1][:10])
    assert (w, h, depth, ctype) == (6, 4, bits, 6)  # colour type 6 = RGBA
    d = dict(chunks)
    # W3C PNG spec, sRGB/gAMA/cHRM: intent 0 (perceptual), gAMA 45455, cHRM as advised.
    assert d["sRGB"] == bytes([0])
    assert struct.unpack(">I", d["gAMA"])[0] == 45455
    assert struct.unpack(">8I", d["cHRM"]) == (31270, 32900, 64000, 33000, 30000, 60000, 15000, 6000)
    im = Image.open(p)
    assert im.mode == "RGBA"  # Pillow reads 16-bit RGBA as 8-bit RGBA (observed with Pillow 10-13; from memory)
    assert im.info["srgb"] == 0 and im.info["gamma"] == pytest.approx(0.45455)
    codes, info = read_png(p)
    assert codes.dtype == (np.uint8 if bits == 8 else np.uint16) and info["bit_depth"] == bits
    # Pillow keeps the high byte of 16-bit samples (observed, from memory): an independent decode check.
    hi = codes if bits == 8 else (codes >> 8)
    np.testing.assert_array_equal(np.asarray(im), hi)


def test_16_bit_precision(tmp_path):
    # 16-bit: linear 0.18 -> sRGB 0.4613561 (IEC 61966-2-1) -> code round(65535 V) = 30235.
    img = _premult(np.full((1, 1, 3), 0.18, np.float32), np.ones((1, 1), np.float32))
    p = tmp_path / "p16.png"
    write_png(p, img, bits=16)
    codes, _ = read_png(p)
    assert codes[0, 0, 0] == int(np.floor(0.4613561 * 65535 + 0.5))
    back = read_png_linear(p)
    assert back[0, 0, 0] == pytest.approx(0.18, rel=1e-4)


def test_maps_have_no_colour_chunks(tmp_path):
    p = tmp_path / "normal.png"
    write_png_map(p, np.full((3, 3, 3), 0.5, np.float32))
    kinds = [k for k, _ in _chunks(p)]
    assert "sRGB" not in kinds and "gAMA" not in kinds and "cHRM" not in kinds
    assert Image.open(p).mode == "RGB"


@pytest.mark.parametrize("c, mode", [(1, "L"), (2, "LA"), (3, "RGB"), (4, "RGBA")])
def test_random_codes_roundtrip_through_pillow(tmp_path, c, mode):
    # Pillow as an independent decoder of our Paeth-filtered rows.
    a = np.random.default_rng(c).integers(0, 256, (301, 19, c)).astype(np.uint8)
    p = tmp_path / "r.png"
    write_png_encoded(p, a)
    im = Image.open(p)
    assert im.mode == mode
    np.testing.assert_array_equal(np.asarray(im).reshape(a.shape), a)
    np.testing.assert_array_equal(read_png(p)[0], a)


def test_reads_pillow_written_files(tmp_path):
    # Pillow chooses its own filters: exercises every unfilter path.
    a = np.random.default_rng(7).integers(0, 256, (40, 33, 4)).astype(np.uint8)
    a[:20] = a[:20] // 16  # smooth part, so adaptive filtering picks other types
    p = tmp_path / "pil.png"
    Image.fromarray(a, "RGBA").save(p, optimize=True)
    np.testing.assert_array_equal(read_png(p)[0], a)


def test_bad_input_writes_nothing(tmp_path):
    with pytest.raises(ValueError, match="bits"):
        write_png(tmp_path / "x.png", np.zeros((2, 2, 4), np.float32), bits=12)
    with pytest.raises(ValueError, match="alpha"):
        write_png(tmp_path / "x.png", np.zeros((2, 2, 4), np.float32), alpha="associated")
    with pytest.raises(TypeError, match="array"):
        write_png_encoded(tmp_path / "x.png", np.zeros((2, 2, 4), np.float32))
    assert os.listdir(tmp_path) == []


def _slow_filtered_png(codes):
    """Reference encoder in plain Python: rows use filter types 0, 1, 2, 3, 4 in turn
    (W3C PNG spec, "Filter algorithms"), so every unfilter path is exercised."""
    h, w, c = codes.shape
    depth = 16 if codes.dtype == np.uint16 else 8
    raw = np.ascontiguousarray(codes.astype(">u2") if depth == 16 else codes).view(np.uint8).reshape(h, -1)
    bpp = c * depth // 8
    rows = [list(map(int, r)) for r in raw]
    out = bytearray()
    for y, row in enumerate(rows):
        ftype = y % 5
        prior = rows[y - 1] if y else [0] * len(row)
        out.append(ftype)
        for i, x in enumerate(row):
            a = row[i - bpp] if i >= bpp else 0
            b = prior[i]
            cc = prior[i - bpp] if i >= bpp else 0
            if ftype == 0:
                pred = 0
            elif ftype == 1:
                pred = a
            elif ftype == 2:
                pred = b
            elif ftype == 3:
                pred = (a + b) // 2
            else:
                p = a + b - cc
                pa, pb, pc = abs(p - a), abs(p - b), abs(p - cc)
                pred = a if (pa <= pb and pa <= pc) else (b if pb <= pc else cc)
            out.append((x - pred) & 0xFF)

    def chunk(kind, data):
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)

    ctype = {1: 0, 2: 4, 3: 2, 4: 6}[c]
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, depth, ctype, 0, 0, 0))
            + chunk(b"IDAT", zlib.compress(bytes(out))) + chunk(b"IEND", b""))


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16])
def test_reader_undoes_every_filter_type(tmp_path, dtype):
    rng = np.random.default_rng(11)
    codes = rng.integers(0, np.iinfo(dtype).max + 1, (11, 9, 4)).astype(dtype)
    p = tmp_path / "filters.png"
    p.write_bytes(_slow_filtered_png(codes))
    np.testing.assert_array_equal(read_png(p)[0], codes)
    hi = codes if dtype == np.uint8 else (codes >> 8)
    np.testing.assert_array_equal(np.asarray(Image.open(p)), hi)  # Pillow agrees: the reference is right

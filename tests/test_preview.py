"""Previews: GIF and MP4 read back with imageio, contact sheet, checker compositing."""

import imageio.v2 as iio2
import imageio.v3 as iio
import numpy as np
import pytest
from PIL import Image

from splatter.deliver.preview import (
    Mp4Stream,
    write_gif_codes,
    over_checker,
    write_contact_sheet,
    write_gif,
    write_mp4,
)


def _clip(n=9, h=32, w=48):
    out = []
    for k in range(n):
        f = np.zeros((h, w, 4), np.float32)
        f[6:22, 2 + 3 * k : 14 + 3 * k] = (0.3, 0.25, 0.2, 0.6)  # a moving puff, premultiplied
        out.append(f)
    return out


def test_over_checker_is_porter_duff_over_in_linear():
    # Porter & Duff 1984, premultiplied over: C = Ca + (1 - aa) Cb, in linear
    # light, then sRGB (IEC 61966-2-1) rounded half up. Expected codes worked
    # out by hand, not with the product's checker or encoder: the checker's
    # greys are sRGB codes 102 and 153 (linear 0.1328683 and 0.3185468 by the
    # IEC decode), squares of max(4, 16 // 16) = 4 px, darker at the top left.
    # Over the dark square: linear (0.2, 0.1, 0.05) + 0.5 * 0.1328683 encodes to
    # 255 V = (141.02, 113.42, 95.79); over the light one (161.59, 139.27, 126.18).
    f = np.zeros((16, 16, 4), np.float32)
    f[...] = (0.2, 0.1, 0.05, 0.5)
    got = over_checker(f)
    rows, cols = np.indices((16, 16)) // 4
    dark = ((rows + cols) % 2 == 0)[..., None]
    want = np.where(dark, [141, 113, 96], [162, 139, 126])
    np.testing.assert_array_equal(got, want)
    # A transparent frame shows the checker itself: codes 102 and 153, neutral.
    clear = over_checker(np.zeros((16, 16, 4), np.float32), square=4)
    np.testing.assert_array_equal(clear, np.where(dark, 102, 153).repeat(3, axis=2))


def test_gif_frame_count_and_loop(tmp_path):
    p = tmp_path / "harbour.gif"
    write_gif(p, _clip(), fps=25)
    frames = iio.imread(p, index=None)
    assert frames.shape[:3] == (9, 32, 48)
    meta = iio.immeta(p)
    # The NETSCAPE2.0 application extension with loop count 0 = repeat forever:
    # not in the GIF89a specification itself, common practice (from memory).
    assert meta["loop"] == 0
    assert meta["duration"] == 40  # 1/25 s
    assert Image.open(p).n_frames == 9


@pytest.mark.parametrize("fps", [30.0, 24.0, 12.0, 25.0])
def test_gif_plays_at_the_clip_rate(tmp_path, fps):
    # GIF89a delays are whole centiseconds (GIF89a specification, section 23,
    # "Delay Time"); a 30 fps GIF with 30 ms frames played 11 % fast. Read
    # back with Pillow, the delays must add up to the clip's length to within
    # half a centisecond, and no frame may be shorter than 20 ms (browsers
    # play shorter delays at 100 ms; common practice).
    n = 30
    rng = np.random.default_rng(1)
    codes = [rng.integers(0, 256, (8, 8, 3), dtype=np.uint8) for _ in range(n)]  # distinct: no frames merged
    p = tmp_path / "rate.gif"
    write_gif_codes(p, codes, fps)
    im = Image.open(p)
    delays = []
    for i in range(im.n_frames):
        im.seek(i)
        delays.append(im.info["duration"])
    assert len(delays) == n and min(delays) >= 20
    assert abs(sum(delays) - 1000.0 * n / fps) <= 5.0


def test_mp4_frame_count_even_size(tmp_path):
    p = tmp_path / "harbour.mp4"
    # yuv420p halves the chroma in both directions, so H.264 encoders want even
    # sizes (common practice, from memory): odd size -> padded to even.
    write_mp4(p, _clip(h=31, w=47), fps=24)
    r = iio2.get_reader(p)
    try:
        assert r.count_frames() == 9
        meta = r.get_meta_data()
        assert meta["size"] == (48, 32) and meta["fps"] == pytest.approx(24)
        assert "yuv420p" in meta["pix_fmt"]
    finally:
        r.close()
    write_mp4(p, _clip(), fps=24, repeat=3)
    r = iio2.get_reader(p)
    try:
        assert r.count_frames() == 27
    finally:
        r.close()


def test_contact_sheet(tmp_path):
    p = tmp_path / "contact.png"
    frames = _clip(n=10)
    write_contact_sheet(p, frames, columns=5)
    im = Image.open(p)
    assert im.mode == "RGB" and im.size[0] >= 5 * 48 and im.size[1] >= 2 * 32
    a = np.asarray(im)
    unlabelled = tmp_path / "plain.png"
    write_contact_sheet(unlabelled, frames, columns=5, label=False)
    b = np.asarray(Image.open(unlabelled))
    assert (a != b).any()  # labels were drawn
    # away from the label, frame 7 appears as over_checker(frame 7) at cell (row 1, col 2)
    x0, y0 = 2 * (48 + 4) + 2, 1 * (32 + 4) + 2
    np.testing.assert_array_equal(b[y0 + 16 : y0 + 32, x0 : x0 + 48], over_checker(frames[7])[16:])


def test_contact_sheet_labels_the_frame_numbers_given(tmp_path):
    # A render of frames 10..19 labels its cells 10..19, not 0..9.
    frames = _clip(n=10)
    default = np.asarray(Image.open(write_contact_sheet(tmp_path / "a.png", frames, columns=5)))
    same = np.asarray(Image.open(write_contact_sheet(tmp_path / "b.png", frames, columns=5, numbers=range(10))))
    later = np.asarray(Image.open(write_contact_sheet(tmp_path / "c.png", frames, columns=5, numbers=range(10, 20))))
    np.testing.assert_array_equal(default, same)
    assert (later != default).any()
    # Only the label corners change; the frames themselves do not.
    x0, y0 = 2 * (48 + 4) + 2, 1 * (32 + 4) + 2
    np.testing.assert_array_equal(later[y0 + 16 : y0 + 32, x0 : x0 + 48], default[y0 + 16 : y0 + 32, x0 : x0 + 48])
    with pytest.raises(ValueError, match="numbers"):
        write_contact_sheet(tmp_path / "d.png", frames, numbers=[1, 2])


def test_bad_input(tmp_path):
    with pytest.raises(ValueError, match="fps"):
        write_gif(tmp_path / "x.gif", _clip(), fps=0)
    with pytest.raises(ValueError, match="frames"):
        write_gif(tmp_path / "x.gif", [], fps=10)
    with pytest.raises(ValueError, match=r"frames\[1\]"):
        write_gif(tmp_path / "x.gif", [np.zeros((8, 8, 4)), np.zeros((8, 10, 4))], fps=10)
    assert list(tmp_path.iterdir()) == []


def _moving_codes(k, h=32, w=48):
    """Frame k of a clip whose frames all differ: a bright block moving right over a gradient."""
    yy, xx = np.mgrid[0:h, 0:w]
    f = np.stack([xx * 4, yy * 6, np.full_like(xx, 90)], -1).astype(np.uint8)
    f[8:24, 3 * k : 3 * k + 10] = (230, 200, 60)
    return f


def test_mp4_stream_pipes_each_frame_at_once_and_writes_the_whole_clip_bytes(tmp_path):
    # Streaming: every frame is handed to ffmpeg when it comes, so the caller may
    # reuse its buffer at once (a writer that kept references until the end would
    # write the last frame nine times). The file must equal the one written by
    # imageio's ffmpeg writer from the whole clip at once (libx264 with the same
    # input and settings is deterministic); decoded frames match the inputs within
    # yuv420p/H.264 noise and each is nearest its own input.
    frames = [_moving_codes(k) for k in range(9)]
    stream = Mp4Stream(tmp_path / "quay.mp4", 24)
    buffer = np.empty_like(frames[0])
    for f in frames:
        buffer[...] = f
        stream.add(buffer)
    stream.write()
    ref = iio2.get_writer(tmp_path / "whole.mp4", format="FFMPEG", mode="I", fps=24, codec="libx264", quality=8,
                          pixelformat="yuv420p", macro_block_size=1, ffmpeg_log_level="error")
    for f in frames:
        ref.append_data(f)
    ref.close()
    assert (tmp_path / "quay.mp4").read_bytes() == (tmp_path / "whole.mp4").read_bytes()
    decoded = list(iio.imiter(tmp_path / "quay.mp4"))
    assert len(decoded) == 9
    for k, d in enumerate(decoded):
        err = [np.abs(d.astype(int) - f.astype(int)).mean() for f in frames]
        assert err[k] < 4.0 and int(np.argmin(err)) == k
    assert sorted(p.name for p in tmp_path.iterdir()) == ["quay.mp4", "whole.mp4"]  # no temporary left


def test_an_aborted_mp4_stream_leaves_no_file_and_the_old_one_untouched(tmp_path):
    target = tmp_path / "quay.mp4"
    target.write_bytes(b"an earlier preview")
    stream = Mp4Stream(target, 24)
    for k in range(4):
        stream.add(_moving_codes(k))
    stream.abort()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["quay.mp4"]
    assert target.read_bytes() == b"an earlier preview"

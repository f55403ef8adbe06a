"""Previews for people, not engines: looping GIF, MP4 and a labelled contact sheet.

Every preview shows the frames over a neutral grey checker so that alpha is
visible: the premultiplied linear frame is composited over the checker in
linear light (``C = C_frame + (1 - a) C_checker``, Porter-Duff over) and the
result is sRGB-encoded (IEC 61966-2-1) to 8 bits.
"""

from __future__ import annotations

import os

import numpy as np
from PIL import Image, ImageDraw, ImageFont

from splatter.core.args import check_image, check_positive
from splatter.core.colorspace import srgb_decode, srgb_encode
from splatter.deliver.display import quantize
from splatter.deliver.fileio import atomic_path
from splatter.deliver.png import write_png_encoded
from splatter.deliver.sheet import sheet_layout

__all__ = ["gif_delays", "gif_frame", "write_gif_codes", "ContactSheet", "Mp4Stream", "write_mp4_codes", "write_contact_codes", "checker", "over_checker", "write_gif", "write_mp4", "write_contact_sheet"]

# Two neutral greys, given as sRGB code values (102 and 153 of 255) so the
# checker looks even on screen; composited in linear light.
_CHECKER_CODES = (102, 153)


def checker(height, width, *, square=None):
    """A neutral grey checkerboard in linear light.

    Parameters
    ----------
    height, width : int
        Image size.
    square : int, optional
        Side of one square in pixels; default ``max(4, min(height, width) // 16)``.

    Returns
    -------
    (height, width) float32 ndarray
        Linear grey levels (sRGB codes 102 and 153, decoded); the top-left
        square is the darker one.
    """
    if square is None:
        square = max(4, min(height, width) // 16)
    lo, hi = srgb_decode(np.array(_CHECKER_CODES, np.float64) / 255.0)
    rr = np.arange(height)[:, None] // square
    cc = np.arange(width)[None, :] // square
    return np.where((rr + cc) % 2 == 0, lo, hi).astype(np.float32)


def over_checker(rgba_premult_linear, *, exposure=0.0, square=None):
    """Composite a premultiplied linear frame over the checker; return sRGB codes.

    Parameters
    ----------
    rgba_premult_linear : (H, W, 4) float ndarray
        Linear premultiplied RGBA.
    exposure : float
        Stops applied to the frame's colour (not to the checker).
    square : int, optional
        Checker square size, see :func:`checker`.

    Returns
    -------
    (H, W, 3) uint8 ndarray
        sRGB-encoded, rounded half up.
    """
    f = check_image(np.asarray(rgba_premult_linear, dtype=np.float32), "rgba_premult_linear")
    bg = checker(f.shape[0], f.shape[1], square=square)
    a = np.clip(f[..., 3:4], 0.0, 1.0)
    lin = f[..., :3] * np.float32(2.0 ** float(exposure)) + (1.0 - a) * bg[..., None]
    return quantize(srgb_encode(np.clip(lin, 0.0, 1.0)), 8)


def _preview_frames(frames, exposure, even=False):
    """sRGB codes of every frame over the checker; optionally padded to even size."""
    out = []
    for k, f in enumerate(frames):
        f = check_image(np.asarray(f, dtype=np.float32), f"frames[{k}]")
        if even and (f.shape[0] % 2 or f.shape[1] % 2):
            # yuv420p needs even sizes: extend with transparent texels (the checker shows).
            f = np.pad(f, ((0, f.shape[0] % 2), (0, f.shape[1] % 2), (0, 0)))
        if out and f.shape[:2] != out[0].shape[:2]:
            raise ValueError(f"frames[{k}]: shape {f.shape[:2]} differs from frame 0 {out[0].shape[:2]}")
        out.append(over_checker(f, exposure=exposure))
    if not out:
        raise ValueError("frames: expected at least one frame")
    return out


def write_gif(path, frames_premult_linear, fps, *, exposure=0.0):
    """Write an animated GIF that loops forever, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Target ``.gif`` file.
    frames_premult_linear : iterable of (H, W, 4) float ndarray
        Linear premultiplied RGBA frames, all the same size.
    fps : float
        Playback rate. GIF delays are whole centiseconds, so each frame's
        delay is rounded from its place on the clip's clock (see
        :func:`gif_delays`): 30 fps alternates 3 and 4 centiseconds and plays
        at 30 fps on average, not at 33.3.
    exposure : float
        Stops applied to the frames' colour.

    Returns
    -------
    str
        ``path``.

    Notes
    -----
    Written with Pillow: a palette of up to 256 colours per frame, the
    ``NETSCAPE2.0`` loop count 0 (forever). Pillow merges consecutive frames
    that are identical into one longer frame.
    """
    fps = check_positive(fps, "fps")
    return write_gif_codes(path, _preview_frames(frames_premult_linear, exposure), fps)


def gif_delays(n_frames, fps):
    """Each frame's GIF delay in milliseconds: whole centiseconds that keep to the clip's clock.

    Frame ``i`` shows from ``round(100 i / fps)`` to ``round(100 (i + 1) / fps)``
    centiseconds, so the delays sum to the clip's length (to half a
    centisecond) however the rate divides 100. Delays never go below 2
    centiseconds: browsers play shorter ones at 10 (common practice), so
    above 50 fps the GIF plays at 50 fps; nor above 65535, the largest the
    format's 16-bit field holds (GIF89a, section 23), so below 0.0015 fps a
    frame shows for 655 s.

    Examples
    --------
    >>> gif_delays(6, 30.0)
    [30, 40, 30, 30, 40, 30]
    >>> sum(gif_delays(24, 24.0)), sum(gif_delays(30, 30.0))  # one second each
    (1000, 1000)
    """
    fps = check_positive(fps, "fps")
    ends = [round(100.0 * (i + 1) / fps) for i in range(int(n_frames))]
    starts = [0] + ends[:-1]
    return [10 * min(65535, max(2, b - a)) for a, b in zip(starts, ends)]


def gif_frame(codes):
    """One GIF frame: ``(H, W, 3) uint8`` sRGB codes to a Pillow palette image.

    The adaptive palette (up to 256 colours) Pillow's GIF writer would pick
    for the frame itself, so a clip's frames can be kept at one byte a pixel
    as they come and written later by :func:`write_gif_codes` to the same
    bytes.

    Returns
    -------
    PIL.Image.Image
        Mode ``"P"``.
    """
    return Image.fromarray(np.asarray(codes, dtype=np.uint8)).convert("P", palette=Image.Palette.ADAPTIVE)


def write_gif_codes(path, codes, fps, *, n_frames=None):
    """:func:`write_gif` from frames already over the checker.

    Parameters
    ----------
    path : str or os.PathLike
    codes : sequence or iterator
        ``(H, W, 3) uint8`` sRGB codes or palette images from
        :func:`gif_frame`, one per frame. An iterator is consumed one frame at
        a time (the writer then holds each frame once, as a palette image);
        give ``n_frames`` with it.
    fps : float
    n_frames : int, optional
        The number of frames; default ``len(codes)``.

    Returns
    -------
    str
        ``path``.
    """
    n = len(codes) if n_frames is None else int(n_frames)
    if n < 1:
        raise ValueError("frames: expected at least one frame")
    delays = gif_delays(n, fps)
    frames = (f if isinstance(f, Image.Image) else gif_frame(f) for f in codes)
    first = next(frames)
    # Pillow takes a list of delays for an animation, a number for a single frame.
    options = dict(format="GIF", duration=delays if n > 1 else delays[0], loop=0)
    if n > 1:
        options.update(save_all=True, append_images=frames)
    with atomic_path(path, suffix=".gif") as tmp:
        first.save(tmp, **options)
    return os.fspath(path)


def write_mp4(path, frames_premult_linear, fps, *, exposure=0.0, quality=8, repeat=1):
    """Write an H.264 MP4 (yuv420p) with the ffmpeg bundled by imageio-ffmpeg, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Target ``.mp4`` file.
    frames_premult_linear : iterable of (H, W, 4) float ndarray
        Linear premultiplied RGBA frames, all the same size. Odd sizes are
        extended by one transparent row/column (yuv420p needs even sizes).
    fps : float
        Frame rate.
    exposure : float
        Stops applied to the frames' colour.
    quality : float
        imageio-ffmpeg quality, 0 (worst) to 10 (best).
    repeat : int
        Times the clip is written in a row. MP4 has no loop flag: players
        (and browsers with ``<video loop>``) loop it; ``repeat > 1`` makes a
        longer file for players that do not.

    Returns
    -------
    str
        ``path``.
    """
    fps = check_positive(fps, "fps")
    if isinstance(repeat, bool) or not isinstance(repeat, int) or repeat < 1:
        raise ValueError(f"repeat: expected an integer >= 1, got {repeat!r}")
    if not 0 <= quality <= 10:
        raise ValueError(f"quality: expected a number from 0 to 10, got {quality!r}")
    return write_mp4_codes(path, _preview_frames(frames_premult_linear, exposure, even=True), fps, quality=quality,
                           repeat=repeat)


def write_mp4_codes(path, codes, fps, *, quality=8, repeat=1):
    """:func:`write_mp4` from frames already over the checker: an iterable of (H, W, 3) uint8 codes of even size."""
    if repeat > 1:
        codes = list(codes)  # played more than once: a generator would run dry after the first
    stream = Mp4Stream(path, fps, quality=quality)
    try:
        for _ in range(repeat):
            for c in codes:
                stream.add(c)
        return stream.write()
    except BaseException:
        stream.abort()
        raise


class Mp4Stream:
    """An H.264 MP4 (yuv420p) encoded as its frames come: each one is piped to ffmpeg at once.

    Nothing but ffmpeg's own look-ahead is held, so a long clip costs no more
    memory than a short one. The file is written under a hidden temporary
    name in the target's folder and renamed over ``path`` by :meth:`write`;
    :meth:`abort` stops ffmpeg and removes it, leaving no half-written file.
    The bytes are those of :func:`write_mp4_codes` with the same frames.

    Parameters
    ----------
    path : str or os.PathLike
        Target ``.mp4`` file; its folder must exist.
    fps : float
    quality : float
        imageio-ffmpeg quality, 0 (worst) to 10 (best).

    Examples
    --------
    >>> import tempfile
    >>> s = Mp4Stream(os.path.join(tempfile.mkdtemp(), "lamp.mp4"), 24)
    >>> for k in range(3):
    ...     s.add(np.full((16, 16, 3), 40 * k, np.uint8))
    >>> os.path.basename(s.write())
    'lamp.mp4'
    """

    def __init__(self, path, fps, *, quality=8):
        import imageio.v2 as iio2

        self.path = os.fspath(path)
        self._file = atomic_path(self.path, suffix=".mp4")
        tmp = self._file.__enter__()
        try:
            self._writer = iio2.get_writer(tmp, format="FFMPEG", mode="I", fps=fps, codec="libx264",
                                           quality=quality, pixelformat="yuv420p", macro_block_size=1,
                                           ffmpeg_log_level="error")
        except BaseException as err:
            self._file.__exit__(type(err), err, err.__traceback__)
            raise

    def add(self, code):
        """Encode the next frame: (H, W, 3) uint8 codes, every frame the same even size."""
        self._writer.append_data(code)

    def write(self):
        """Finish the file and put it in place; return its path."""
        try:
            self._writer.close()
        except BaseException as err:
            self._file.__exit__(type(err), err, err.__traceback__)
            raise
        self._file.__exit__(None, None, None)
        return self.path

    def abort(self):
        """Stop ffmpeg and remove the unfinished file (the target is left as it was)."""
        err = RuntimeError("MP4 preview aborted")
        try:
            self._writer.close()
        except Exception:  # ffmpeg may already be gone; the file goes either way
            pass
        self._file.__exit__(RuntimeError, err, None)


def write_contact_sheet(path, frames_premult_linear, *, columns=None, label=True, numbers=None, exposure=0.0,
                        gap=2):
    """Write all frames on one PNG, over the checker, each labelled with its number.

    Parameters
    ----------
    path : str or os.PathLike
        Target ``.png`` file.
    frames_premult_linear : sequence of (H, W, 4) float ndarray
        Linear premultiplied RGBA frames, all the same size.
    columns : int, optional
        Grid columns; default near-square (see :func:`splatter.deliver.sheet.sheet_layout`).
    label : bool
        Draw the frame number at the top-left of each frame (Pillow's default font).
    numbers : sequence of int, optional
        The frame numbers to draw, one per frame (a render of frames 10 to 15
        labels them 10 to 15); default 0, 1, 2, ...
    exposure : float
        Stops applied to the frames' colour.
    gap : int
        Pixels of mid grey around each frame.

    Returns
    -------
    str
        ``path``.
    """
    return write_contact_codes(path, _preview_frames(frames_premult_linear, exposure), columns=columns, label=label,
                               numbers=numbers, gap=gap)


def write_contact_codes(path, codes, *, columns=None, label=True, numbers=None, gap=2):
    """:func:`write_contact_sheet` from frames already over the checker: a list of (H, W, 3) uint8 codes."""
    if numbers is None:
        numbers = range(len(codes))
    numbers = [int(k) for k in numbers]
    if len(numbers) != len(codes):
        raise ValueError(f"numbers: expected {len(codes)} frame numbers, got {len(numbers)}")
    h, w = codes[0].shape[:2]
    sheet = ContactSheet(numbers, h, w, columns=columns, label=label, gap=gap)
    for k, c in enumerate(codes):
        sheet.put(k, c)
    return sheet.write(path)


class ContactSheet:
    """A contact sheet filled frame by frame: memory is the finished 8-bit image.

    Parameters
    ----------
    numbers : sequence of int
        The frame number drawn on each cell, one per frame.
    height, width : int
        Size of every frame's codes.
    columns, label, gap
        As for :func:`write_contact_sheet`.

    Examples
    --------
    >>> import os, tempfile
    >>> sheet = ContactSheet([7, 8], 16, 16)
    >>> for k in range(2):
    ...     sheet.put(k, np.zeros((16, 16, 3), np.uint8))
    >>> os.path.basename(sheet.write(os.path.join(tempfile.mkdtemp(), "contact.png")))
    'contact.png'
    """

    def __init__(self, numbers, height, width, *, columns=None, label=True, gap=2):
        self.numbers = [int(k) for k in numbers]
        self.label = label
        self.layout = sheet_layout(len(self.numbers), width, height, columns=columns, padding=gap)
        self.image = np.full((self.layout.height, self.layout.width, 3), 128, dtype=np.uint8)
        self._placed = 0

    def put(self, k, codes):
        """Place frame ``k``'s ``(height, width, 3) uint8`` codes in its cell."""
        cell = self.layout.cells[k]
        self.image[cell.y : cell.y + cell.h, cell.x : cell.x + cell.w] = codes
        self._placed += 1

    def write(self, path):
        """Label the cells (once every frame is in) and write the PNG atomically; return ``path``."""
        if self._placed != len(self.numbers):
            raise RuntimeError(f"the contact sheet has {len(self.numbers)} cells, {self._placed} came")
        if self.label:
            self._draw_labels()
        return write_png_encoded(path, self.image, srgb=True, text={"Software": "splatter"})

    def _draw_labels(self):
        """Each frame number, white on a black box at its cell's top-left, drawn in frame order.

        Drawn on a small copy of the box's pixels, not on a Pillow copy of
        the whole sheet; a box that reaches into a neighbouring cell
        (tiny frames) covers it exactly as a drawing on the whole sheet would.
        """
        font = ImageFont.load_default()
        measure = ImageDraw.Draw(Image.new("RGB", (1, 1)))
        height, width = self.image.shape[:2]
        for cell, number in zip(self.layout.cells, self.numbers):
            text, at = str(number), (cell.x + 2, cell.y + 1)
            x0, y0, x1, y1 = measure.textbbox(at, text, font=font)
            box = (x0 - 1, y0 - 1, x1 + 1, y1 + 1)
            left, top = max(box[0], 0), max(box[1], 0)
            right, bottom = min(box[2] + 1, width), min(box[3] + 1, height)
            if right <= left or bottom <= top:
                continue
            part = Image.fromarray(self.image[top:bottom, left:right])
            draw = ImageDraw.Draw(part)
            draw.rectangle((box[0] - left, box[1] - top, box[2] - left, box[3] - top), fill=(0, 0, 0))
            draw.text((at[0] - left, at[1] - top), text, fill=(255, 255, 255), font=font)
            self.image[top:bottom, left:right] = np.asarray(part)

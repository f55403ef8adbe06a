"""Measure how much small-scale detail a look's frames and the swirl field carry.

Look mode (the default) renders one mid-clip frame of each look at
``--size`` x ``--size`` through the command line (float EXR frames only: no
sheet, preview or maps), reads its alpha and prints per look:

* outline dimension: box-counting dimension of the 10 %, 30 % and 50 % alpha
  contours over boxes of 2, 4, 8, 16 and 32 px, and their mean (a smooth
  disc's outline gives 0.95, a ragged outline more); also the mean with
  two-sided contours, which read about 0.12 higher (see ``contour_mask``);
* fine-detail energy: RMS of ``alpha - blur(alpha, 2 px)`` over covered
  pixels (alpha > 0.02), divided by their mean alpha;
* isotropic dots per 1000 covered pixels: local alpha maxima with a clear
  fine-scale bump whose neighbourhood has no dominant orientation (round
  specks rather than wisps).

``--png DIR`` also writes each frame over a dark and a light background, side
by side, to look at.

Swirl mode (``--swirl``) measures the second-order velocity structure function
``S2(r) = <|u(x + r) - u(x)|^2>`` of a 6-octave swirl field of scale 1 and
prints its local log-log slope per octave of separation and the slope fitted
over ``r = 0.06 .. 0.5`` of the largest scale.  In the inertial range of a
Kolmogorov field the slope is 2/3; a smooth field gives 2 at small ``r``.

    python scripts/measure_detail.py [LOOK ...] [--frame K] [--size 512]
        [--set KEY=VALUE ...] [--png DIR] [--json FILE]
    python scripts/measure_detail.py --swirl [--pairs N] [--seed N] [--below N]
        [--json FILE]
    python scripts/measure_detail.py --self-test

The script imports and renders the ``splatter`` beside it (its parent folder
goes first on ``sys.path``; renders run ``python -m splatter`` from there), so
a checkout measures its own code rather than whatever copy is installed.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import subprocess
import sys
import tempfile
import tomllib
from pathlib import Path

import numpy as np
from scipy import ndimage

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

THRESHOLDS = (0.1, 0.3, 0.5)
BOX_SIZES = (2, 4, 8, 16, 32)
COVER = 0.02  # alpha above which a pixel counts as covered
BLUR_PX = 2.0  # the Gaussian that separates fine detail from the body
DOT_DETAIL = 0.03  # detail a local maximum needs to count as a dot
DOT_WINDOW = 5
COHERENCE_MAX = 0.5  # below this a dot's neighbourhood counts as not oriented
BACKGROUNDS = (0.1, 0.9)  # display (sRGB-encoded) greys of the two preview panels


# ---------------------------------------------------------------------------
# Image metrics


def contour_mask(alpha, threshold, sides="inner"):
    """Pixels on the ``threshold`` contour of ``alpha``.

    Parameters
    ----------
    alpha : (H, W) float ndarray
    threshold : float
    sides : {"inner", "both"}
        ``"inner"``: pixels with ``alpha >= threshold`` that have one of
        their four edge neighbours (inside the image) below it, the boundary
        of the region, a curve one pixel thick.  ``"both"``: every pixel
        whose ``alpha >= threshold`` differs from a 4-neighbour's, so the
        pixels just outside are marked too.

    Returns
    -------
    (H, W) bool ndarray

    Notes
    -----
    ``"inner"`` is the default because the two-sided band is two pixels
    thick: it adds boxes at the smallest sizes only, which steepens the fit.
    A filled disc of radius 150 px in 512 px gives 0.94-0.97 (mean 0.954 over
    sub-pixel centre offsets) with ``"inner"`` and 1.07-1.08 with ``"both"``,
    where a smooth outline should give 0.95-1.0 over boxes of 2-32 px.
    """
    inside = np.asarray(alpha) >= threshold
    edge = np.zeros_like(inside)
    dy = inside[1:, :] != inside[:-1, :]
    dx = inside[:, 1:] != inside[:, :-1]
    edge[1:, :] |= dy
    edge[:-1, :] |= dy
    edge[:, 1:] |= dx
    edge[:, :-1] |= dx
    if sides == "inner":
        return edge & inside
    if sides == "both":
        return edge
    raise ValueError(f"sides must be 'inner' or 'both', got {sides!r}")


def box_counts(mask, sizes=BOX_SIZES):
    """Number of ``s`` x ``s`` boxes of a grid from the top-left corner holding a True pixel.

    Parameters
    ----------
    mask : (H, W) bool ndarray
    sizes : sequence of int

    Returns
    -------
    (len(sizes),) int ndarray
    """
    mask = np.asarray(mask, dtype=bool)
    out = []
    for s in sizes:
        # Pad with False to whole boxes so any image size works.
        h = -(-mask.shape[0] // s) * s
        w = -(-mask.shape[1] // s) * s
        m = np.zeros((h, w), dtype=bool)
        m[: mask.shape[0], : mask.shape[1]] = mask
        out.append(int(m.reshape(h // s, s, w // s, s).any(axis=(1, 3)).sum()))
    return np.array(out)


def box_dimension(mask, sizes=BOX_SIZES):
    """Box-counting dimension of the True pixels of ``mask``.

    Minus the least-squares slope of ``log N(s)`` against ``log s``, with
    ``N(s)`` the boxes of side ``s`` that hold a True pixel.

    Parameters
    ----------
    mask : (H, W) bool ndarray
    sizes : sequence of int
        Box sides in pixels.

    Returns
    -------
    float
        NaN when the mask is empty.
    """
    n = box_counts(mask, sizes)
    if n.min() == 0:
        return float("nan")
    slope = np.polyfit(np.log(np.asarray(sizes, dtype=float)), np.log(n.astype(float)), 1)[0]
    return float(-slope)


def outline_dimensions(alpha, thresholds=THRESHOLDS, sizes=BOX_SIZES, sides="inner"):
    """Box-counting dimension of each alpha contour.

    Parameters
    ----------
    alpha : (H, W) float ndarray
    thresholds : sequence of float
    sizes : sequence of int
    sides : {"inner", "both"}
        Which pixels make the contour, see :func:`contour_mask`.

    Returns
    -------
    list of float
        One dimension per threshold (NaN for a contour with no pixels).
    """
    return [box_dimension(contour_mask(alpha, t, sides), sizes) for t in thresholds]


def fine_detail(alpha, sigma=BLUR_PX):
    """``alpha - gaussian_blur(alpha, sigma)``: the detail finer than ``sigma`` px.

    Parameters
    ----------
    alpha : (H, W) float ndarray
    sigma : float
        Gaussian standard deviation in pixels (edges reflected).

    Returns
    -------
    (H, W) float64 ndarray
    """
    a = np.asarray(alpha, dtype=np.float64)
    return a - ndimage.gaussian_filter(a, sigma)


def fine_detail_energy(alpha, sigma=BLUR_PX, cover=COVER):
    """RMS fine detail over covered pixels relative to their mean alpha.

    Parameters
    ----------
    alpha : (H, W) float ndarray
    sigma : float
        Blur in pixels that defines "fine".
    cover : float
        Pixels with ``alpha > cover`` are covered.

    Returns
    -------
    float
        ``rms(d[covered]) / mean(alpha[covered])`` with
        ``d = alpha - blur(alpha, sigma)``; NaN when nothing is covered.
    """
    a = np.asarray(alpha, dtype=np.float64)
    covered = a > cover
    if not covered.any():
        return float("nan")
    d = fine_detail(a, sigma)[covered]
    return float(np.sqrt(np.mean(d * d)) / a[covered].mean())


def coherence(field, sigma=BLUR_PX):
    """Orientation coherence of ``field`` from its smoothed structure tensor.

    ``J = blur(grad f grad f^T, sigma)`` with gradients by ``np.gradient``;
    with eigenvalues ``l1 >= l2`` of ``J`` the coherence is defined here as
    ``(l1 - l2) / (l1 + l2)`` (not squared): 0 for no preferred direction,
    1 for a pattern varying along one direction only (a wisp or an edge).

    Parameters
    ----------
    field : (H, W) float ndarray
    sigma : float
        Integration scale in pixels.

    Returns
    -------
    (H, W) float64 ndarray
        0 where the tensor vanishes (no gradient at all).
    """
    gy, gx = np.gradient(np.asarray(field, dtype=np.float64))
    jxx = ndimage.gaussian_filter(gx * gx, sigma)
    jxy = ndimage.gaussian_filter(gx * gy, sigma)
    jyy = ndimage.gaussian_filter(gy * gy, sigma)
    trace = jxx + jyy  # l1 + l2
    split = 2.0 * np.sqrt((0.5 * (jxx - jyy)) ** 2 + jxy * jxy)  # l1 - l2
    out = np.zeros_like(trace)
    ok = trace > 1e-30
    out[ok] = split[ok] / trace[ok]
    return out


def isotropic_dots(alpha, sigma=BLUR_PX, detail=DOT_DETAIL, window=DOT_WINDOW, max_coherence=COHERENCE_MAX,
                   cover=COVER):
    """Round fine-scale specks per 1000 covered pixels.

    Candidates are pixels whose alpha is the maximum of its ``window`` x
    ``window`` neighbourhood (ties count) and whose detail
    ``d = alpha - blur(alpha, sigma)`` exceeds ``detail``.  A candidate is a
    dot when the coherence of ``d`` (see :func:`coherence`, integration scale
    ``sigma``) is below ``max_coherence``.

    Parameters
    ----------
    alpha : (H, W) float ndarray
    sigma, detail : float
    window : int
    max_coherence : float
    cover : float
        Pixels with ``alpha > cover`` are covered.

    Returns
    -------
    dots_per_1000 : float
        Dots times 1000 over covered pixels (NaN when nothing is covered).
    dots : int
    candidates : int
    """
    a = np.asarray(alpha, dtype=np.float64)
    covered = int((a > cover).sum())
    d = fine_detail(a, sigma)
    peak = a >= ndimage.maximum_filter(a, size=window, mode="nearest")
    cand = peak & (d > detail)
    dots = cand & (coherence(d, sigma) < max_coherence)
    n = int(dots.sum())
    rate = n * 1000.0 / covered if covered else float("nan")
    return rate, n, int(cand.sum())


def _nanmean(values):
    finite = [x for x in values if math.isfinite(x)]
    return float(np.mean(finite)) if finite else float("nan")


def measure_alpha(alpha):
    """Every image metric of one frame's alpha.

    Parameters
    ----------
    alpha : (H, W) float ndarray

    Returns
    -------
    dict
        ``dims`` (per threshold), ``dim_mean``, the same with two-sided
        contours (``dims_two_sided``, ``dim_mean_two_sided``, see
        :func:`contour_mask`), ``fine_energy``, ``dots_per_1000``, ``dots``,
        ``dot_candidates``, ``covered_px``.
    """
    a = np.asarray(alpha, dtype=np.float64)
    dims = outline_dimensions(a)
    both = outline_dimensions(a, sides="both")
    rate, n, cand = isotropic_dots(a)
    names = [f"{int(round(t * 100))}%" for t in THRESHOLDS]
    return {
        "dims": dict(zip(names, dims)),
        "dim_mean": _nanmean(dims),
        "dims_two_sided": dict(zip(names, both)),
        "dim_mean_two_sided": _nanmean(both),
        "fine_energy": fine_detail_energy(a),
        "dots_per_1000": rate,
        "dots": n,
        "dot_candidates": cand,
        "covered_px": int((a > COVER).sum()),
    }


# ---------------------------------------------------------------------------
# Rendering one frame


_HEADER = re.compile(r"^\s*\[\[?\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")


def _strip_sheet_text(text):
    """``text`` of a look without ``sheet`` in ``[output]`` and without ``[output.sheet]``.

    TOML 1.0 inline tables are one line, so dropping the ``sheet = {...}``
    line under ``[output]`` (or ``output.sheet...`` lines at the top) and the
    whole ``[output.sheet]`` table removes the key.
    """
    out, table = [], ""
    for line in text.splitlines(keepends=True):
        m = _HEADER.match(line)
        if m:
            table = m.group(1).replace(" ", "").replace('"', "")
        if table == "output.sheet" or table.startswith("output.sheet."):
            continue
        if table == "output" and re.match(r"\s*sheet\s*[.=]", line):
            continue
        if table == "" and re.match(r"\s*output\s*\.\s*sheet\s*[.=]", line):
            continue
        out.append(line)
    return "".join(out)


def copy_without_sheet(look, folder, _depth=0):
    """Copy a look (and its ``base`` chain) into ``folder`` with the sheet removed.

    A sheet cannot be switched off with ``--set`` (``output.sheet`` only takes
    a table), so the look is copied with the key dropped; ``base`` paths are
    pointed at sheet-free copies of the base looks.

    Parameters
    ----------
    look : str or Path
    folder : Path
        Where the copies go.

    Returns
    -------
    Path
        The copy of ``look``.
    """
    look = Path(look).resolve()
    if _depth > 16:
        raise ValueError(f"{look}: base chain too deep")
    text = _strip_sheet_text(look.read_text(encoding="utf-8"))
    data = tomllib.loads(text)
    if isinstance(data.get("output"), dict) and "sheet" in data["output"]:
        raise ValueError(f"{look}: could not remove output.sheet from the text")
    base = data.get("base")
    if isinstance(base, str):
        base_copy = copy_without_sheet(look.parent / base, folder, _depth + 1)
        text = re.sub(r'(?m)^(\s*base\s*=\s*).*$', lambda m: m.group(1) + json.dumps(str(base_copy)), text, count=1)
    # One folder per level keeps the file's own name, the look's default name.
    out = Path(folder) / str(_depth) / look.name
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(text, encoding="utf-8")
    return out


def render_settings(size):
    """``--set`` options for one float-EXR frame of ``size`` x ``size`` and nothing else."""
    return [f"image.width={size}", f"image.height={size}", 'output.frames=["exr"]', 'output.exr_type="float"',
            "output.preview=[]", "output.maps=[]"]


def clip_frames(look, overrides=()):
    """Frames in the clip of ``look`` after ``overrides``."""
    from splatter.look.load import load_look

    return load_look(look, overrides=list(overrides)).clip.frames


def render_frame(look, frame, size=512, overrides=(), python=sys.executable):
    """Render one frame of ``look`` through the command line and read it back.

    Parameters
    ----------
    look : str or Path
    frame : int or None
        Frame to render; None: ``frames // 2`` of the clip.
    size : int
        Width and height in pixels.
    overrides : sequence of str
        Extra ``KEY=VALUE`` settings, applied after this function's own.
    python : str
        Interpreter that runs ``-m splatter`` (from the folder above this
        script, so that copy is rendered).

    Returns
    -------
    frame : int
    rgba : (H, W, 4) float32 ndarray
        Linear premultiplied colour and alpha.
    """
    from splatter.deliver.exr import read_exr

    with tempfile.TemporaryDirectory(prefix="measure-detail-") as tmp:
        tmp = Path(tmp)
        (tmp / "look").mkdir()
        copy = copy_without_sheet(look, tmp / "look")
        sets = render_settings(size) + list(overrides)
        if frame is None:
            frame = clip_frames(copy, sets) // 2
        cmd = [python, "-m", "splatter", "render", str(copy), "--frames", str(frame), "--out", str(tmp / "out"),
               "--quiet"]
        for s in sets:
            cmd += ["--set", s]
        done = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
        if done.returncode != 0:
            raise RuntimeError(f"render of {look} failed ({done.returncode}):\n{done.stderr}")
        exrs = sorted((tmp / "out").glob(f"*.{frame:04d}.exr"))
        if len(exrs) != 1:
            raise RuntimeError(f"render of {look}: expected one EXR frame, found {[p.name for p in exrs]}")
        ch = read_exr(exrs[0])
        rgba = np.stack([ch[c] for c in "RGBA"], axis=-1)
    return frame, rgba


def write_backdrops(path, rgba):
    """Write the frame over a dark and a light grey, side by side, as an 8-bit PNG.

    Parameters
    ----------
    path : str or Path
    rgba : (H, W, 4) float ndarray
        Linear premultiplied colour and alpha.

    Notes
    -----
    The greys (:data:`BACKGROUNDS`) are display values; the frame is
    composited "over" them in linear light and encoded to sRGB, as an engine
    would show it.  Two backgrounds because dark smoke vanishes on the dark
    one and pale steam on the light one.
    """
    from PIL import Image

    from splatter.core.colorspace import srgb_decode, srgb_encode

    rgb = np.asarray(rgba[..., :3], dtype=np.float64)
    a = np.clip(np.asarray(rgba[..., 3:4], dtype=np.float64), 0.0, 1.0)
    gap = np.ones((rgb.shape[0], 4, 3))  # white gutter so the panels read as two
    panels = []
    for g in BACKGROUNDS:
        lin = rgb + (1.0 - a) * float(srgb_decode(np.float64(g)))
        panels.append(srgb_encode(lin))
    img = np.concatenate([panels[0], gap, panels[1]], axis=1)
    Image.fromarray(np.round(img * 255.0).astype(np.uint8), "RGB").save(path)


def measure_looks(looks, frame=None, size=512, overrides=(), png_dir=None, log=print):
    """Render and measure each look.

    Parameters
    ----------
    looks : sequence of str or Path
    frame : int or None
        Frame to render (None: the middle of each clip).
    size : int
    overrides : sequence of str
    png_dir : str or Path or None
        Where to write the backdrop PNGs.
    log : callable
        Progress lines.

    Returns
    -------
    list of dict
        :func:`measure_alpha` per look, plus ``look``, ``frame``, ``size`` and ``png``.
    """
    rows = []
    for look in looks:
        log(f"rendering {look} ...")
        k, rgba = render_frame(look, frame, size, overrides)
        row = {"look": Path(look).stem, "frame": k, "size": size}
        row.update(measure_alpha(rgba[..., 3]))
        if png_dir is not None:
            Path(png_dir).mkdir(parents=True, exist_ok=True)
            png = Path(png_dir) / f"{Path(look).stem}.{k:04d}.png"
            write_backdrops(png, rgba)
            row["png"] = str(png)
        rows.append(row)
    return rows


def format_table(rows):
    """The look metrics as a fixed-width text table."""
    head = ["look", "frame", "dim 10%", "dim 30%", "dim 50%", "mean dim", "2-sided mean", "fine energy",
            "dots/1000px", "covered px"]
    lines = [head]
    for r in rows:
        d = r["dims"]
        lines.append([r["look"], str(r["frame"])] + [f"{d[k]:.3f}" for k in d]
                     + [f"{r['dim_mean']:.3f}", f"{r['dim_mean_two_sided']:.3f}", f"{r['fine_energy']:.4f}",
                        f"{r['dots_per_1000']:.3f}", str(r["covered_px"])])
    widths = [max(len(l[i]) for l in lines) for i in range(len(head))]
    fmt = [l[0].ljust(widths[0]) + "  " + "  ".join(c.rjust(w) for c, w in zip(l[1:], widths[1:])) for l in lines]
    return "\n".join([fmt[0], "-" * len(fmt[0])] + fmt[1:])


# ---------------------------------------------------------------------------
# Velocity structure function


def structure_function(velocity_fn, r_values, n_pairs, rng, extent=None):
    """Second-order structure function ``S2(r) = <|u(x + r e) - u(x)|^2>``.

    ``x`` is uniform in a cube and ``e`` a uniform random unit vector, so the
    result is averaged over position and direction.  The same ``x`` and ``e``
    serve every ``r`` (common random numbers), which keeps the noise out of
    the ratios between neighbouring ``r`` that the slopes are made of.

    Parameters
    ----------
    velocity_fn : callable
        Maps (N, 3) float64 points to (N, 3) velocities.
    r_values : (R,) array_like of float
        Separations, > 0.
    n_pairs : int
        Point pairs per separation.
    rng : numpy.random.Generator
    extent : float, optional
        Side of the cube the base points are drawn in; default 64 times the
        largest separation, so the average spans many of the largest eddies.

    Returns
    -------
    (R,) float64 ndarray
    """
    r_values = np.asarray(r_values, dtype=np.float64)
    if r_values.ndim != 1 or not (r_values > 0).all():
        raise ValueError("r_values must be a 1-D array of positive separations")
    side = 64.0 * r_values.max() if extent is None else float(extent)
    x = rng.uniform(-0.5 * side, 0.5 * side, (int(n_pairs), 3))
    e = rng.normal(size=(int(n_pairs), 3))
    e /= np.linalg.norm(e, axis=1)[:, None]
    u0 = np.asarray(velocity_fn(x), dtype=np.float64)
    out = np.empty(r_values.size)
    for i, r in enumerate(r_values):
        du = np.asarray(velocity_fn(x + r * e), dtype=np.float64) - u0
        out[i] = np.mean(np.sum(du * du, axis=1))
    return out


def log_slope(r, s, lo, hi):
    """Least-squares slope of ``log s`` against ``log r`` over ``lo <= r <= hi``."""
    r, s = np.asarray(r), np.asarray(s)
    keep = (r >= lo * (1 - 1e-9)) & (r <= hi * (1 + 1e-9))
    return float(np.polyfit(np.log(r[keep]), np.log(s[keep]), 1)[0])


def measure_swirl(octaves=6, scale=1.0, n_pairs=100_000, per_octave=4, seed=1, time=0.0, fit=(0.06, 0.5),
                  below=0):
    """Structure function of a swirl field and its log-log slopes.

    Separations run from the smallest eddy, ``scale / 2**(octaves - 1)``
    (``below`` octaves further down when asked), to the largest scale,
    ``scale``, with ``per_octave`` steps per factor 2.

    Parameters
    ----------
    octaves : int
    scale : float
        The swirl's ``scale``: wavelength of its largest eddies.
    n_pairs : int
    per_octave : int
    seed : int
        Seeds both the field's modes and the sampling.
    time : float
        Time at which the field is frozen.
    fit : (float, float)
        Range of ``r / scale`` for the fitted slope.
    below : int
        Extra octaves of separation below the smallest eddy, where a smooth
        field's slope heads for 2.

    Returns
    -------
    dict
        ``r``, ``s2``, ``octave_slopes`` (list of ``(r_hi, r_lo, slope)``
        from the largest octave to the smallest), ``fit_slope``,
        ``fit_range``, ``smallest_eddy`` (nominal wavelength of the last
        octave); every ``r`` in units of ``scale``.
    """
    from splatter.look.records import SwirlSpec
    from splatter.sim.swirl import build_swirl

    field = build_swirl(SwirlSpec(strength=1.0, scale=scale, octaves=octaves, evolve=2.0), seed=seed,
                        force_index=0)
    span = octaves - 1 + int(below)
    r = scale * 2.0 ** np.linspace(-span, 0.0, span * per_octave + 1)
    s2 = structure_function(lambda p: field.velocity(p, time), r, n_pairs, np.random.default_rng(seed))
    octave_slopes = []
    for i in range(span):
        hi, lo = 2.0 ** -i, 2.0 ** -(i + 1)
        octave_slopes.append((hi, lo, log_slope(r / scale, s2, lo, hi)))
    return {
        "octaves": octaves, "scale": scale, "n_pairs": int(n_pairs), "seed": seed,
        "smallest_eddy": 2.0 ** -(octaves - 1),
        "r": (r / scale).tolist(), "s2": s2.tolist(), "octave_slopes": octave_slopes,
        "fit_range": list(fit), "fit_slope": log_slope(r / scale, s2, *fit),
    }


def format_swirl(res):
    """The swirl result as text."""
    lines = [f"swirl: {res['octaves']} octaves, scale {res['scale']}, {res['n_pairs']} pairs per r, "
             f"seed {res['seed']}", "r/scale      S2(r)", "-------------------"]
    lines += [f"{r:8.4f}  {s:9.5f}" for r, s in zip(res["r"], res["s2"])]
    lines += ["", "local slope per octave (largest to smallest)", "r/scale range      slope", "------------------------"]
    for hi, lo, sl in res["octave_slopes"]:
        note = "  (below the smallest eddy)" if hi <= res["smallest_eddy"] * (1 + 1e-9) else ""
        lines.append(f"{hi:6.4f}-{lo:6.4f}  {sl:7.3f}{note}")
    lo, hi = res["fit_range"]
    lines += ["", f"fitted slope over r/scale {lo}-{hi}: {res['fit_slope']:.3f}  (Kolmogorov: 0.667)"]
    return "\n".join(lines)


# ---------------------------------------------------------------------------
# Self-test


def self_test():
    """Check the metrics on shapes whose answer is known; raise AssertionError if one is off."""
    yy, xx = np.mgrid[0:512, 0:512]
    rng = np.random.default_rng(3)
    # A smooth disc's outline: 0.95-1.0 over boxes of 2-32 px.  One placement
    # moves the figure by about 0.01 as the digital circle changes, so the
    # check is on the mean over sub-pixel centre offsets.
    dims = []
    for cy, cx in 255.5 + rng.uniform(-1.0, 1.0, (16, 2)):
        disc = np.hypot(yy - cy, xx - cx) <= 150
        dims.append(box_dimension(contour_mask(disc.astype(np.float64), 0.5)))
    dim = float(np.mean(dims))
    assert 0.95 <= dim <= 1.0, f"disc outline dimension {dim:.3f}, expected 0.95-1.0"
    assert min(dims) > 0.93 and max(dims) <= 1.0, f"disc outline dimensions {min(dims):.3f}-{max(dims):.3f}"
    rr = np.hypot(yy - 255.5, xx - 255.5)
    # A filled square's area: dimension 2 by the same count.
    area = box_dimension(np.ones((512, 512), dtype=bool))
    assert abs(area - 2.0) < 1e-9, f"filled area dimension {area}"
    # A soft blob has no fine detail and no dots; white noise specks are isotropic dots.
    blob = np.exp(-0.5 * (rr / 60.0) ** 2)
    assert fine_detail_energy(blob) < 0.01
    assert isotropic_dots(blob)[1] == 0
    specks = np.zeros((512, 512))
    idx = rng.integers(20, 492, (200, 2))
    specks[idx[:, 0], idx[:, 1]] = 1.0
    specks = 0.5 * blob + 0.3 * 2 * np.pi * ndimage.gaussian_filter(specks, 1.0)  # peaks of 0.3
    rate, n, cand = isotropic_dots(specks)
    assert 0.8 * 200 < n <= cand <= 200, f"round specks: {n} dots of {cand} candidates (200 specks)"
    # Straight stripes: fine detail, but oriented, so no dots.
    stripes = 0.5 + 0.3 * np.sin(xx * 2 * np.pi / 6.0)
    assert isotropic_dots(stripes)[1] == 0
    # A smooth field: S2 ~ r**2 at separations well below its wavelength.
    k = np.array([2 * np.pi, 0.0, 0.0])
    smooth = lambda p: np.stack([np.zeros(len(p)), np.sin(p @ k), np.zeros(len(p))], axis=1)
    r = np.geomspace(1e-3, 1e-2, 5)
    s2 = structure_function(smooth, r, 20000, np.random.default_rng(0))
    slope = log_slope(r, s2, r[0], r[-1])
    assert abs(slope - 2.0) < 0.01, f"smooth-field structure function slope {slope:.3f}, expected 2"
    return {"disc_dimension": dim, "smooth_s2_slope": slope, "speck_dots": n, "speck_candidates": cand}


# ---------------------------------------------------------------------------


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("looks", nargs="*", metavar="LOOK", help="look files (default: looks/*.toml)")
    p.add_argument("--frame", type=int, metavar="K", help="frame to render (default: frames // 2 of the clip)")
    p.add_argument("--size", type=int, default=512, help="width and height in pixels (default 512)")
    p.add_argument("--set", dest="sets", action="append", default=[], metavar="KEY=VALUE",
                   help="passed to the render after this script's own settings")
    p.add_argument("--png", metavar="DIR", help="write each frame over dark and light grey here")
    p.add_argument("--json", metavar="FILE", help="also write the numbers as JSON")
    p.add_argument("--swirl", action="store_true", help="measure the swirl field's structure function instead")
    p.add_argument("--pairs", type=int, default=100_000, help="point pairs per separation (--swirl)")
    p.add_argument("--seed", type=int, default=1, help="field and sampling seed (--swirl)")
    p.add_argument("--below", type=int, default=0, metavar="N",
                   help="extend the separations N octaves below the smallest eddy (--swirl)")
    p.add_argument("--self-test", action="store_true", help="check the metrics on known shapes and exit")
    args = p.parse_args(argv)

    if args.self_test:
        res = self_test()
        print("self-test passed: " + ", ".join(f"{k} {v:.3f}" if isinstance(v, float) else f"{k} {v}"
                                                for k, v in res.items()))
        return 0
    if args.swirl:
        res = measure_swirl(n_pairs=args.pairs, seed=args.seed, below=args.below)
        print(format_swirl(res))
        result = {"swirl": res}
    else:
        from splatter.core.errors import LookError

        looks = args.looks or sorted(str(p) for p in (ROOT / "looks").glob("*.toml"))
        try:
            rows = measure_looks(looks, args.frame, args.size, args.sets, args.png,
                                 log=lambda s: print(s, file=sys.stderr, flush=True))
        except (LookError, RuntimeError, ValueError) as e:
            print(f"measure_detail: {e}", file=sys.stderr)
            return 2
        print(format_table(rows))
        result = {"looks": rows}
    if args.json:
        Path(args.json).write_text(json.dumps(result, indent=2) + "\n", encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Benchmark the tiled numba compositor against a plain numpy loop over splats.

Two workloads (fixed seeds), both 512 x 512, centres uniform over the image,
random orientation, random linear colours, opacity in [0.05, 0.5], blend
"over":

- ``large``: 20,000 splats with principal sigmas drawn independently in
  [2, 12] px;
- ``small``: 200,000 splats with principal sigmas in [0.7, 3] px (the
  detailed smoke of many small puffs; goal 0.6 G footprint px/s on 2 threads).

Rates are footprint pixels per second, where the footprint pixels of a splat
are the pixel centres at Mahalanobis distance <= 3, counted directly.

The numpy loop is run on the first ``--numpy-splats`` splats only (it is slow)
and its rate uses the footprint pixels of exactly those splats.

Times are medians over ``--runs`` calls (numpy: 3 calls), 1- and 2-thread
calls alternating so that other work on the shared machine hits both alike;
the best run is printed too, since that work inflates medians. Where the time
goes is measured in the same run: input checks (the whole call minus the
rest), the per-splat layout (``prepare``), the row-profile tables, binning
into tiles, and the tile kernel.

Usage: python scripts/bench_composite.py [--runs 7] [--numpy-splats 2000]
       [--workload large|small|both]
"""

from __future__ import annotations

import argparse
import statistics

import numba
import numpy as np

from _timing import timed

from splatter.raster import compositor
from splatter.raster.compositor import composite

H = W = 512
WORKLOADS = {"large": (20_000, (2.0, 12.0), 2024), "small": (200_000, (0.7, 3.0), 2025)}
"""name: (splats, principal sigma range in px, seed)."""


def workload(n, sigma, seed):
    rng = np.random.default_rng(seed)
    means = rng.uniform(0, [W, H], (n, 2))
    sig = rng.uniform(*sigma, (n, 2))
    theta = rng.uniform(0, np.pi, n)
    c, s = np.cos(theta), np.sin(theta)
    rot = np.stack([np.stack([c, -s], -1), np.stack([s, c], -1)], -2)
    covs = (rot * (sig**2)[:, None, :]) @ rot.transpose(0, 2, 1)
    colors = rng.uniform(0, 1, (n, 3))
    opac = rng.uniform(0.05, 0.5, n)
    return (means.astype(np.float32), covs.astype(np.float32),
            colors.astype(np.float32), opac.astype(np.float32))


def boxes(mean, cov):
    """Pixel bounding box (r0, r1, c0, c1), exclusive ends, of the r=3 ellipse."""
    ry, rx = 3 * np.sqrt(cov[1, 1]), 3 * np.sqrt(cov[0, 0])
    r0 = max(int(np.ceil(mean[1] - ry - 0.5)), 0)
    r1 = min(int(np.floor(mean[1] + ry - 0.5)), H - 1) + 1
    c0 = max(int(np.ceil(mean[0] - rx - 0.5)), 0)
    c1 = min(int(np.floor(mean[0] + rx - 0.5)), W - 1) + 1
    return r0, r1, c0, c1


def d2_box(mean, cov, box):
    r0, r1, c0, c1 = box
    inv = np.linalg.inv(cov.astype(np.float64))
    dy = np.arange(r0, r1)[:, None] + 0.5 - float(mean[1])
    dx = np.arange(c0, c1)[None, :] + 0.5 - float(mean[0])
    return inv[0, 0] * dx * dx + 2 * inv[0, 1] * dx * dy + inv[1, 1] * dy * dy


def footprint_pixels(means, covs):
    """Direct count of pixel centres with Mahalanobis distance <= 3 (in float64).

    Splats are taken in batches sharing one box of offsets around each
    splat's centre pixel, big enough for the batch's largest ellipse.
    """
    means = means.astype(np.float64)
    covs = covs.astype(np.float64)
    inv = np.linalg.inv(covs)
    half = np.ceil(3 * np.sqrt(np.maximum(covs[:, 0, 0], covs[:, 1, 1]))).astype(int) + 1
    order = np.argsort(half, kind="stable")
    total = 0
    i = 0
    while i < len(order):
        # Sorted by size, so a batch's last splat is its largest; about 2 M offsets a batch.
        hb = half[order[min(i + 255, len(order) - 1)]]
        batch = order[i:i + max(1, min(2_000_000 // (2 * hb + 1) ** 2, 256))]
        hb = half[batch[-1]]
        off = np.arange(-hb, hb + 1)
        cx = np.floor(means[batch, 0])[:, None, None] + off[None, None, :]
        cy = np.floor(means[batch, 1])[:, None, None] + off[None, :, None]
        dx = cx + 0.5 - means[batch, 0][:, None, None]
        dy = cy + 0.5 - means[batch, 1][:, None, None]
        iv = inv[batch]
        d2 = (iv[:, 0, 0, None, None] * dx * dx + 2 * iv[:, 0, 1, None, None] * dx * dy
              + iv[:, 1, 1, None, None] * dy * dy)
        inside = (d2 <= 9.0) & (cx >= 0) & (cx < W) & (cy >= 0) & (cy < H)
        total += int(np.count_nonzero(inside))
        i += len(batch)
    return total


def numpy_over(means, covs, colors, opac):
    """Plain vectorized-numpy loop: per splat its bounding box, exp, over (in place).

    Kept lean so the comparison is fair: conics and boxes are computed for all
    splats at once, the per-splat work is float32 on the box only, and the
    image is planar (one (H, W) plane per channel, as in the numba kernel's
    tile buffers). An interleaved (H, W, 4) image makes every per-channel
    update strided: the same loop on one ran 1.8x slower here.
    """
    img = np.zeros((4, H, W), dtype=np.float32)
    inv = np.linalg.inv(covs.astype(np.float64)).astype(np.float32)
    rx = 3 * np.sqrt(covs[:, 0, 0].astype(np.float64))
    ry = 3 * np.sqrt(covs[:, 1, 1].astype(np.float64))
    r0s = np.maximum(np.ceil(means[:, 1] - ry - 0.5), 0).astype(int)
    r1s = np.minimum(np.floor(means[:, 1] + ry - 0.5), H - 1).astype(int) + 1
    c0s = np.maximum(np.ceil(means[:, 0] - rx - 0.5), 0).astype(int)
    c1s = np.minimum(np.floor(means[:, 0] + rx - 0.5), W - 1).astype(int) + 1
    centres = np.arange(max(H, W), dtype=np.float32) + np.float32(0.5)
    for i in range(len(means)):
        r0, r1, c0, c1 = r0s[i], r1s[i], c0s[i], c1s[i]
        if r1 <= r0 or c1 <= c0:
            continue
        dy = (centres[r0:r1] - means[i, 1])[:, None]
        dx = (centres[c0:c1] - means[i, 0])[None, :]
        d2 = (inv[i, 0, 0] * dx) * dx + (2 * inv[i, 0, 1] * dx) * dy + (inv[i, 1, 1] * dy) * dy
        a = np.exp(np.float32(-0.5) * d2)
        a *= opac[i]
        a[d2 > 9.0] = 0.0
        view = img[:, r0:r1, c0:c1]
        view *= 1.0 - a
        view[:3] += colors[i][:, None, None] * a
        view[3] += a
    return np.moveaxis(img, 0, -1)


STEPS = ("checks", "prepare", "tables", "binning", "kernel")


def bench(name, runs, numpy_splats):
    n, sigma, seed = WORKLOADS[name]
    means, covs, colors, opac = workload(n, sigma, seed)
    fp = footprint_pixels(means, covs)
    print(f"\n== {name}: {W}x{H}, {n} splats, sigma {sigma[0]}-{sigma[1]} px, "
          f"{fp / 1e6:.2f} M footprint pixels, {fp / n:.0f} per splat")

    def run():
        return composite(means, covs, colors, opac, shape=(H, W))

    def steps():
        times = {}
        compositor._render(means, covs, colors, opac, H, W, "over", times)
        return times

    run()  # JIT compile or load from the cache
    default_threads = numba.get_num_threads()
    counts = sorted({default_threads, 1}, reverse=True)
    calls = {t: [] for t in counts}
    parts = {t: {k: [] for k in STEPS[1:]} for t in counts}
    images = {}
    try:
        for _ in range(runs):
            for t in counts:
                numba.set_num_threads(t)
                dt, _, images[t] = timed(run, 1)
                calls[t].append(dt)
                for k, v in steps().items():
                    parts[t][k].append(v)
    finally:
        numba.set_num_threads(default_threads)

    print("medians (best run in brackets):")
    rates = {}
    for t in counts:
        med = statistics.median(calls[t])
        rates[t] = fp / med
        label = f"{t} threads" if t > 1 else "1 thread "
        print(f"numba, {label}: {med * 1e3:8.2f} ms  {fp / med / 1e9:6.3f} G px/s"
              f"  [{fp / min(calls[t]) / 1e9:6.3f}]")
        meds = {k: statistics.median(v) for k, v in parts[t].items()}
        meds["checks"] = max(med - sum(meds.values()), 0.0)
        print("    " + "  ".join(f"{k} {meds[k] * 1e3:6.2f} ms" for k in STEPS))
    if len(counts) > 1:
        print(f"speed-up {default_threads} threads vs 1 thread: {rates[counts[0]] / rates[1]:5.2f}x")
        print(f"1-thread and {default_threads}-thread images bit-identical: "
              f"{np.array_equal(images[1], images[counts[0]])}")

    m = numpy_splats
    fp_np = footprint_pixels(means[:m], covs[:m])
    t_np, _, img_np = timed(lambda: numpy_over(means[:m], covs[:m], colors[:m], opac[:m]), 3)
    check = composite(means[:m], covs[:m], colors[:m], opac[:m], shape=(H, W))
    rate_np = fp_np / t_np
    print(f"numpy loop on the first {m} splats ({fp_np / 1e6:.2f} M footprint px; rate ="
          f" those px / time): {t_np * 1e3:8.1f} ms  {rate_np / 1e6:6.1f} M px/s")
    print(f"speed-up {default_threads} threads vs numpy: {rates[counts[0]] / rate_np:7.1f}x")
    print(f"max |numba - numpy| on the {m}-splat image: {np.abs(check - img_np).max():.2e}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=7)
    ap.add_argument("--numpy-splats", type=int, default=2000)
    ap.add_argument("--workload", choices=("large", "small", "both"), default="both")
    args = ap.parse_args()
    names = list(WORKLOADS) if args.workload == "both" else [args.workload]
    for name in names:
        bench(name, args.runs, args.numpy_splats)


if __name__ == "__main__":
    main()

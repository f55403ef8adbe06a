"""Benchmark the tiled numba compositor against a plain numpy loop over splats.

Workload (fixed seed): 512 x 512 image, 20,000 splats with principal sigmas
drawn independently in [2, 12] px (random anisotropy and orientation), centres
uniform over the image, random linear colours, opacity in [0.05, 0.5], blend
"over". Rates are footprint pixels per second, where the footprint pixels of
a splat are the pixel centres at Mahalanobis distance <= 3, counted directly.

The numpy loop is run on the first ``--numpy-splats`` splats only (it is slow)
and its rate uses the footprint pixels of exactly those splats.

Times are medians over ``--runs`` calls (numpy: 3 calls); the best numba run
is printed too, since other work on a shared machine inflates medians.

Usage: python scripts/bench_composite.py [--runs 7] [--numpy-splats 2000]
"""

from __future__ import annotations

import argparse

import numba
import numpy as np

from _timing import timed

from splatter.raster.compositor import composite

H = W = 512
N = 20_000


def workload(seed=2024):
    rng = np.random.default_rng(seed)
    means = rng.uniform(0, [W, H], (N, 2))
    sig = rng.uniform(2.0, 12.0, (N, 2))
    theta = rng.uniform(0, np.pi, N)
    c, s = np.cos(theta), np.sin(theta)
    rot = np.stack([np.stack([c, -s], -1), np.stack([s, c], -1)], -2)
    covs = (rot * (sig**2)[:, None, :]) @ rot.transpose(0, 2, 1)
    colors = rng.uniform(0, 1, (N, 3))
    opac = rng.uniform(0.05, 0.5, N)
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
    """Direct count of pixel centres with Mahalanobis distance <= 3."""
    total = 0
    for i in range(len(means)):
        box = boxes(means[i], covs[i])
        if box[1] > box[0] and box[3] > box[2]:
            total += int(np.count_nonzero(d2_box(means[i], covs[i], box) <= 9.0))
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


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=7)
    ap.add_argument("--numpy-splats", type=int, default=2000)
    args = ap.parse_args()

    means, covs, colors, opac = workload()
    fp = footprint_pixels(means, covs)
    print(f"workload: {W}x{H}, {N} splats, {fp / 1e6:.2f} M footprint pixels")

    def run():
        return composite(means, covs, colors, opac, shape=(H, W))

    run()  # JIT compile or load from the cache
    default_threads = numba.get_num_threads()
    t_par, b_par, img_par = timed(run, args.runs)
    try:
        numba.set_num_threads(1)
        t_one, b_one, img_one = timed(run, args.runs)
    finally:
        numba.set_num_threads(default_threads)

    m = args.numpy_splats
    fp_np = footprint_pixels(means[:m], covs[:m])
    t_np, _, img_np = timed(lambda: numpy_over(means[:m], covs[:m], colors[:m], opac[:m]), 3)
    check = composite(means[:m], covs[:m], colors[:m], opac[:m], shape=(H, W))

    rate_par = fp / t_par
    rate_one = fp / t_one
    rate_np = fp_np / t_np
    print("medians (best run in brackets):")
    print(f"numba, {default_threads} threads: {t_par * 1e3:8.2f} ms  {rate_par / 1e9:6.3f} G px/s"
          f"  [{fp / b_par / 1e9:6.3f}]")
    print(f"numba, 1 thread : {t_one * 1e3:8.2f} ms  {rate_one / 1e9:6.3f} G px/s"
          f"  [{fp / b_one / 1e9:6.3f}]")
    print(f"numpy loop on the first {m} splats ({fp_np / 1e6:.2f} M footprint px; rate ="
          f" those px / time): {t_np * 1e3:8.1f} ms  {rate_np / 1e6:6.1f} M px/s")
    print(f"speed-up {default_threads} threads vs numpy: {rate_par / rate_np:7.1f}x")
    print(f"speed-up {default_threads} threads vs 1 thread: {rate_par / rate_one:5.2f}x")
    print(f"1-thread and {default_threads}-thread images bit-identical: "
          f"{np.array_equal(img_one, img_par)}")
    print(f"max |numba - numpy| on the {m}-splat image: {np.abs(check - img_np).max():.2e}")


if __name__ == "__main__":
    main()

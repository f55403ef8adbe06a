"""Benchmark the project stage: numba kernels against the former numpy path.

Workload (fixed seed): 20,000 puffs in a perspective camera (a foggy harbour
view: puffs spread over a 6 x 3 x 6 volume in front of the eye), random sizes,
aspects, orientations, velocities and stretch. Three timings, each the best
and median of ``--runs`` calls:

* numpy: ``puff_covariances`` then ``Camera.project`` as they were written in
  numpy (copied below as the baseline);
* numba, two steps: the public ``puff_covariances`` then ``Camera.project``;
* numba, fused: ``project_puffs`` (one pass per puff).

It also prints the largest differences between the numpy and numba results.

Usage: python scripts/bench_project.py [--runs 15] [--n 20000]
"""

from __future__ import annotations

import argparse

import numba
import numpy as np

from _timing import timed

from splatter.view.camera import LOW_PASS, Camera, ewa_covariance, project_puffs, puff_covariances


def numpy_puff_covariances(size, aspect, quat, vel, stretch):
    """The former numpy puff_covariances (checks left out)."""
    n = size.shape[0]
    norm = np.linalg.norm(quat, axis=1, keepdims=True)
    w, x, y, z = (quat / norm).T
    rot = np.empty((n, 3, 3))
    rot[:, 0, 0] = 1 - 2 * (y * y + z * z)
    rot[:, 0, 1] = 2 * (x * y - w * z)
    rot[:, 0, 2] = 2 * (x * z + w * y)
    rot[:, 1, 0] = 2 * (x * y + w * z)
    rot[:, 1, 1] = 1 - 2 * (x * x + z * z)
    rot[:, 1, 2] = 2 * (y * z - w * x)
    rot[:, 2, 0] = 2 * (x * z - w * y)
    rot[:, 2, 1] = 2 * (y * z + w * x)
    rot[:, 2, 2] = 1 - 2 * (x * x + y * y)
    var = np.stack([size**2, (size * aspect) ** 2, (size * aspect) ** 2], 1)
    cov = (rot * var[:, None, :]) @ rot.transpose(0, 2, 1)
    seg = stretch[:, None] * vel
    return cov + seg[:, :, None] * seg[:, None, :] / 12.0


def numpy_project(cam, pos, cov):
    """The former numpy Camera.project (perspective and orthographic)."""
    s, u, f = cam.axes
    rot = np.stack([s, -u, f])
    t = (pos - np.asarray(cam.eye)) @ rot.T
    cov_cam = rot @ cov @ rot.T
    depth = t[:, 2]
    front = depth > cam.near
    if cam.projection == "orthographic":
        k = cam.width / cam.view_width
        means = np.stack([0.5 * cam.width + k * t[:, 0], 0.5 * cam.height + k * t[:, 1]], 1)
        covs = k * k * cov_cam[:, :2, :2]
    else:
        fpx = cam.focal_px
        tz = np.where(front, depth, 1.0)
        tt = np.where(front[:, None], t, np.array([0.0, 0.0, 1.0]))
        means = np.stack([0.5 * cam.width + fpx * tt[:, 0] / tz,
                          0.5 * cam.height + fpx * tt[:, 1] / tz], 1)
        covs = ewa_covariance(tt, np.where(front[:, None, None], cov_cam, np.eye(3)), fpx, fpx)
        means[~front] = 0.0
    covs = covs + LOW_PASS * np.eye(2)
    rx = 3.0 * np.sqrt(covs[:, 0, 0])
    ry = 3.0 * np.sqrt(covs[:, 1, 1])
    on = ((means[:, 0] + rx > 0) & (means[:, 0] - rx < cam.width)
          & (means[:, 1] + ry > 0) & (means[:, 1] - ry < cam.height))
    visible = front & on & np.all(np.isfinite(covs), axis=(1, 2))
    return means.astype(np.float32), covs.astype(np.float32), depth.astype(np.float32), visible


def workload(n, seed=2024):
    rng = np.random.default_rng(seed)
    pos = rng.uniform([-3.0, 0.0, -3.0], [3.0, 3.0, 3.0], (n, 3))
    size = rng.uniform(0.02, 0.3, n)
    aspect = rng.uniform(0.3, 1.0, n)
    quat = rng.normal(size=(n, 4))
    vel = rng.normal(0.0, 0.5, (n, 3))
    stretch = rng.uniform(0.0, 0.05, n)
    return pos, size, aspect, quat, vel, stretch


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=15)
    ap.add_argument("--n", type=int, default=20_000)
    args = ap.parse_args()
    pos, size, aspect, quat, vel, stretch = workload(args.n)
    cam = Camera(projection="perspective", eye=(0.0, 1.5, 12.0), target=(0.0, 1.5, 0.0),
                 width=512, height=512, fov=35.0)

    def run_numpy():
        return numpy_project(cam, pos, numpy_puff_covariances(size, aspect, quat, vel, stretch))

    def run_two():
        return cam.project(pos, puff_covariances(size, aspect, quat, vel, stretch))

    def run_fused():
        return project_puffs(cam, pos, size, aspect, quat, vel, stretch)

    run_two(), run_fused()  # JIT compile or load from the cache
    t_np, b_np, ref = timed(run_numpy, args.runs)
    t_two, b_two, two = timed(run_two, args.runs)
    t_fu, b_fu, fused = timed(run_fused, args.runs)
    print(f"project stage, {args.n} puffs, perspective 512x512, "
          f"{numba.get_num_threads()} threads; median [best] ms")
    print(f"numpy (covariances + project): {t_np * 1e3:7.2f} [{b_np * 1e3:7.2f}]")
    print(f"numba, two steps             : {t_two * 1e3:7.2f} [{b_two * 1e3:7.2f}]"
          f"  {t_np / t_two:6.1f}x")
    print(f"numba, fused project_puffs   : {t_fu * 1e3:7.2f} [{b_fu * 1e3:7.2f}]"
          f"  {t_np / t_fu:6.1f}x")
    for name, sp in (("two steps", two), ("fused", fused)):
        dm = np.abs(sp.means.astype(np.float64) - ref[0]).max()
        dc = np.abs(sp.covs.astype(np.float64) - ref[1]).max()
        print(f"{name}: max |d means| {dm:.2e} px, max |d covs| {dc:.2e} px^2, "
              f"visible equal: {np.array_equal(sp.visible, ref[3])}, "
              f"depth equal: {np.array_equal(sp.depth, ref[2])}")


if __name__ == "__main__":
    main()

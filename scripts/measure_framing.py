"""How much of the frame each demo's smoke fills, and its alpha at the border, under two framings.

For every demo look: the per-puff fit (each puff framed out to where it alone
fades to a quarter of ``camera.fit_alpha``, the rule before the accumulated
fit) and ``camera.fit`` as it is now (the smoke's accumulated alpha), both from
the same sampled simulation, then every fitted frame rendered through both
cameras from one simulation. Prints per look and framing: the mean share of
the frame's pixels at alpha 5 % or more, the share of the frame's area the
union box of that smoke spans over the clip, the highest alpha on any frame's
outermost pixels, and the seconds each fit took beside the render's.

    python scripts/measure_framing.py [look names ...]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

from splatter.look.load import load_look
from splatter.fit import FIT_PUFFS
from splatter.render import fit_frames, fit_look_camera, frame_images, look_plan, make_camera, unfitted
from splatter.sim.driver import simulate
from splatter.view.framing import fit_camera, max_border_alpha
from splatter.view.splats import seen_opacity

LOOKS = Path(__file__).resolve().parent.parent / "looks"
FILL = 0.05


def measure(name: str) -> None:
    look = load_look(LOOKS / f"{name}.toml")
    plan = look_plan(look)  # "auto" swirl octaves resolved at the accumulated fit's framing
    base = make_camera(unfitted(look))
    frames = fit_frames(look, plan)
    sample = max(1, int(plan.steady_state_puffs // FIT_PUFFS))
    t0 = time.perf_counter()
    states = list(simulate(look, plan, frames=frames, sample=sample, warmup_frames=True))
    t_sim = time.perf_counter() - t0
    blend = look.shading.blend
    t0 = time.perf_counter()
    old = fit_camera(base, states, margin=look.camera.margin, alpha=look.camera.fit_alpha,
                     opacity_of=lambda s: seen_opacity(s, blend, base))
    t_old = time.perf_counter() - t0
    t0 = time.perf_counter()
    new = fit_look_camera(look, base, states, sample)
    t_new = time.perf_counter() - t0
    stats = {k: dict(fill=[], border=0.0, box=[np.inf, np.inf, -np.inf, -np.inf], seconds=0.0) for k in ("old", "new")}
    t0 = time.perf_counter()
    full = list(simulate(look, plan, frames=frames, warmup_frames=True))
    t_full_sim = time.perf_counter() - t0
    for key, cam in (("old", old), ("new", new)):
        st = stats[key]
        t0 = time.perf_counter()
        for _, img, _, _ in frame_images(look, cam, full, maps=()):
            a = img[..., -1]
            st["border"] = max(st["border"], max_border_alpha(a))
            m = a >= FILL
            st["fill"].append(float(m.mean()))
            rows, cols = np.flatnonzero(m.any(1)), np.flatnonzero(m.any(0))
            if rows.size:
                b = st["box"]
                st["box"] = [min(b[0], cols[0]), min(b[1], rows[0]), max(b[2], cols[-1] + 1), max(b[3], rows[-1] + 1)]
        st["seconds"] = time.perf_counter() - t0
    h, w = look.image.height, look.image.width
    print(f"{name}: {len(frames)} frames, fit sample 1 in {sample}; sampled simulation {t_sim:.1f} s, "
          f"per-puff fit {t_old:.2f} s, accumulated fit {t_new:.2f} s; full simulation {t_full_sim:.1f} s, "
          f"composite per camera {stats['new']['seconds']:.1f} s")
    for key, label in (("old", "per-puff   "), ("new", "accumulated")):
        st = stats[key]
        b = st["box"]
        box = (b[2] - b[0]) * (b[3] - b[1]) / (w * h) if b[0] < b[2] else 0.0
        cam = old if key == "old" else new
        size = f"view_width {cam.view_width:.3f}" if cam.projection == "orthographic" else \
            f"eye {tuple(round(x, 3) for x in cam.eye)}"
        print(f"  {label} pixels >= 5%: mean {np.mean(st['fill']):.1%}, max {np.max(st['fill']):.1%}; "
              f"union box {box:.1%} of the frame; border alpha max {st['border']:.5f} "
              f"({st['border'] * 255:.2f}/255); {size}")
    sys.stdout.flush()


if __name__ == "__main__":
    names = sys.argv[1:] or sorted(p.stem for p in LOOKS.glob("*.toml"))
    for n in names:
        measure(n)

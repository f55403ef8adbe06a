"""``splatter check``: validate a look and say what a render would do, writing nothing."""

from __future__ import annotations

from typing import List

from splatter.deliver.names import planned_files
from splatter.look.records import LookSpec
from splatter.render import output_dir, pixel_size, plan_and_camera
from splatter.sim.driver import simulate
from splatter.view.camera import project_puffs
from splatter.view.framing import cut_by_border
from splatter.view.splats import seen_opacity

__all__ = ["check_look", "border_report"]

def border_report(look: LookSpec, camera, plan, frames) -> List[str]:
    """Warnings for puffs whose visible footprint crosses the frame border.

    Projects every puff of ``frames`` (no compositing) and counts the frames
    where a puff of noticeable opacity has its 3-sigma ellipse cut by the edge.
    """
    w, h = look.image.width, look.image.height
    hits, worst = 0, 0.0
    n = 0
    for state in simulate(look, plan, frames=frames):
        n += 1
        if len(state.size) == 0:
            continue
        s = project_puffs(camera, state.pos, state.size, state.aspect, state.quat, state.vel, state.stretch,
                          state.deform)
        op = seen_opacity(state, look.shading.blend, camera)
        cut = cut_by_border(s, op, w, h)
        if cut.any():
            hits += 1
            worst = max(worst, float(op[cut].max()))
    if hits == 0:
        return []
    return [
        f"puffs cross the frame border in {hits} of {n} frames (peak opacity up to {worst:.2f}); "
        "the sprite may look cut off. Set camera.fit = true or widen camera.view_width."
    ]


def check_look(look: LookSpec) -> str:
    """A plain-text summary of a validated look, with warnings."""
    plan, camera = plan_and_camera(look)
    clip, img = look.clip, look.image
    lines = [
        f"look      {look.name} (seed {look.seed})" + (f", from {look.path}" if look.path else ""),
        f"clip      {clip.frames} frames at {clip.fps:g} fps = {clip.duration:.2f} s, loop {clip.loop}, "
        f"{clip.substeps} substeps ({clip.integrator}), warm-up {plan.warmup_steps * plan.dt:.2f} s",
        f"image     {img.width} x {img.height} px, camera {look.camera.projection}"
        + (" (fit to the clip)" if look.camera.fit else ""),
        f"shading   blend {look.shading.blend}" + (", lit with self-shadowing" if look.shading.light else ""),
    ]
    for i, src in enumerate(look.sources):
        rate = plan.rates[i]
        life = src.life[0] if src.life[0] == src.life[1] else f"{src.life[0]:g}-{src.life[1]:g}"
        bursts = f", {sum(b.count for b in src.bursts)} puffs in bursts" if src.bursts else ""
        lines.append(f"source[{i}] {src.shape} at {list(src.center)}, {rate:g} puffs/s, life {life} s{bursts}")
    kinds = [f.kind for f in look.forces]
    octaves = iter(plan.swirl_octaves)  # one per swirl, in force order
    for i, f in enumerate(look.forces):
        if f.kind == "swirl":
            n = next(octaves)
            eddy = f.scale / 2 ** (n - 1) / pixel_size(camera)  # wavelength of the last octave at the target
            kinds[i] = f"swirl ({n} octaves{', auto' if f.octaves is None else ''}, smallest eddy {eddy:.1f} px)"
        elif f.kind == "convection":
            flux = sum(r * s.heat for r, s in zip(plan.rates, look.sources)) * f.buoyancy
            kinds[i] = f"convection ({f.cells} cells, buoyancy flux {flux:.3g} units^4/s^3)"
    obst = [o.kind for o in look.obstacles]
    lines.append(f"forces    {', '.join(kinds) or 'none'}; obstacles {', '.join(obst) or 'none'}")
    lines.append(f"puffs     about {plan.steady_state_puffs:,.0f} alive at steady state")
    folder = output_dir(look)
    files = planned_files(look, folder, range(clip.frames))
    lines.append(f"writes    {len(files)} files to {folder}/")
    shown = files if len(files) <= 8 else files[:3] + ["..."] + files[-4:]
    lines += [f"          {f}" for f in shown]
    if look.output.maps and "exr" not in look.output.frames and look.output.sheet is None:
        lines.append("warning   output.maps: maps are written as EXR layers and map sheets; "
                     "ask for exr frames or a sheet to get them")
    for note in plan.notes:
        lines.append(f"note      {note}")
    for warn in border_report(look, camera, plan, range(clip.frames)):
        lines.append(f"warning   {warn}")
    return "\n".join(lines)

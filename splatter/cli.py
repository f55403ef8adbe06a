"""The ``splatter`` command line: render, check, simulate, pack.

Exit codes: 0 done, 2 bad input (the message names the file, the key, what
was expected and what arrived), 1 internal failure, 130 interrupted.
"""

from __future__ import annotations

import argparse
import errno
import os
import sys
import warnings
from pathlib import Path
from typing import Optional, Sequence

from splatter.core.choices import FRAME_FORMATS, LOOP_MODES
from splatter.core.errors import LookError, LookWarning

EXIT_OK, EXIT_INTERNAL, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130
_PATH_ERRNOS = {errno.EACCES, errno.EPERM, errno.EROFS, errno.ENOTDIR, errno.EISDIR, errno.EEXIST, errno.ENOENT,
                errno.ENAMETOOLONG}

_EPILOG = """\
examples:
  splatter check looks/harbour_chimney.toml
  splatter render looks/harbour_chimney.toml
  splatter render looks/quay_vent.toml --seed 7 --set clip.frames=32 --out renders/vent-{seed}
  splatter render looks/quay_dust.toml --frames 0:8 --threads 1
  splatter render looks/quay_dust.toml --resume
  splatter simulate looks/quay_vent.toml --out vent.npz
  splatter simulate looks/beach_bonfire.toml --out fire.npz --flow-grid fire-grid.npz --flow-frame 32
  splatter pack renders/harbour_chimney --columns 8
  splatter vary looks/harbour_chimney.toml --seeds 1:5 --sweep force.0.velocity.0=0.5,1.5 --set clip.frames=32
  splatter vary looks/batches/chimney_takes.toml --jobs 2

The look file format is described in docs/look-reference.md.
"""


class _UsageError(Exception):
    """Bad command-line arguments (exit 2, like argparse's own errors)."""


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="splatter",
        description="Render smoke, steam, dust and mist flipbook textures from a look file (TOML).",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    from splatter import __version__

    p.add_argument("--version", action="version", version=f"splatter {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    def look_options(sp, *, out_help=None):
        sp.add_argument("look", metavar="LOOK", help="the look file (TOML)")
        if out_help:
            sp.add_argument("--out", metavar="DIR" if "folder" in out_help else "FILE", help=out_help)
        sp.add_argument("--seed", type=int, metavar="N", help="replace the look's seed (an integer >= 0)")
        sp.add_argument(
            "--set",
            dest="overrides",
            action="append",
            default=[],
            metavar="KEY=VALUE",
            help="override a value of the look, e.g. --set source.0.rate=80 --set clip.frames=32 "
            "(dotted path, array index as a number, value in TOML syntax); repeatable",
        )

    def render_options(sp):
        look_options(sp, out_help="output folder, replacing output.dir ({name} and {seed} are filled in)")
        sp.add_argument(
            "--frames",
            metavar="A:B",
            help="render frames A to B-1 only (A:B, A: or a single frame A); may run past the clip's end",
        )
        sp.add_argument("--threads", type=int, metavar="N",
                        help="number of compute threads (default: all cores; more than the cores is clamped)")
        sp.add_argument("--quiet", action="store_true",
                        help="no progress bar and no summary line (notes and warnings are still shown)")
        sp.add_argument("--max-memory", metavar="SIZE",
                        help="the most memory a render may plan to use, e.g. 24G or 512M (default: 80%% of what "
                        "the machine has free); a render estimated above it is refused before it starts")

    r = sub.add_parser(
        "render",
        help="render frames, sheets, previews and maps",
        description="Render the look and write the files its [output] table asks for.",
    )
    render_options(r)
    r.add_argument("--resume", action="store_true",
                   help="keep the frames an interrupted render of the same look and seed finished in the folder "
                   "(its manifest NAME.render.json lists them) and render the rest, sheets and previews included")

    c = sub.add_parser(
        "check",
        help="validate a look and say what it would render and cost",
        description="Validate the look, list the files a render would write, estimate its memory and time and "
        "warn about suspicious settings, from a sampled simulation (well under a second). Takes render's options, "
        "so swapping the verb is a dry run; exits 2 where render would refuse. Renders and writes nothing.",
    )
    render_options(c)
    c.add_argument("--full", action="store_true",
                   help="simulate the whole clip as the render will, instead of a time-bounded sample")

    s = sub.add_parser(
        "simulate",
        help="write the particle states per frame to an .npz file",
        description="Simulate the look and write every frame's puffs as flat arrays (frame_start, id, pos, "
        "vel, age, life, size, opacity and more) to an .npz file.",
    )
    look_options(s, out_help="the .npz file to write")
    s.add_argument("--frames", metavar="A:B", help="frames A to B-1 only")
    s.add_argument("--flow-grid", metavar="FILE.npz", dest="flow_grid",
                   help="also write the convection flow's grid (density, heat, velocity) at one frame")
    s.add_argument("--flow-frame", metavar="N", type=int, dest="flow_frame",
                   help="the frame --flow-grid writes (default: the middle of the frames simulated)")

    k = sub.add_parser(
        "pack",
        help="build a sprite sheet and its metadata from a folder of frames",
        description="Pack the frames NAME.0000.png ... (or .exr) in DIR into NAME.sheet.png/.exr and "
        "NAME.sheet.json.",
    )
    k.add_argument("dir", metavar="DIR", help="folder holding the frames")
    k.add_argument("--name", help="which frames, when the folder holds several sets")
    k.add_argument("--columns", type=int, metavar="C")
    k.add_argument("--rows", type=int, metavar="R")
    k.add_argument("--padding", type=int, default=2, metavar="PX", help="gutter around each cell (default 2)")
    k.add_argument("--pow2", action="store_true", help="power-of-two sheet size (frames kept unscaled when frame "
                   "plus padding is a power of two, else resampled into power-of-two cells)")
    k.add_argument("--format", choices=FRAME_FORMATS, help="sheet format (default: that of the frames)")
    k.add_argument("--fps", type=float,
                   help="frames per second stored in the metadata (default: the folder's sheet metadata or render "
                   "manifest, else 30)")
    k.add_argument("--loop", choices=LOOP_MODES,
                   help="stored in the metadata (default: the render's loop when the frames are its whole clip, "
                   "else none)")
    k.add_argument("--force", action="store_true",
                   help="replace a sheet whose map sheets have another layout (the map sheets are removed)")
    v = sub.add_parser(
        "vary",
        help="render many variations (seeds, sweeps) with a board to pick from",
        description="Render many variations of one look: seeds crossed with swept keys. Writes one folder per "
        "variation, vary.json (the manifest), board.png and board.gif into --out. Re-running the same batch "
        "skips variations that finished. Exit 0 if all succeeded, 1 if any failed, 2 for bad input.",
    )
    v.add_argument("look", metavar="LOOK", help="a look file, or a batch file (TOML with look, seeds, [sweep], zip, "
                   "out)")
    v.add_argument("--seeds", metavar="A:B", help="seeds A to B-1 (or A,B,C or one seed)")
    v.add_argument("--sweep", action="append", default=[], metavar="KEY=V1,V2,...",
                   help="a look key and its values (TOML syntax), or KEY=LO:HI:COUNT for evenly spaced numbers; "
                   "several --sweep are crossed as a grid; repeatable")
    v.add_argument("--zip", action="store_true", help="pair the sweeps value by value instead of crossing them")
    v.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override a value of the look in every variation; repeatable")
    v.add_argument("--out", metavar="DIR", help="batch folder (default renders/{name}-vary)")
    v.add_argument("--jobs", type=int, metavar="N", help="worker processes (default: one per core, at most one "
                   "per variation)")
    v.add_argument("--cluster", metavar="ADDRESS", help="a running Dask scheduler, tcp://host:port: render each "
                   "variation as a task on its workers (pip install 'splatter[farm]')")
    v.add_argument("--dry-run", action="store_true", help="list the variations and what would run; write nothing")
    v.add_argument("--quiet", action="store_true", help="no progress bar and no summary (failures are still listed)")
    return p


def parse_frames(text: Optional[str], clip_frames: int) -> Optional[range]:
    """Parse ``A:B``, ``A:`` or ``A`` into a range of frame numbers."""
    if text is None:
        return None
    try:
        if ":" in text:
            a_text, b_text = text.split(":", 1)
            a = int(a_text) if a_text.strip() else 0
            b = int(b_text) if b_text.strip() else clip_frames
        else:
            a = int(text)
            b = a + 1
    except ValueError:
        raise _UsageError(f"--frames: expected A:B with whole numbers (for example 0:16), got {text!r}") from None
    if a < 0 or b <= a:
        raise _UsageError(f"--frames: expected 0 <= A < B, got {text!r}")
    if b - a > 100_000:
        raise _UsageError(f"--frames: expected at most 100000 frames, got {b - a}")
    return range(a, b)


def _set_threads(n: Optional[int]) -> None:
    if n is None:
        return
    import numba

    top = numba.config.NUMBA_NUM_THREADS
    if n < 1:
        raise _UsageError(f"--threads: expected a number >= 1, got {n}")
    if n > top:
        print(f"splatter: note: --threads {n}: this machine runs at most {top}; using {top}", file=sys.stderr)
        n = top
    numba.set_num_threads(n)


def _limit(args) -> Optional[str]:
    """``--max-memory`` checked (the text is kept for messages)."""
    if args.max_memory is None:
        return None
    from splatter.cost import parse_size

    try:
        if parse_size(args.max_memory) <= 0:
            raise ValueError
    except ValueError:
        raise _UsageError(f"--max-memory: expected a size such as 24G or 512M, got {args.max_memory!r}") from None
    return args.max_memory


def _say_plan(plan) -> None:
    """What the simulation had to change (notes) and what breaks the look (warnings), said even with --quiet."""
    for note in plan.notes:
        print(f"splatter: note: {note}", file=sys.stderr)
    for warn in plan.warnings:
        print(f"splatter: warning: {warn}", file=sys.stderr)


def _load(args):
    from splatter.look.load import load_look

    if args.seed is not None and not 0 <= args.seed <= 2**63 - 1:
        raise _UsageError(f"--seed: expected an integer from 0 to {2**63 - 1}, got {args.seed}")
    return load_look(args.look, overrides=args.overrides, seed=args.seed)


def _cmd_render(args) -> int:
    # Validate everything before importing the (numba-heavy) pipeline, so bad input fails fast.
    look = _load(args)
    frames = parse_frames(args.frames, look.clip.frames)
    limit = _limit(args)
    _set_threads(args.threads)
    from splatter.cost import memory_limit
    from splatter.render import (
        announce_compile,
        output_dir,
        plan_and_camera,
        prepare_kernels,
        refuse_if_over_memory,
        render,
    )

    output_dir(look, args.out)  # a bad --out fails before the simulation
    n_frames = len(frames if frames is not None else range(look.clip.frames))
    budget = memory_limit(limit)
    # Refused before anything is simulated or written (the sheet options are laid out here too): first
    # at the look's own camera, as framing simulates, then at the final framing.
    refuse_if_over_memory(look, n_frames, max_memory=budget, option_name="--max-memory")
    if not args.quiet:
        announce_compile()  # before the plan: fitting the camera simulates, which compiles too
    plan, camera = plan_and_camera(look)
    _say_plan(plan)
    refuse_if_over_memory(look, n_frames, max_memory=budget, plan=plan, camera=camera, option_name="--max-memory")
    prepare_kernels(look, say=not args.quiet)
    # The bar only on a terminal: in a log or a pipe its redraws are noise.
    progress = not args.quiet and sys.stderr.isatty()
    result = render(look, out_dir=args.out, frames=frames, progress=progress, plan=plan, camera=camera,
                    resume=args.resume, max_memory=budget)
    if not args.quiet:
        print(result.summary(), file=sys.stderr)
    return EXIT_OK


def _cmd_check(args) -> int:
    look = _load(args)
    frames = parse_frames(args.frames, look.clip.frames)
    limit = _limit(args)
    _set_threads(args.threads)
    from splatter.check import check_report
    from splatter.cost import refuse_if_too_big

    text, estimate = check_report(look, frames=frames, out_dir=args.out, full=args.full, max_memory=limit)
    print(text, flush=True)
    refuse_if_too_big(look, estimate)  # exit 2 where render would refuse
    return EXIT_OK


def _cmd_simulate(args) -> int:
    look = _load(args)
    if not args.out:
        raise _UsageError("simulate: --out FILE.npz is required")
    if not args.out.endswith(".npz"):
        raise _UsageError(f"--out: expected a file name ending in .npz, got {args.out!r}")
    frames = parse_frames(args.frames, look.clip.frames) or range(look.clip.frames)
    grid_frame = None
    if args.flow_grid is not None:
        if not args.flow_grid.endswith(".npz"):
            raise _UsageError(f"--flow-grid: expected a file name ending in .npz, got {args.flow_grid!r}")
        if not any(f.kind == "convection" for f in look.forces) or not any(s.heat > 0 for s in look.sources):
            raise _UsageError(f"--flow-grid: expected a look with a force of kind \"convection\" and a source with "
                              f"heat > 0, got {look.path or look.name} without a moving flow")
        grid_frame = frames[len(frames) // 2] if args.flow_frame is None else args.flow_frame
        if grid_frame not in frames:
            raise _UsageError(f"--flow-frame: expected one of the frames simulated ({frames[0]} to {frames[-1]}), "
                              f"got {grid_frame}")
    elif args.flow_frame is not None:
        raise _UsageError("--flow-frame: expected together with --flow-grid FILE.npz")
    from splatter.deliver.states import save_flow_grid, save_states
    from splatter.render import look_plan
    from splatter.sim.driver import simulate

    plan = look_plan(look)  # "auto" swirl octaves resolved at the render's framing
    _say_plan(plan)
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    grid = []

    def states():
        for st in simulate(look, plan, frames=frames):
            if st.frame == grid_frame:
                grid.append(st)
            yield st

    save_states(args.out, states())
    print(f"wrote {args.out} ({len(frames)} frames)", file=sys.stderr)
    if grid_frame is not None:
        Path(args.flow_grid).parent.mkdir(parents=True, exist_ok=True)
        save_flow_grid(args.flow_grid, grid[0])
        print(f"wrote {args.flow_grid} (the flow's grid at frame {grid_frame})", file=sys.stderr)
    return EXIT_OK


def _cmd_pack(args) -> int:
    from splatter.deliver.pack import pack_folder

    for flag in ("columns", "rows"):
        v = getattr(args, flag)
        if v is not None and not 1 <= v <= 1024:
            raise _UsageError(f"--{flag}: expected a number from 1 to 1024, got {v}")
    if not 0 <= args.padding <= 256:
        raise _UsageError(f"--padding: expected a number from 0 to 256, got {args.padding}")
    if args.fps is not None and not args.fps > 0:
        raise _UsageError(f"--fps: expected a number > 0, got {args.fps}")
    try:
        written = pack_folder(
            args.dir,
            name=args.name,
            columns=args.columns,
            rows=args.rows,
            padding=args.padding,
            pow2=args.pow2,
            format=args.format,
            fps=args.fps,
            loop=args.loop,
            force=args.force,
        )
    except ValueError as err:
        raise _UsageError(f"pack: {err}") from None
    for path in written:
        print(f"wrote {path}", file=sys.stderr)
    return EXIT_OK


def _cmd_vary(args) -> int:
    from splatter.batch.plan import parse_sweep
    from splatter.batch.run import dry_run_lines, summary_lines, vary

    sweep = dict(parse_sweep(text) for text in args.sweep)
    manifest = vary(args.look, seeds=args.seeds, sweep=None, zip=args.zip, sets=args.overrides, out=args.out,
                    jobs=args.jobs, cluster=args.cluster, dry_run=args.dry_run, progress=not args.quiet,
                    parsed_sweep=sweep)
    if args.dry_run:
        print("\n".join(dry_run_lines(manifest)))
        return EXIT_OK
    for line in summary_lines(manifest):
        if not args.quiet or line.startswith("splatter: failed"):
            print(line, file=sys.stderr)
    return EXIT_OK if manifest["summary"]["failed"] == 0 else EXIT_INTERNAL


_COMMANDS = {"render": _cmd_render, "check": _cmd_check, "simulate": _cmd_simulate, "pack": _cmd_pack,
             "vary": _cmd_vary}


def _show_warning(message, category, filename, lineno, file=None, line=None):
    kind = "warning" if issubclass(category, LookWarning) else category.__name__
    print(f"splatter: {kind}: {message}", file=sys.stderr)


def main(argv: Optional[Sequence[str]] = None) -> int:
    """Run the command line; returns the exit code (also used as the console script)."""
    parser = _parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed its message
        return int(exc.code or 0) if exc.code in (0, None) else EXIT_BAD_INPUT
    warnings.showwarning = _show_warning
    try:
        return _COMMANDS[args.command](args)
    except LookError as err:
        print(f"splatter: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except _UsageError as err:
        print(f"splatter: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("splatter: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return EXIT_OK
    except OSError as err:  # the disk or the folder, not the look: say which file, no traceback
        where = f" {err.filename}" if getattr(err, "filename", None) else ""
        print(f"splatter: error: cannot write{where}: {err.strerror or err}", file=sys.stderr)
        # A path the user gave that cannot be used is bad input; a full or failing disk is not.
        return EXIT_BAD_INPUT if err.errno in _PATH_ERRNOS else EXIT_INTERNAL
    except Exception:  # an internal failure: show everything so it can be reported
        import traceback

        traceback.print_exc()
        print("splatter: internal error (exit 1); please report it with the look file", file=sys.stderr)
        return EXIT_INTERNAL


def run() -> None:
    """The console script: :func:`main`, then a quick exit.

    Every file is written and closed (atomically) before :func:`main`
    returns, so the interpreter's teardown, which spends about 0.4 s freeing
    numba's compiler state, is skipped with ``os._exit`` once the output
    streams are flushed.
    """
    code = main()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (BrokenPipeError, OSError, ValueError):
            pass
    os._exit(code)


if __name__ == "__main__":  # pragma: no cover
    run()

"""An honest output folder: the render manifest, stale files, and what ``--resume`` may keep.

Every render writes ``{stem}.render.json`` (the *manifest*) into its folder,
beside the files it lists::

    version       1
    software      "splatter 0.1.0"
    look          the look file, as it was given
    look_digest   sha-256 of everything in the look that decides a file's
                  bytes (every key but output.dir) and of the software version
    name, seed    the look's name and seed
    clip_frames   frames in the clip; fps, loop: the clip's
    state         "rendering" while frames are written (an interrupted render
                  stays so), "complete" once sheets and previews are written
    frames        frame numbers whose frame files are complete, ascending
    rendered      the frames of the last render (the frames its sheet holds)
    files         file names of this take in the folder, sorted
    stale         files named like this stem's that no manifest accounts for

Before a render writes anything, :meth:`RenderFolder.prepare` reads the
manifest an earlier render left and removes that render's sheets and
previews (a sheet is never left next to frames of another render) and
every file of it that this render will not rewrite, except frames of the
same take (same look digest): those stay listed, so frames rendered in
chunks (``--frames 0:32``, then ``--frames 32:64``) add up. Files named like
the stem that no manifest lists are never deleted; they are listed under
``stale`` and a warning names them.

``render --resume`` keeps the frames of the same take that the manifest
lists as complete and redoes the rest; when the same render already
completed and every file it lists is there, it does nothing. To write the sheets and previews
again bit for bit without rendering the kept frames, a render that writes
sheets or previews keeps each frame's share of them (its sheet cell, its
preview frames, its map layers) in the hidden folder ``.{stem}.resume/``
until the render completes; frames are deterministic, so the result has
the same bytes as a render that was never interrupted.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import json
import os
import shutil
import warnings
from typing import Dict, Iterable, List, Optional

import numpy as np

from splatter.core.errors import LookError, LookWarning
from splatter.deliver.fileio import atomic_path, atomic_write_text, temp_name_of
from splatter.deliver.map_frames import keeps_ranged_layers
from splatter.deliver.names import FRAME_FILE, file_stem, frame_file, manifest_file, planned_files
from splatter.look.records import LookSpec

__all__ = ["MANIFEST_VERSION", "look_digest", "read_manifest", "note_files", "check_folder", "missing_folders",
           "remove_folders", "RenderFolder"]

MANIFEST_VERSION = 1

PARTS_VERSION = 2
"""What a kept frame share (``.{stem}.resume/{frame}.npz``) holds; one of another version is not
used (its frame is rendered again). 2: normal and light-direction sheet tiles, not their layers."""


def look_digest(look: LookSpec) -> str:
    """sha-256 (hex) of what decides the bytes of a render's files: the look but its folder, and the version.

    Examples
    --------
    >>> from splatter.look.records import LookSpec, OutputSpec
    >>> a = LookSpec(name="quay_dust")
    >>> look_digest(a) == look_digest(LookSpec(name="quay_dust", output=OutputSpec(dir="elsewhere")))
    True
    >>> look_digest(a) == look_digest(LookSpec(name="quay_dust", seed=1))
    False
    """
    from splatter import __version__

    same = dataclasses.replace(look, path=None, output=dataclasses.replace(look.output, dir=""))
    return hashlib.sha256(f"splatter {__version__}\n{same!r}".encode()).hexdigest()


def read_manifest(folder, stem: str) -> Optional[dict]:
    """The manifest ``{stem}.render.json`` in ``folder``, or None when there is none or it is not one of ours."""
    path = os.path.join(os.fspath(folder), manifest_file(stem))
    try:
        with open(path, encoding="utf-8") as f:
            data = json.load(f)
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("version") != MANIFEST_VERSION or not isinstance(data.get("files"), list):
        return None
    return data


def note_files(folder, stem: str, *, added: Iterable[str] = (), removed: Iterable[str] = ()) -> None:
    """Add and remove file names in the manifest of ``stem``, when there is one (``pack`` rewrites sheets)."""
    data = read_manifest(folder, stem)
    if data is None:
        return
    names = (set(data["files"]) | {os.path.basename(p) for p in added}) - {os.path.basename(p) for p in removed}
    data["files"] = sorted(names)
    atomic_write_text(os.path.join(os.fspath(folder), manifest_file(stem)), json.dumps(data, indent=1) + "\n")


def missing_folders(folder) -> List[str]:
    """The folders ``os.makedirs(folder)`` would make, deepest first (it walks the path the same way).

    Examples
    --------
    >>> import tempfile
    >>> root = tempfile.mkdtemp()
    >>> [os.path.relpath(p, root) for p in missing_folders(os.path.join(root, "quay", "vents", "take_2"))]
    ['quay/vents/take_2', 'quay/vents', 'quay']
    >>> missing_folders(root)
    []
    """
    out: List[str] = []
    p = os.fspath(folder)
    while p and not os.path.exists(p):
        head, tail = os.path.split(p)
        if not tail:  # a trailing separator: makedirs splits once more
            head, tail = os.path.split(head)
        out.append(p)
        p = head if tail else ""
    return out


def remove_folders(folders: Iterable[str]) -> None:
    """Remove ``folders`` (from :func:`missing_folders`, deepest first) that are empty; leave any other.

    ``os.rmdir`` removes only an empty folder, so a folder that holds
    anything (or that is another name of a folder kept, as ``a/b/..``) stays.
    """
    for p in folders:
        with contextlib.suppress(OSError):
            os.rmdir(p)


def check_folder(folder: str, given: str, source: str, paths: Iterable[str]) -> None:
    """Make ``folder`` (if needed) and check that every file in ``paths`` can be written there.

    Raises :class:`~splatter.core.errors.LookError` (exit 2) naming ``given``
    (the folder as the user wrote it) and ``source`` (``--out`` or the look
    file) when the folder is a file, cannot be made or written, or a file to
    write is a folder.
    """

    def fail(expected, got):
        raise LookError(source, "output.dir", expected, got)

    if os.path.exists(folder) and not os.path.isdir(folder):
        fail("a folder", f"{given!r}, which is a file")
    try:
        os.makedirs(folder, exist_ok=True)
    except OSError as err:
        fail("a folder splatter can make", f"{given!r} ({err.strerror or err})")
    if not os.access(folder, os.W_OK | os.X_OK):
        fail("a folder splatter can write to", f"{given!r}, which is not writable")
    for path in paths:
        if os.path.isdir(path):
            fail("a folder where the files to write are not folders",
                 f"{os.path.join(given, os.path.basename(path))!r}, which is a folder")


class RenderFolder:
    """The manifest of one render, kept up to date as its files land.

    Parameters
    ----------
    look : LookSpec
    folder : str
        The output folder, placeholders filled in; it exists.
    frames : list of int
        The frames this render renders, in order.
    resume : bool
        Keep the complete frames of the same take (``render --resume``).
    """

    def __init__(self, look: LookSpec, folder: str, frames: List[int], *, resume: bool = False):
        self.look, self.folder, self.frames = look, folder, list(frames)
        self.stem = file_stem(look)
        self.digest = look_digest(look)
        self.resume = resume
        out = look.output
        # Whole-clip outputs need every frame: sheets, previews, and per-frame motion or depth
        # PNGs, whose encoding takes its range from the whole clip.
        self.keeps_parts = bool(out.sheet is not None or out.preview or keeps_ranged_layers(out))
        self.parts_dir = os.path.join(folder, f".{self.stem}.resume")
        self.kept: Dict[int, Dict[str, np.ndarray]] = {}
        self.complete_already = False
        self._frames_done: set = set()
        self._files: set = set()
        self._stale: List[str] = []

    # ------------------------------------------------------------ before

    def prepare(self) -> List[int]:
        """Clear what an earlier render left that this one must not keep; return the frames to render."""
        old = read_manifest(self.folder, self.stem)
        planned = {os.path.basename(p) for p in planned_files(self.look, self.folder, self.frames)}
        same_take = old is not None and old.get("look_digest") == self.digest
        if (self.resume and same_take and old.get("state") == "complete" and old.get("rendered") == self.frames
                and all(os.path.isfile(os.path.join(self.folder, n)) for n in old["files"])):
            self.complete_already = True  # nothing was interrupted: every file is there
            return []
        keep_frames = set()
        if same_take:
            exts = self.look.output.frames
            for f in old.get("frames", []):
                names = [frame_file(self.stem, f, e) for e in exts]
                if names and all(os.path.isfile(os.path.join(self.folder, n)) for n in names):
                    keep_frames.add(int(f))
        keep_files = {frame_file(self.stem, f, e) for f in keep_frames for e in self.look.output.frames}
        listed = set(old["files"]) if old is not None else set()
        for name in sorted(listed - keep_files - {manifest_file(self.stem)}):
            # Sheets, previews and frames of another take go now, before anything new is written,
            # so an interrupted render never leaves them beside its own.
            self._remove(name)
        if not (self.resume and same_take):
            self._clear_parts()
        todo = list(self.frames)
        if self.resume and same_take:
            for f in self.frames:
                if f in keep_frames and (not self.keeps_parts or self._load_part(f)):
                    self._frames_done.add(f)
            todo = [f for f in self.frames if f not in self._frames_done]
        self._frames_done |= keep_frames - set(self.frames)
        self._files = {n for n in keep_files if FRAME_FILE.match(n) and int(FRAME_FILE.match(n)["frame"])
                       in self._frames_done}
        for entry in os.listdir(self.folder):
            if temp_name_of(entry) in planned | listed:
                # Left by a render that was killed outright mid-write (the unfinished MP4 is
                # written for the whole render): nothing else will ever take it away.
                self._remove(entry)
        self._stale = self._strays(listed | planned)
        if self._stale:
            shown = ", ".join(self._stale[:5]) + (" ..." if len(self._stale) > 5 else "")
            warnings.warn(f"{self.folder}: {len(self._stale)} file(s) named like {self.stem!r} that no render "
                          f"manifest lists were left alone and are listed as stale in "
                          f"{manifest_file(self.stem)}: {shown}", LookWarning, stacklevel=3)
        if self.keeps_parts and todo:
            os.makedirs(self.parts_dir, exist_ok=True)
        self._write("rendering")
        return todo

    def _strays(self, accounted) -> List[str]:
        """Files of this stem's kinds that neither the old manifest nor this render accounts for."""
        out = []
        for entry in sorted(os.listdir(self.folder)):
            if entry in accounted or entry.startswith("."):
                continue
            m = FRAME_FILE.match(entry)
            if (m and m["name"] == self.stem) or (entry.startswith(self.stem + ".") and (
                    ".sheet." in entry or ".preview." in entry or entry.endswith(".contact.png"))):
                out.append(entry)
        return out

    def _remove(self, name: str) -> None:
        try:
            os.remove(os.path.join(self.folder, name))
        except FileNotFoundError:
            pass

    def _clear_parts(self) -> None:
        shutil.rmtree(self.parts_dir, ignore_errors=True)

    # ------------------------------------------------------------ during

    def _part_path(self, frame: int) -> str:
        return os.path.join(self.parts_dir, f"{frame:04d}.npz")

    def _load_part(self, frame: int) -> bool:
        try:
            with np.load(self._part_path(frame)) as z:
                if "parts_version" not in z.files or int(z["parts_version"]) != PARTS_VERSION:
                    return False  # kept by another version of splatter: render the frame again
                self.kept[frame] = {k: z[k] for k in z.files if k != "parts_version"}
        except Exception:  # damaged or foreign (a bad zip, a field of another shape): render the frame again
            return False
        return True

    def frame_done(self, frame: int, written: List[str], part: Dict[str, np.ndarray]) -> None:
        """A frame's files are in place (called on the sink's writer thread): keep its share, list it."""
        if self.keeps_parts:
            with atomic_path(self._part_path(frame)) as tmp:
                np.savez(tmp, **part, parts_version=np.array(PARTS_VERSION))
        self._frames_done.add(frame)
        self._files.update(os.path.basename(p) for p in written)
        self._write("rendering")

    # ------------------------------------------------------------ after

    def finish(self, files: Iterable[str]) -> str:
        """Sheets and previews are written: list every file, mark the take complete, drop the kept shares."""
        self._files.update(os.path.basename(p) for p in files)
        path = self._write("complete")
        self._clear_parts()
        return path

    def _write(self, state: str) -> str:
        look = self.look
        self._files.discard(manifest_file(self.stem))
        data = {
            "version": MANIFEST_VERSION,
            "software": f"splatter {_version()}",
            "look": look.path,
            "look_digest": self.digest,
            "name": look.name,
            "seed": look.seed,
            "clip_frames": look.clip.frames,
            "fps": look.clip.fps,
            "loop": look.clip.loop,
            "state": state,
            "frames": sorted(self._frames_done),
            "rendered": self.frames,
            "files": sorted(self._files | {manifest_file(self.stem)}),
            "stale": self._stale,
        }
        path = os.path.join(self.folder, manifest_file(self.stem))
        atomic_write_text(path, json.dumps(data, indent=1) + "\n")
        return path


def _version() -> str:
    from splatter import __version__

    return __version__

"""Atomic file writing: a render that is interrupted never leaves a truncated file.

Every writer in splatter writes to a temporary file in the target's own folder
and renames it over the target with :func:`os.replace`, which is atomic on
POSIX and Windows when both names are on the same file system. If writing
fails (or is interrupted), the temporary file is removed and any previous file
at the target is left untouched.
"""

from __future__ import annotations

import contextlib
import os
import re
import secrets

__all__ = ["atomic_path", "atomic_write", "atomic_write_bytes", "atomic_write_text", "temp_name_of"]

_TEMP = re.compile(r"^\.(?P<name>.+)\.[0-9a-f]{8}\.tmp")


def temp_name_of(entry: str):
    """The file a temporary of :func:`atomic_path` was to become, or None.

    Examples
    --------
    >>> temp_name_of(".plume.preview.mp4.0a1b2c3d.tmp.mp4"), temp_name_of("plume.0001.png")
    ('plume.preview.mp4', None)
    """
    m = _TEMP.match(entry)
    return m["name"] if m else None


def _temp_name(path: str, suffix: str) -> str:
    folder, name = os.path.split(path)
    # Hidden, unique, same folder (same file system, so the rename is atomic);
    # the suffix stays last so libraries that check extensions accept it.
    return os.path.join(folder, f".{name}.{secrets.token_hex(4)}.tmp{suffix}")


@contextlib.contextmanager
def atomic_path(path, *, suffix: str | None = None):
    """Yield a temporary path to write; on success rename it over ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        Final file name. Its folder must exist.
    suffix : str, optional
        Ending of the temporary name; defaults to the extension of ``path``
        (for example ``".exr"``) so writers that check it are satisfied.

    Yields
    ------
    str
        A path in the same folder as ``path`` that does not exist yet (an
        empty placeholder is created to reserve the name, with the usual
        permissions under the process umask).

    Notes
    -----
    On any exception (including ``KeyboardInterrupt``) the temporary file is
    removed and the exception propagates; ``path`` is not touched.
    """
    path = os.fspath(path)
    if suffix is None:
        suffix = os.path.splitext(path)[1]
    folder = os.path.dirname(path) or "."
    if not os.path.isdir(folder):
        raise FileNotFoundError(f"path: folder {folder!r} does not exist")
    while True:
        tmp = _temp_name(path, suffix)
        try:
            # 0o666 under the umask gives the permissions a plain open() would.
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        except FileExistsError:
            continue
        os.close(fd)
        break
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException as err:
        with contextlib.suppress(OSError):
            os.remove(tmp)
        if isinstance(err, OSError) and tmp in (err.filename, err.filename2):
            # Name the file the caller asked for, not the hidden temporary one.
            raise type(err)(err.errno, err.strerror, path) from None
        raise


def atomic_write(path, write_fn, *, suffix: str | None = None) -> str:
    """Call ``write_fn(tmp_path)`` and rename the result over ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        Final file name.
    write_fn : callable
        Called once with a temporary path (str) in the same folder; it must
        write the complete file there.
    suffix : str, optional
        See :func:`atomic_path`.

    Returns
    -------
    str
        ``path`` as a string.
    """
    with atomic_path(path, suffix=suffix) as tmp:
        write_fn(tmp)
    return os.fspath(path)


def atomic_write_bytes(path, data: bytes) -> str:
    """Write ``data`` to ``path`` atomically; returns ``path`` as a string."""

    def _write(tmp):
        with open(tmp, "wb") as f:
            f.write(data)

    return atomic_write(path, _write)


def atomic_write_text(path, text: str) -> str:
    """Write UTF-8 ``text`` to ``path`` atomically; returns ``path`` as a string."""
    return atomic_write_bytes(path, text.encode("utf-8"))

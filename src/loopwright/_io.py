"""Atomic, no-clobber file output shared by the CLI, the report and the exporters."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

__all__ = ["write_files_atomically"]


def _current_umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def write_files_atomically(
    directory: str | os.PathLike[str],
    files: Mapping[str, str | bytes],
    force: bool = False,
) -> list[Path]:
    """Write several files into one directory, each atomically, never clobbering by accident.

    Parameters
    ----------
    directory : path-like
        Target directory; created (with parents) if missing.
    files : mapping of str to str or bytes
        Plain file names (no directory part) and their contents; text is written as UTF-8
        with ``\\n`` line ends.
    force : bool
        Replace existing files. Without it, nothing is written if any target exists.

    Returns
    -------
    list of pathlib.Path
        The written paths, in the order given.

    Raises
    ------
    FileExistsError
        A target exists and ``force`` is false (message lists the files; nothing written).
    ValueError
        A name is empty, contains a path separator, or is ``.``/``..``.

    Notes
    -----
    Each file is first written in full to a temporary file in the target directory and
    flushed to disk, then moved into place: with ``force`` by ``os.replace`` (atomic on POSIX
    and Windows), without it by ``os.link`` (atomic, fails if the name appeared meanwhile),
    falling back to an existence check and ``os.replace`` where hard links are unsupported.
    A file being replaced is therefore never seen half-written.

    References
    ----------
    .. [1] IEEE Std 1003.1-2017 (POSIX), ``rename()`` and ``link()``.
    """
    target = Path(directory)
    names = list(files)
    for name in names:
        if (
            not name
            or name in (".", "..")
            or os.sep in name
            or (os.altsep and os.altsep in name)
            or "/" in name
        ):
            raise ValueError(f"file name must be a plain name without directories, got {name!r}")
    target.mkdir(parents=True, exist_ok=True)
    if not force:
        existing = [n for n in names if (target / n).exists()]
        if existing:
            raise FileExistsError(
                f"refusing to overwrite existing file(s) in {target}: {', '.join(existing)} "
                "(use force / --force to replace them)"
            )
    mode = 0o666 & ~_current_umask()
    temps: dict[str, str] = {}
    written: list[Path] = []
    try:
        for name in names:
            content = files[name]
            data = content.encode("utf-8") if isinstance(content, str) else bytes(content)
            fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".tmp", dir=target)
            temps[name] = tmp
            if hasattr(os, "fchmod"):
                os.fchmod(fd, mode)  # mkstemp creates 0600; give the usual permissions
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
        for name in names:
            dest = target / name
            tmp = temps[name]
            if force:
                os.replace(tmp, dest)
            else:
                try:
                    os.link(tmp, dest)
                except FileExistsError as err:
                    raise FileExistsError(
                        f"refusing to overwrite {dest}: it appeared while writing "
                        "(use force / --force to replace it)"
                    ) from err
                except OSError:
                    if dest.exists():
                        raise FileExistsError(
                            f"refusing to overwrite {dest} (use force / --force to replace it)"
                        ) from None
                    os.replace(tmp, dest)
                else:
                    os.unlink(tmp)
            temps.pop(name)
            written.append(dest)
    finally:
        for tmp in temps.values():
            try:
                os.unlink(tmp)
            except FileNotFoundError:
                pass
    return written

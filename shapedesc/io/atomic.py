"""Atomic file output: write to a temporary file in the same folder, then rename."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, overwrite: bool = True):
    """Yield a temporary path beside ``path``; on success it is renamed onto ``path``.

    The temporary name keeps the final suffixes (so writers that choose a format by
    suffix, such as nibabel and trimesh, still work).  On error the temporary file is
    removed and ``path`` is left as it was.

    Parameters
    ----------
    path : path-like
        Final destination.
    overwrite : bool
        If False and ``path`` exists, raise ``FileExistsError`` before writing.
    """
    path = Path(path)
    if not overwrite and path.exists():
        raise FileExistsError(f"{path}: exists already; choose another name or pass --force")
    path.parent.mkdir(parents=True, exist_ok=True)
    suffix = "".join(path.suffixes)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name.split('.')[0]}.", suffix=".part" + suffix,
                               dir=path.parent)
    os.close(fd)
    # mkstemp creates 0600; give the final file the permissions an ordinary open() would.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (fsync before rename)."""
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())


def write_text_atomic(path: str | os.PathLike, text: str) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    write_bytes_atomic(path, text.encode("utf-8"))

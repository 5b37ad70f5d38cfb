"""Atomic file writes: write to a temporary file beside the target, then publish it in one step.

A reader never sees a half-written file, a failed write leaves nothing behind, and an existing file
is replaced only when the caller asks (``overwrite=True``); otherwise publishing is create-only
(a hard link, which fails if the name appeared meanwhile).
"""

import contextlib
import os
import tempfile

__all__ = ["atomic_path"]


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(path, overwrite=False, exists_message=None, fsync=False):
    """Context manager yielding a temporary path to write; on success it becomes ``path``.

    Parameters
    ----------
    path : str or path-like
        Final file name.
    overwrite : bool
        Replace an existing ``path``; when False an existing file raises `FileExistsError`.
    exists_message : str, optional
        Message of that `FileExistsError` (default names the file and ``overwrite=True``).
    fsync : bool
        Flush the written data to disk before publishing.
    """
    path = os.fspath(path)
    directory = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix=f".{os.path.basename(path)}.", suffix=".tmp", dir=directory)
    os.close(fd)
    message = exists_message or f"{path!r} exists; pass overwrite=True to replace it"
    try:
        yield tmp
        os.chmod(tmp, 0o666 & ~_umask())  # an ordinary file's permissions, not mkstemp's 0600
        if fsync:
            with open(tmp, "rb+") as fh:
                os.fsync(fh.fileno())
        if overwrite:
            os.replace(tmp, path)
        else:
            try:
                os.link(tmp, path)
            except FileExistsError:
                raise FileExistsError(message) from None
            except OSError:  # file systems without hard links
                if os.path.exists(path):
                    raise FileExistsError(message) from None
                os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)

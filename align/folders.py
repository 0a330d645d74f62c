"""Folders written atomically: filled under a temporary name beside the target, then swapped in.

A reader (or a later run) sees either the old complete folder or the new complete one, never
a mix of files of two runs, and a failed or interrupted write leaves no temporary folder.
"""

from __future__ import annotations

import errno
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

from align.errors import InputError

#: ``renameat2`` flag that swaps two paths in one step (Linux 3.15+, glibc 2.28+).
_RENAME_EXCHANGE = 2
_AT_FDCWD = -100


@contextmanager
def new_folder(target):
    """Yield an empty temporary folder beside ``target``; when the block ends without an
    error, the temporary folder takes ``target``'s place (the old folder, if any, is deleted).

    Parameters
    ----------
    target : pathlib.Path
        The folder to create or replace; its parent is created when missing.

    Notes
    -----
    An existing ``target`` is swapped with the new folder in one ``renameat2(RENAME_EXCHANGE)``
    call, so a kill at any moment leaves ``target`` holding the old or the new complete
    folder; then the old one is deleted. Where the swap is not supported (another kernel or
    file system), the old folder is renamed aside and the new one renamed in: a kill between
    those two renames leaves both complete folders under their temporary names. SIGINT and
    SIGTERM are held during the swap and delivered after it (:class:`align.io.HeldSignals`).
    """
    from align.io import HeldSignals

    target = Path(target).absolute()
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name[:200]}.", suffix=".part",
                                    dir=target.parent))
    except OSError as exc:
        raise InputError(f"cannot write here ({exc.strerror})", source=str(target),
                         field="output") from None
    try:
        umask = os.umask(0)
        os.umask(umask)
        tmp.chmod(0o777 & ~umask)  # mkdtemp makes it private; a report folder is not
        yield tmp
        _sync(tmp)
        with HeldSignals() as held:
            _swap_in(tmp, target)
        held.deliver()
    finally:
        shutil.rmtree(tmp, ignore_errors=True)  # the new folder on failure, else the old one


def _sync(folder):
    """Flush the folder's files and the folder itself to disk (as :func:`align.io.atomic_write`
    does for one file), so that what is swapped in is whole even after a power cut."""
    for path in [*folder.iterdir(), folder]:
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _swap_in(tmp, target):
    """Put ``tmp`` at ``target``; afterwards ``tmp`` holds the old folder (or nothing)."""
    if not target.exists():
        os.rename(tmp, target)
        return
    if _exchange(tmp, target):
        return
    aside = Path(tempfile.mkdtemp(prefix=f".{target.name[:200]}.", suffix=".old",
                                  dir=target.parent))
    os.rename(target, aside)  # replaces the empty ``aside``
    os.rename(tmp, target)
    os.rename(aside, tmp)


def _exchange(a, b):
    """Swap two paths atomically; False where the system cannot."""
    import ctypes

    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    if renameat2(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP):
        return False
    raise OSError(code, os.strerror(code), str(b))

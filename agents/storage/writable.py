"""Output folders checked before the work that fills them, and cleaned after a failed write.

A command that runs for minutes and then cannot write its result loses the minutes; one that dies
halfway through writing leaves half a result. Commands call :func:`check_writable` before the work
and write inside :func:`kept_only_if_complete`, so a refused folder costs nothing and a failed write
leaves the folder as it was.
"""

from __future__ import annotations

import errno
import os
import secrets
import shutil
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from kiln.errors import KilnError

# What each failure means for the user; strerror alone ("File too large") hides the cause.
_REASONS = {
    errno.EFBIG: "a file reached this process's file-size limit (ulimit -f)",
    errno.ENOSPC: "no space left on the device",
    errno.EDQUOT: "the disk quota is used up",
    errno.EROFS: "the file system is read-only",
    errno.EACCES: "permission denied",
    errno.EPERM: "permission denied",
    errno.ENOTDIR: "part of the path is a file, not a folder",
}


def reason(err: OSError) -> str:
    """A short plain-language cause of a failed write."""
    # Some writers (moviepy's) raise OSError with only a message, no errno: its first line then.
    fallback = err.strerror or next(iter(str(err).splitlines()), "")[:100] or type(err).__name__
    return _REASONS.get(err.errno or 0, fallback.lower())


def _missing_folders(folder: Path) -> list[Path]:
    """The folders from ``folder`` up that do not exist yet, outermost first."""
    missing = []
    while not folder.exists() and folder != folder.parent:
        missing.append(folder)
        folder = folder.parent
    return missing[::-1]


def check_writable(folder: Path, fix: str) -> None:
    """Refuse ``folder`` unless a file can be created and written there; leave no trace either way.

    Missing folders are created for the test and removed after it. One byte is written, so a
    file-size limit of zero or a full disk shows here too, not after the work.

    Args:
        folder: Where the command will write.
        fix: What the user can do instead (the end of the message).

    Raises:
        KilnError: One line naming the folder and the cause.
    """
    folder = Path(folder)
    created = []
    try:
        for missing in _missing_folders(folder):
            missing.mkdir()
            created.append(missing)
        if not folder.is_dir():
            raise NotADirectoryError(errno.ENOTDIR, "not a folder", str(folder))
        probe = folder / f".kiln-write-test-{os.getpid()}-{secrets.token_hex(4)}"
        descriptor = os.open(probe, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        try:
            os.write(descriptor, b"k")
        finally:
            os.close(descriptor)
            probe.unlink()
    except OSError as err:
        raise KilnError(f"cannot write to {folder} ({reason(err)}): {fix}") from None
    finally:
        for made in reversed(created):
            made.rmdir()


@contextmanager
def kept_only_if_complete(folder: Path, what: str, fix: str, sole_writer: bool = False) -> Iterator[None]:
    """Create ``folder`` and run the block that writes into it; if the block fails, remove the
    folders it created, and keep everything that was there before.

    Args:
        folder: The output folder.
        what: What is being written, for the message (``the evaluation record``).
        fix: What the user can do (the end of the message).
        sole_writer: True where nothing else writes into ``folder`` meanwhile (one evaluation's
            video folder): entries that appeared during the block are removed too, because its
            writer (not atomic) may have left half a file.

    Raises:
        KilnError: One line, if the block raised an ``OSError``; other errors pass through after
            the same cleanup.
    """
    folder = Path(folder)
    created = _missing_folders(folder)
    earlier = set(os.listdir(folder)) if folder.is_dir() else set()
    try:
        folder.mkdir(parents=True, exist_ok=True)
        yield
    except BaseException as err:
        if created:
            shutil.rmtree(created[0], ignore_errors=True)
        elif sole_writer and folder.is_dir():
            for name in set(os.listdir(folder)) - earlier:
                path = folder / name
                shutil.rmtree(path, ignore_errors=True) if path.is_dir() else path.unlink(missing_ok=True)
        if isinstance(err, OSError):
            raise KilnError(f"cannot write {what} to {folder} ({reason(err)}): {fix}") from None
        raise

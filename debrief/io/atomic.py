"""Output files appear whole or not at all: write to a temporary file beside, then rename."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

from ..errors import InputError


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike):
    """Yield a temporary path in the target's folder; rename it onto `path` only on success.

    On any exception the temporary file is removed and `path` is left as it was.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(f"output folder does not exist: {folder}")
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=folder)
    os.close(fd)
    try:
        yield Path(tmp)
        # mkstemp creates 0600; give the result the permissions an ordinary open() would.
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_text_atomic(path, text: str) -> None:
    """Write `text` (UTF-8) to `path` atomically."""
    with atomic_path(path) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")


def write_csv_atomic(path, frame, **kwargs) -> None:
    """Write a DataFrame as CSV to `path` atomically (index off unless asked)."""
    kwargs.setdefault("index", False)
    with atomic_path(path) as tmp:
        frame.to_csv(tmp, **kwargs)

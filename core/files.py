"""Writing files so that they appear complete or not at all."""

from __future__ import annotations

import os
import stat
import tempfile
from pathlib import Path
from typing import Callable

from core.errors import InputError


def _new_file_mode(path: Path) -> int:
    """The mode the written file should have: the old file's, else 0o666 less the umask."""
    try:
        return stat.S_IMODE(path.stat().st_mode)
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


def atomic_write(path: str | os.PathLike, write: Callable[[Path], None], field: str = "file") -> Path:
    """Call ``write(tmp)`` on a temporary file beside ``path``, then move it over ``path``.

    The temporary file is flushed to disk and given the mode a normally created file
    would have (or the replaced file's) before the rename. On any failure it is
    removed and an existing ``path`` is left as it was. File-system errors become
    :class:`InputError` naming ``field`` and the path.

    Returns
    -------
    Path
        The path written.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError(field, str(path), "a file name, not a folder")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    except OSError as err:
        raise InputError(field, str(path), f"a file in a writable folder ({err.strerror or err})") from None
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        write(tmp_path)
        with open(tmp_path, "rb") as handle:
            os.fsync(handle.fileno())
        os.chmod(tmp_path, _new_file_mode(path))
        os.replace(tmp_path, path)
    except OSError as err:
        tmp_path.unlink(missing_ok=True)
        raise InputError(field, str(path), f"a writable file ({err.strerror or err})") from None
    except BaseException:
        tmp_path.unlink(missing_ok=True)
        raise
    return path


def read_text(path: str | os.PathLike, field: str, what: str) -> str:
    """The UTF-8 text of ``path``; unreadable or non-UTF-8 files raise :class:`InputError`
    naming ``field`` and saying the ``what`` that was expected ("preset file", ...)."""
    path = Path(path)
    try:
        return path.read_bytes().decode("utf-8")
    except OSError as err:
        raise InputError(field, str(path), f"a readable {what} ({err.strerror or err})") from None
    except UnicodeDecodeError:
        raise InputError(field, str(path), "a UTF-8 text file") from None

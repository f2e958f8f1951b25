"""Atomic file writes: a file is either its old self or the complete new one, never half.

Everything is first written to a hidden temporary file in the target's own folder (so the
final ``os.replace`` is a rename on one file system, which POSIX and Windows make atomic)
and moved into place only once it is complete and flushed to disk. A write that fails or
is killed midway leaves the previous file untouched; a kill can leave the temporary file
(``.NAME.*.part``) behind, never a damaged target.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from ..errors import SettingError

TEMP_SUFFIX = ".part"


@contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success move it onto ``path``.

    Parameters
    ----------
    path : path-like
        The file to (re)write. Its folder must exist.

    Yields
    ------
    pathlib.Path
        An empty file in the same folder; write the new content there (by name).

    Notes
    -----
    If the ``with`` body raises (or the process dies), ``path`` keeps its previous bytes
    and the temporary file is removed (unless the process was killed). The new file gets
    the old file's permissions, or the usual ones (0666 less the umask) when it is new.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise SettingError(f"Cannot write {target}: the folder {folder} does not exist; create it first.")
    fd, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=TEMP_SUFFIX, dir=folder)
    os.close(fd)
    temp = Path(name)
    try:
        yield temp
        _fsync_file(temp)
        os.chmod(temp, _mode_for(target))
        os.replace(temp, target)
    except BaseException:
        temp.unlink(missing_ok=True)
        raise
    _fsync_folder(folder)


def write_atomic(path: str | os.PathLike, data: bytes | str) -> Path:
    """Write ``data`` to ``path`` atomically (text as UTF-8) and return the path.

    Parameters
    ----------
    path : path-like
        The file to (re)write; its folder must exist.
    data : bytes or str
        The whole new content.

    Returns
    -------
    pathlib.Path
        ``path``, now holding exactly ``data``.
    """
    payload = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    with atomic_path(path) as temp:
        with open(temp, "wb") as handle:
            handle.write(payload)
    return Path(path)


def _mode_for(target: Path) -> int:
    try:
        return target.stat().st_mode & 0o7777
    except FileNotFoundError:
        return 0o666 & ~_umask()


def _umask() -> int:
    # Linux reports the umask without changing it; os.umask() changes it for every thread.
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _fsync_file(path: Path) -> None:
    with open(path, "rb+") as handle:
        os.fsync(handle.fileno())


def _fsync_folder(folder: Path) -> None:
    # Makes the rename itself durable; folders cannot be opened this way on Windows.
    if os.name != "posix":
        return
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)

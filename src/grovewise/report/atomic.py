"""Atomic writes: a file, or a whole folder, is either its old self or the complete new one.

A file is first written to a hidden temporary file in the target's own folder (so the
final ``os.replace`` is a rename on one file system, which POSIX and Windows make atomic)
and moved into place only once it is complete and flushed to disk. A write that fails or
is killed midway leaves the previous file untouched; a kill can leave the temporary file
(``.NAME.*.part``) behind, never a damaged target.

A folder (a written review: report, manifest and saved review together) is written whole
into a hidden sibling folder and then put in place of the old one (:func:`atomic_folder`).
On Linux the two folders trade places in one step (``renameat2`` with ``RENAME_EXCHANGE``);
elsewhere the old folder is renamed aside and the new one renamed in, and
:func:`restore_folder` finishes that move if a kill came between the two renames. A killed
write leaves a hidden ``.NAME.gw-*`` sibling behind, never a folder holding parts of both.
"""

from __future__ import annotations

import ctypes
import errno
import functools
import glob
import os
import shutil
import sys
import tempfile
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

from ..errors import SettingError

TEMP_SUFFIX = ".part"
# A folder write's hidden siblings: ``.NAME.gw-XXXX.new`` while it is written, ``.ready``
# once complete, ``.old`` for the replaced folder until it is removed.
FOLDER_TAG = ".gw-"
STAGING, READY, RETIRED = ".new", ".ready", ".old"


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
    with atomic_named(folder, lambda _temp: target.name, prefix=f".{target.name}.") as temp:
        yield temp


@contextmanager
def atomic_named(folder: str | os.PathLike, name_for: Callable[[Path], str], *,
                 prefix: str = ".content.") -> Iterator[Path]:
    """As :func:`atomic_path`, for a file whose name comes from its content (a digest).

    Yields a temporary path in ``folder`` (named ``PREFIX*.part``); once the body has written
    it, ``name_for(temp)`` gives the final name and the complete, flushed file is moved there.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise SettingError(f"Cannot write into {folder}: the folder does not exist; create it first.")
    fd, name = tempfile.mkstemp(prefix=prefix, suffix=TEMP_SUFFIX, dir=folder)
    os.close(fd)
    temp = Path(name)
    try:
        yield temp
        _fsync_file(temp)
        target = folder / name_for(temp)
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


# ---------------------------------------------------------------------- whole folders
@contextmanager
def atomic_folder(path: str | os.PathLike, *, drop: Iterable[str] = ()) -> Iterator[Path]:
    """Yield an empty hidden folder beside ``path``; on success it replaces ``path`` whole.

    Parameters
    ----------
    path : path-like
        The folder to (re)write; its parent folders are made when missing.
    drop : iterable of str
        Names in the old folder that must not outlive it (a signature of the old files, an
        error note of a failed earlier run).

    Yields
    ------
    pathlib.Path
        The new folder's content goes here; it becomes ``path`` when the ``with`` body ends.

    Notes
    -----
    Until the body has finished, ``path`` keeps its old content untouched. Entries of the old
    folder that the new content does not have (and ``drop`` does not name), such as notes a
    reviewer kept beside a report, are carried over as hard links (copies where the file
    system has none), so nothing else in the folder is lost. If the body raises, the hidden
    folder is removed. If the process is killed, ``path`` holds the old or the new content
    whole (where a system cannot trade two folders in one step, a kill between the two
    renames leaves ``path`` missing until :func:`restore_folder`, which every write and
    every opening of a saved review runs, puts the new one there); the next write removes
    the hidden sibling a kill left.
    """
    target = _real_folder(Path(path))
    parent = target.parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SettingError(f"Cannot make the folder {parent} ({exc.strerror or exc}); choose "
                           "a folder you may write to.") from None
    if target.exists() and not target.is_dir():
        raise SettingError(f"Cannot write the folder {target}: a file of that name is in the "
                           "way; give another folder name or move the file.")
    restore_folder(target)
    for left in leftover_folders(target):
        shutil.rmtree(left, ignore_errors=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}{FOLDER_TAG}", suffix=STAGING,
                                    dir=parent))
    try:
        # mkdtemp makes a private folder; the review's folder gets the old one's permissions,
        # or the usual ones (0777 less the umask)
        os.chmod(staging, target.stat().st_mode & 0o7777 if target.is_dir()
                 else 0o777 & ~_umask())
        yield staging
        _fsync_tree(staging)
        if target.is_dir():
            _carry(target, staging, set(drop))
        ready = staging.with_suffix(READY)
        os.rename(staging, ready)  # complete: a restore may now put it in place
        staging = ready
        old = _swap(ready, target)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    _fsync_folder(parent)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def leftover_folders(path: str | os.PathLike) -> list[Path]:
    """The hidden siblings an interrupted :func:`atomic_folder` of ``path`` left behind."""
    target = Path(path)
    pattern = glob.escape(f".{target.name}{FOLDER_TAG}") + "*"
    try:
        found = sorted(target.parent.glob(pattern), key=_mtime)
    except OSError:
        return []
    return [p for p in found if p.suffix in (STAGING, READY, RETIRED) and p.is_dir()]


def restore_folder(path: str | os.PathLike) -> str | None:
    """Finish a folder write that was killed between its two renames, if one was.

    Only acts when ``path`` is missing and a complete new folder (``.ready``) or the old one
    (``.old``) waits beside it: the new one is put in place, else the old one. Returns a
    sentence saying what was done, or None. Leftovers beside an existing ``path`` are left
    for the next write to remove (a write still running may own them).
    """
    target = _real_folder(Path(path))
    if os.path.lexists(target):
        return None
    left = leftover_folders(target)
    for suffix, what in ((READY, "the new content, written whole"),
                         (RETIRED, "the earlier content")):
        candidates = [p for p in left if p.suffix == suffix]
        if candidates:
            try:
                os.rename(candidates[-1], target)
            except OSError:
                return None
            return (f"a write of {target} was interrupted between its last two steps; it now "
                    f"holds {what}.")
    return None


def _real_folder(target: Path) -> Path:
    # a link to a folder: write the folder it points to, keep the link
    return Path(os.path.realpath(target)) if target.is_symlink() else target


def _mtime(p: Path) -> float:
    try:
        return p.stat().st_mtime
    except OSError:
        return 0.0


def _carry(old: Path, new: Path, drop: set[str]) -> None:
    """Entries of ``old`` that ``new`` lacks (and ``drop`` does not name) into ``new``."""
    for entry in old.iterdir():
        dest = new / entry.name
        if entry.name in drop or os.path.lexists(dest):
            continue
        if entry.is_symlink():
            os.symlink(os.readlink(entry), dest)
        elif entry.is_dir():
            shutil.copytree(entry, dest, symlinks=True, copy_function=_link_or_copy)
        else:
            _link_or_copy(entry, dest)


def _link_or_copy(src, dst) -> str:
    try:
        os.link(src, dst)
    except OSError:  # a file system without hard links
        shutil.copy2(src, dst)
    return str(dst)


def _swap(new: Path, target: Path) -> Path | None:
    """Put ``new`` at ``target``; return where the old content now is (None if none)."""
    try:
        if not os.path.lexists(target):
            os.rename(new, target)
            return None
        retired = new.with_suffix(RETIRED)
        if _exchange(new, target):  # ``new``'s path now holds the old content
            os.rename(new, retired)
            return retired
        os.rename(target, retired)
        os.rename(new, target)
        return retired
    except OSError as exc:
        raise SettingError(f"Cannot put the new {target.name} in place of {target} "
                           f"({exc.strerror or exc}); the earlier folder is unchanged; close "
                           "any program using it and try again.") from None


_AT_FDCWD = -100
_RENAME_EXCHANGE = 2


@functools.cache
def _renameat2():
    if not sys.platform.startswith("linux"):
        return None
    try:
        fn = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):  # a C library before glibc 2.28
        return None
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    fn.restype = ctypes.c_int
    return fn


def _exchange(a: Path, b: Path) -> bool:
    """Trade the places of ``a`` and ``b`` in one step; False where that is not offered."""
    fn = _renameat2()
    if fn is None:
        return False
    if fn(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.EXDEV):
        return False  # this file system cannot exchange: rename in two steps
    raise OSError(code, os.strerror(code), str(b))


def _fsync_tree(folder: Path) -> None:
    for root, _dirs, files in os.walk(folder):
        for name in files:
            path = Path(root) / name
            if not path.is_symlink():
                try:
                    _fsync_file(path)
                except PermissionError:  # a read-only file the body made: still written
                    pass
        _fsync_folder(Path(root))

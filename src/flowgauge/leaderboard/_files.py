"""Files of a leaderboard folder: reading a small file the organiser wrote (regular files only,
so that a FIFO or a device can neither block nor flood the reader), keeping every read and
write inside the folder, and writing the set of generated files all at once or not at all."""

from __future__ import annotations

import os
import shutil
import stat
import tempfile
from pathlib import Path

from ..errors import InputError
from ._text import clean

__all__ = ["read_small_file", "inside", "write_set", "STAGING_PREFIX"]

STAGING_PREFIX = ".rank-staging-"
_KINDS = ((stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a FIFO (named pipe)"),
          (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
          (stat.S_ISSOCK, "a socket"))
_UMASK = os.umask(0)
os.umask(_UMASK)


def _kind(mode: int) -> str | None:
    """What a non-regular file is, or None for a regular file."""
    if stat.S_ISREG(mode):
        return None
    return next((name for test, name in _KINDS if test(mode)), "not a regular file")


def read_small_file(path: Path, *, where: str, expected: str, missing: str,
                    max_bytes: int = 1 << 20) -> bytes:
    """The bytes of a small regular file; every failure is an :class:`InputError` naming it.

    The file type is checked before opening (a FIFO would block ``open``, a device would never
    end) and again on the open descriptor, which is opened without blocking.
    """
    try:
        kind = _kind(os.stat(path).st_mode)
        if kind is not None:
            raise InputError(f"is {kind}; expected {expected} (a regular file)", where=where)
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_NOCTTY", 0))
        with os.fdopen(fd, "rb") as f:
            kind = _kind(os.fstat(f.fileno()).st_mode)
            if kind is not None:
                raise InputError(f"is {kind}; expected {expected} (a regular file)", where=where)
            data = f.read(max_bytes + 1)
    except FileNotFoundError:
        raise InputError(missing, where=where) from None
    except PermissionError:
        raise InputError("cannot read the file (permission denied)", where=where) from None
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc.strerror or exc})", where=where) from None
    if len(data) > max_bytes:
        raise InputError(f"the file has more than {max_bytes:,} bytes; expected {expected}",
                         where=where)
    return data


def inside(board: Path, path: Path, *, where: str) -> Path:
    """``path``, after checking that it stays inside the board folder once symbolic links are
    resolved (the board is rebuilt from its own files, and writes nowhere else)."""
    root = board.resolve()
    target = path.resolve()
    if target != root and root not in target.parents:
        raise InputError(f"leads outside the board folder (to {clean(target, 200)}, through a "
                         "symbolic link); a board reads and writes only its own files",
                         where=where)
    return path


def _stage(path: Path, data: bytes) -> None:
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666 & ~_UMASK)
    with os.fdopen(fd, "wb") as f:
        f.write(data)
        f.flush()
        os.fsync(f.fileno())


def write_set(board: Path, files: dict[Path, bytes]) -> None:
    """Write ``files`` (paths inside ``board`` -> bytes) as one set: each is written in full to
    a staging folder inside the board first, then moved into place; should any step fail, the
    files already moved are put back, so that the board is left as it was.

    A failure to write (full disk, read-only folder, no permission) is an :class:`InputError`.
    """
    try:
        stage = Path(tempfile.mkdtemp(prefix=STAGING_PREFIX, dir=board))
    except OSError as exc:
        raise _write_error(board, exc) from None
    made: list[Path] = []      # folders created for new files
    moved: list[tuple[Path, Path | None]] = []  # (target, its old content kept in the stage)
    try:
        staged = []
        for i, (target, data) in enumerate(files.items()):
            tmp = stage / f"new-{i}"
            _stage(tmp, data)
            staged.append((tmp, target))
        for i, (tmp, target) in enumerate(staged):
            parts = target.relative_to(board).parts
            for k in range(1, len(parts)):
                folder = board.joinpath(*parts[:k])
                if not folder.exists():
                    folder.mkdir()
                    made.append(folder)
            old = None
            if target.exists() or target.is_symlink():
                old = stage / f"old-{i}"
                _keep_old(target, old)
            os.replace(tmp, target)
            moved.append((target, old))
    except OSError as exc:
        _undo(moved, made)
        raise _write_error(board, exc) from None
    except BaseException:
        _undo(moved, made)
        raise
    finally:
        shutil.rmtree(stage, ignore_errors=True)


def _keep_old(target: Path, old: Path) -> None:
    """A second name (or, where hard links are not allowed, a copy) of the file about to be
    replaced, to put back if the set fails."""
    try:
        os.link(target, old, follow_symlinks=False)
    except OSError:
        shutil.copy2(target, old, follow_symlinks=False)


def _undo(moved: list[tuple[Path, Path | None]], made: list[Path]) -> None:
    for target, old in reversed(moved):
        try:
            if old is None:
                target.unlink()
            else:
                os.replace(old, target)
        except OSError:
            pass
    for folder in reversed(made):
        try:
            folder.rmdir()
        except OSError:
            pass


def _write_error(board: Path, exc: OSError) -> InputError:
    reason = exc.strerror or str(exc)
    return InputError(f"cannot write the board ({reason}); nothing was changed", where=str(board))

"""Output files written atomically: a temporary file in the same folder, then a rename.

Every failure to write (a read-only folder, a parent that is a file, a name the file system refuses, a
full disk) becomes one :class:`OutputError` naming the path and the reason; no temporary file is left
behind and an existing output is either replaced whole or left as it was.
"""

from __future__ import annotations

import errno
import os
import shutil
import stat
import tempfile
from collections.abc import Iterable
from pathlib import Path

from .errors import InputError

_TEMP_STEM = 24  # characters of the output's name kept in the temporary name (a long name must still fit)


class OutputError(InputError):
    """An output path that cannot be written; ``key`` is the path."""

    def __init__(self, path: str | Path, message: str):
        self.key = str(path)
        self.message = message
        super().__init__(f"{path}: {message}")


def _reason(exc: OSError) -> str:
    """A short human reason for an OSError (strerror without the errno noise), with the fix."""
    fixes = {
        errno.EACCES: "no permission to write there: choose a folder you can write to",
        errno.EPERM: "no permission to write there: choose a folder you can write to",
        errno.EROFS: "the file system is read-only: choose another folder",
        errno.ENOTDIR: "part of the folder path is a file, not a folder: fix the path",
        errno.EISDIR: "it is a folder: give a file name",
        errno.EEXIST: "part of the folder path is a file, not a folder: fix the path",
        errno.ENAMETOOLONG: "the name is too long for the file system: shorten it",
        errno.ENOSPC: "the disk is full: free some space or choose another folder",
        errno.EDQUOT: "the disk quota is exceeded: free some space or choose another folder",
    }
    return fixes.get(exc.errno or 0, f"{exc.strerror or exc}: choose another path")


def check_output_file(path: str | Path, inputs: Iterable[str | Path | None] = ()) -> Path:
    """Refuse an output file path that cannot work, before any time is spent computing its content.

    Parameters
    ----------
    inputs : the files the command reads: the output may not be one of them.

    Raises
    ------
    OutputError
        For an empty name, an existing folder, a device, pipe or socket, one of the command's input
        files, a parent that is a file, a name too long for the file system, or a folder without write
        permission.
    """
    p = Path(path)
    if str(path) == "" or p.name in ("", ".", ".."):
        raise OutputError(path, "no file name: give a path such as 'prep.pdf'")
    try:
        _check_name(p.name, p)
        if p.is_dir():
            raise OutputError(p, f"it is a folder: give a file name inside it, e.g. '{p / 'out.pdf'}'")
        _check_target(p, inputs)
        _check_folder(p.parent, p)
    except OSError as exc:  # stat() itself can fail: a path too long, a folder without search permission
        raise OutputError(p, _reason(exc)) from None
    return p


def check_output_folder(
    path: str | Path, names: Iterable[str] = (), inputs: Iterable[str | Path | None] = ()
) -> Path:
    """Refuse an output folder that is a file, sits under a file or cannot be written, and output files
    ``names`` in it that are devices or one of the command's ``inputs``."""
    p = Path(path)
    if str(path) == "":
        raise OutputError(path, "no folder name: give a folder such as 'out'")
    try:
        _check_name(p.name, p)
        if p.exists() and not p.is_dir():
            raise OutputError(p, "it is a file, not a folder: give a folder for the output files")
        _check_folder(p, p)
        inputs = tuple(inputs)
        for name in names:
            _check_target(p / name, inputs)
    except OSError as exc:
        raise OutputError(p, _reason(exc)) from None
    return p


def _check_target(p: Path, inputs: Iterable[str | Path | None]) -> None:
    """Refuse writing over a device, pipe or socket, or over one of the command's input files."""
    if p.exists() and not p.is_file() and not p.is_dir():
        raise OutputError(p, "it is a device, pipe or socket, not a file: give the path of an ordinary file")
    for q in inputs:
        if q is not None and _same_file(p, Path(q)):
            raise OutputError(
                p,
                f"it is an input of this command ('{q}'): writing there would overwrite it; choose "
                "another path",
            )


def _same_file(a: Path, b: Path) -> bool:
    try:
        if a.exists() and b.exists():
            return os.path.samefile(a, b)
    except OSError:
        return False
    return a.resolve() == b.resolve()


def _check_folder(folder: Path, shown: Path) -> None:
    # walk up to the nearest existing ancestor: it must be a writable folder (missing ones are created)
    anc = folder
    while not anc.exists() and anc != anc.parent:
        _check_name(anc.name, shown)
        anc = anc.parent
    if not anc.is_dir():
        raise OutputError(shown, f"'{anc}' is a file, not a folder: fix the path")
    if not os.access(anc, os.W_OK | os.X_OK):
        raise OutputError(shown, f"no permission to write in '{anc}': choose a folder you can write to")


def _check_name(name: str, shown: Path) -> None:
    anc = shown.parent  # the limit belongs to the file system the name will live on
    while not anc.exists() and anc != anc.parent:
        anc = anc.parent
    try:
        limit = os.pathconf(anc, "PC_NAME_MAX")
    except (OSError, ValueError, AttributeError):  # no pathconf (Windows) or not answered: the common limit
        limit = 255
    if len(os.fsencode(name)) > limit:
        raise OutputError(
            shown,
            f"the name is {len(os.fsencode(name))} bytes long, more than the {limit} "
            "the file system allows: shorten it",
        )


def write_atomic(path: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` through a temporary file and a rename: no half-written output."""
    return write_atomic_bytes(path, text.encode("utf-8"))


def write_atomic_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and a rename.

    Raises
    ------
    OutputError
        If the file cannot be written; nothing is left behind and an existing file is unchanged.
    """
    return write_atomic_many({path: data})[0]


def write_atomic_many(files: dict[str | Path, bytes | str]) -> list[Path]:
    """Write several files as one unit: all of them, or none (existing files are then left unchanged).

    Every temporary file is written first; only then are they renamed into place. Should a rename fail
    part-way, the files already renamed are put back as they were.

    Raises
    ------
    OutputError
        Naming the path that failed and why.
    """
    staged: list[tuple[str, Path]] = []
    current: Path | None = None
    try:
        for path, data in files.items():
            current = Path(path)
            if current.name in ("", ".", ".."):
                raise OutputError(path, "no file name: give a path such as 'prep.pdf'")
            staged.append((_stage(current, data.encode("utf-8") if isinstance(data, str) else data), current))
        _publish_all(staged)
    except OSError as exc:
        for tmp, _ in staged:
            Path(tmp).unlink(missing_ok=True)
        # name the output whose temporary file or rename failed, else the one being staged
        failed = {tmp: target for tmp, target in staged}.get(str(exc.filename), current)
        raise OutputError(failed if failed is not None else "", _reason(exc)) from None
    except BaseException:
        for tmp, _ in staged:
            Path(tmp).unlink(missing_ok=True)
        raise
    return [p for _, p in staged]


def _stage(p: Path, data: bytes) -> str:
    """Write ``data`` to a temporary file beside ``p``; return its name."""
    if p.is_dir():
        raise IsADirectoryError(errno.EISDIR, "is a folder", str(p))
    _check_target(p, ())  # the rename would replace a device node or a pipe with a file
    p.parent.mkdir(parents=True, exist_ok=True)
    # the temporary name keeps only the start of the output's name, so a name near the file system's
    # limit fails (if at all) on the name itself, not on the longer temporary one
    fd, tmp = tempfile.mkstemp(dir=p.parent, prefix=f".{p.name[:_TEMP_STEM]}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return tmp


def _publish_all(staged: list[tuple[str, Path]]) -> None:
    # mkstemp makes 0600 files; give the outputs the permissions an ordinary write would
    umask = os.umask(0)
    os.umask(umask)
    for tmp, _ in staged:
        os.chmod(tmp, 0o666 & ~umask)
    done: list[tuple[Path, str | None]] = []  # (target, hard link to its old content, or None)
    try:
        for tmp, target in staged:
            backup = _keep_old(target, f"{tmp}.old") if len(staged) > 1 else None
            try:
                os.replace(tmp, target)
            except BaseException:
                if backup is not None:
                    Path(backup).unlink(missing_ok=True)
                raise
            done.append((target, backup))
    except BaseException:
        # undo the renames already done, newest first, so the unit is all-or-nothing
        for target, backup in reversed(done):
            if backup is not None:
                os.replace(backup, target)
            else:
                target.unlink(missing_ok=True)
        raise
    finally:
        for _, backup in done:
            if backup is not None:
                Path(backup).unlink(missing_ok=True)


def _keep_old(target: Path, backup: str) -> str | None:
    """Keep the current content of ``target`` reachable at ``backup`` (None if there is no target)."""
    if not target.exists():
        return None
    try:
        os.link(target, backup)  # a hard link: no copy, and the target itself is not touched
    except OSError:
        shutil.copy2(target, backup)  # file systems without hard links
    return backup


class _NotRegular(OSError):
    """The path names a pipe, socket or device: reading it could block forever or never end."""


def _read_regular(p: Path, limit_bytes: int) -> bytes:
    """At most ``limit_bytes + 1`` bytes of the regular file ``p``. Opened without blocking (a FIFO
    with no writer would otherwise wait forever) and checked to be a regular file before any read."""
    fd = os.open(p, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0))
    with os.fdopen(fd, "rb") as fh:
        mode = os.fstat(fd).st_mode
        if stat.S_ISDIR(mode):
            raise IsADirectoryError(errno.EISDIR, "is a folder", str(p))
        if not stat.S_ISREG(mode):
            raise _NotRegular(errno.EINVAL, "not a regular file", str(p))
        return fh.read(limit_bytes + 1)


def read_user_text(
    path: str | Path,
    *,
    what: str,
    limit_bytes: int,
    error,
    kind: str,
    missing_hint: str = "",
    too_large_hint: str = "check that this is the right file",
    encoding: str = "utf-8",
) -> str:
    """The text of a file the user named, read at most ``limit_bytes`` (one byte past it, rather than
    trusting stat(): pipes and devices have no size). Every problem is one ``error("", message)``.

    Parameters
    ----------
    what : what the file is, for messages ("plan", "recipe", ...).
    kind : what it should be, e.g. "a .toml file" or "a .csv file".
    missing_hint, too_large_hint : the fix suggested when it is missing or too large.
    encoding : "utf-8", or "utf-8-sig" to drop a byte-order mark.
    """
    p = Path(path)
    try:
        raw = _read_regular(p, limit_bytes)
    except FileNotFoundError:
        raise error("", f"{what} file '{p}' not found: check the path{missing_hint}") from None
    except IsADirectoryError:
        raise error("", f"{what} file '{p}' is a folder: give the path of {kind}") from None
    except _NotRegular:
        raise error(
            "",
            f"{what} file '{p}' is not a regular file (a pipe, socket or device): save it as a file and "
            "give that file's path",
        ) from None
    except OSError as exc:
        raise error("", f"cannot read {what} file '{p}': {exc.strerror or exc}") from None
    if len(raw) > limit_bytes:
        raise error("", f"{what} file '{p}' is larger than {limit_bytes // 1_000_000} MB; {too_large_hint}")
    try:
        return raw.decode(encoding)
    except UnicodeDecodeError as exc:
        raise error("", f"{what} file '{p}' is not UTF-8 text (byte {exc.start}): save it as UTF-8") from None

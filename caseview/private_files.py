"""Writing files that hold case data: owner-only (0600) from creation, complete or not at all.

Every writer of case data (exports, score/flag/history CSVs, reports, backups, workspaces) goes
through :func:`private_output` (or :func:`create_private_file` for a file SQLite fills): the data
goes to a hidden ``.NAME.partial-PID`` file beside the target, created with mode 0600 (never
readable by others, whatever the umask), and is moved into place only when complete
(``os.replace``, atomic on one file system). On any failure, Ctrl-C or termination the partial
file is removed and the target is untouched. File-system errors (disk full, read-only folder, no
permission) become one-line :class:`caseview.errors.InputError` messages. A named pipe or a
character device (``--out /dev/null``) is written into directly and stays what it is; a folder or
another kind of non-file is refused before anything is written.
"""

from __future__ import annotations

import errno
import os
from contextlib import contextmanager
from pathlib import Path

from .errors import InputError

OWNER_ONLY = 0o600


def describe_os_error(path, exc: OSError) -> str:
    """One line naming the file and what went wrong (disk full and read-only get plain words)."""
    if exc.errno == errno.ENOSPC or exc.errno == getattr(errno, "EDQUOT", -1):
        return f"{path}: cannot write: the disk is full (no space left on device); nothing was written"
    if exc.errno == errno.EROFS:
        return f"{path}: cannot write: the folder is on a read-only file system; nothing was written"
    if exc.errno in (errno.EACCES, errno.EPERM):
        return f"{path}: cannot write: permission denied; nothing was written"
    return f"{path}: cannot write ({exc.strerror or exc}); nothing was written"


def create_private_file(path) -> Path:
    """Create ``path`` empty with mode 0600; refuses an existing path (InputError)."""
    path = Path(path)
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, OWNER_ONLY)
    except FileExistsError:
        raise InputError(f"{path} already exists; choose a new path (nothing was changed)") from None
    except OSError as exc:
        raise InputError(describe_os_error(path, exc)) from None
    os.fchmod(fd, OWNER_ONLY)  # a umask can only remove bits; be explicit anyway
    os.close(fd)  # a new, empty file: no SQLite connection holds locks on it yet
    return path


def partial_path(path) -> Path:
    path = Path(path)
    return path.with_name(f".{path.name}.partial-{os.getpid()}")


def _is_stream(path: Path) -> bool:
    """True for an existing named pipe or character device; InputError for any other non-file target."""
    import stat

    try:
        mode = os.stat(path).st_mode
    except FileNotFoundError:
        return False
    except OSError as exc:
        raise InputError(describe_os_error(path, exc)) from None
    if stat.S_ISREG(mode):
        return False
    if stat.S_ISFIFO(mode) or stat.S_ISCHR(mode):
        return True
    if stat.S_ISDIR(mode):
        raise InputError(f"{path}: is a folder, not a file; give a file name to write to (nothing was written)")
    raise InputError(f"{path}: is not a regular file; give a file name to write to (nothing was written)")


@contextmanager
def private_output(path):
    """Yield a 0600 temporary path beside ``path``; on success it replaces ``path``, on failure it is removed.

    The writer opens the yielded path itself (``open(tmp, "w")``, ``DataFrame.to_csv(tmp)``,
    ``Workbook.save(tmp)``); opening an existing file for writing keeps its mode, so the data is
    never readable by others.
    """
    path = Path(path)
    if not path.parent.is_dir():
        raise InputError(f"{path.parent}: folder does not exist")
    if _is_stream(path):
        # A named pipe or a character device (``--out /dev/null``): write into it as it is. Moving a
        # finished file over it would replace the device or pipe with a regular file.
        try:
            yield path
        except OSError as exc:
            raise InputError(describe_os_error(path, exc)) from None
        return
    temporary = partial_path(path)
    try:
        temporary.unlink(missing_ok=True)
        create_private_file(temporary)
        yield temporary
        os.replace(temporary, path)
    except OSError as exc:
        raise InputError(describe_os_error(path, exc)) from None
    finally:
        try:
            temporary.unlink(missing_ok=True)
        except OSError:
            pass


@contextmanager
def private_text(path, encoding: str = "utf-8", newline: str = ""):
    """Open a 0600 partial file for text writing; it replaces ``path`` when the block ends without error."""
    with private_output(path) as temporary:
        with open(temporary, "w", encoding=encoding, newline=newline) as handle:
            yield handle


def ensure_can_write(path) -> None:
    """InputError now, before any work, when a file cannot be created beside ``path`` (a probe file is removed)."""
    path = Path(path)
    if not path.parent.is_dir():
        raise InputError(f"{path.parent}: folder does not exist")
    if _is_stream(path):
        return
    probe = partial_path(path)
    probe.unlink(missing_ok=True)
    create_private_file(probe)
    probe.unlink(missing_ok=True)


def save_workbook(book, path) -> None:
    """Save an openpyxl workbook to ``path`` through memory, then write the bytes ourselves.

    When openpyxl writes to a file that fails (a full disk), it leaves its zip archive open and the
    archive's clean-up later prints a traceback; building the archive in memory keeps every file
    system error in one ordinary ``OSError`` here.
    """
    import io

    buffer = io.BytesIO()
    book.save(buffer)
    with open(path, "wb") as handle:
        handle.write(buffer.getbuffer())

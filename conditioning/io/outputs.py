"""The engineer's files kept safe: inputs checked before reading, outputs before writing.

Three defences, each used by the command before any work and by the readers:

* :func:`require_regular_file`: an input must be a regular file (or a symlink to
  one). The readers open an input more than once (to sniff its format, then to
  read it), so a pipe (``cat k.mtx | conditioning diagnose /dev/stdin``), a FIFO
  or a device (``/dev/zero``) is refused in one line instead of hanging, reading
  forever, or being read as empty.
* :func:`check_outputs`: every output path is resolved to its file identity (the
  ``(st_dev, st_ino)`` pair of an existing file, and the real path with symlinks
  and ``..`` resolved) and compared with every input and every other output: a
  report written over the matrix, the DOF map, a load, or over another report
  of the same run is refused, naming both paths.
* :func:`atomic_output`: a report is written to a temporary file beside its
  target, flushed to the disk (``fsync``) and renamed over the target
  (``os.replace``, atomic on POSIX) only once complete. A failed write (a full
  disk, an interrupt) removes the temporary file and leaves an earlier report at
  that path as it was; the error names the target.
"""

from __future__ import annotations

import errno
import os
import secrets
import stat
from contextlib import contextmanager, suppress
from typing import Iterator, Optional, Sequence

from conditioning.errors import InputError, OutputError

#: Suffix of the temporary file a report is written to before the rename.
PARTIAL_SUFFIX = ".partial"

_KIND = {stat.S_IFIFO: "a pipe (FIFO)", stat.S_IFCHR: "a character device", stat.S_IFBLK: "a block device",
         stat.S_IFSOCK: "a socket"}


def require_regular_file(path: str) -> None:
    """Refuse an input that exists but is not a regular file (a pipe, a device, a socket).

    A missing file or a directory is left to the readers, which say so
    themselves. Raises :class:`InputError` naming the path.
    """
    try:
        mode = os.stat(path).st_mode
    except (OSError, ValueError):
        return
    if stat.S_ISREG(mode) or stat.S_ISDIR(mode):
        return
    kind = _KIND.get(stat.S_IFMT(mode), "not a regular file")
    raise InputError(path, f"is {kind}, not a regular file: inputs are read more than once "
                           "(format, then data); save it to a file first")


def _identity(path: str) -> set[tuple]:
    """Keys that name the same file: its inode when it exists, and its real path."""
    keys: set[tuple] = {("path", os.path.normcase(os.path.realpath(path)))}
    with suppress(OSError, ValueError):
        st = os.stat(path)
        keys.add(("inode", st.st_dev, st.st_ino))
    return keys


def check_outputs(inputs: Sequence[tuple[str, Optional[str]]],
                  outputs: Sequence[tuple[str, Optional[str]]]) -> None:
    """Refuse an output that is one of the inputs, or the same file as another output.

    Parameters
    ----------
    inputs, outputs : sequences of (label, path)
        The label is how the user named the file (``"MATRIX"``, ``"--dofs"``,
        ``"--json"``); a path of None is skipped, and ``"-"`` (standard
        output) is never a file.

    Raises
    ------
    OutputError
        Naming the output and the file it would overwrite.
    """
    seen: list[tuple[str, str, set[tuple]]] = []
    for label, path in inputs:
        if path is not None:
            seen.append((label, str(path), _identity(str(path))))
    n_inputs = len(seen)
    for label, path in outputs:
        if path is None or str(path) == "-":
            continue
        path = str(path)
        keys = _identity(path)
        for k, (other_label, other_path, other_keys) in enumerate(seen):
            if keys & other_keys:
                what = "the input" if k < n_inputs else "the output"
                raise OutputError(path, f"{label} would overwrite {what} {other_label} {other_path} "
                                        "(the same file); choose another output path")
        if os.path.isdir(path):
            raise OutputError(path, f"{label}: is a directory; give a file name")
        seen.append((label, path, keys))


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


@contextmanager
def atomic_output(path: str) -> Iterator[str]:
    """The path to write a report to; renamed over ``path`` only when the block completes.

    The temporary file sits beside the target (same file system, so the rename
    is atomic) and is named ``.<name>.<random>.partial``. When ``path`` exists
    and is not a regular file (``/dev/null``, ``/dev/stdout``, a FIFO) it is
    written directly, as a rename cannot replace it. A symlink is followed: its
    target receives the report and the link stays.

    Raises
    ------
    OutputError
        The write failed (full disk, no permission, ...): the message names
        ``path`` and says that an earlier file there is unchanged.
    """
    shown = str(path)
    with suppress(OSError):
        if not stat.S_ISREG(os.stat(shown).st_mode) and not stat.S_ISDIR(os.stat(shown).st_mode):
            try:
                yield shown
            except OSError as exc:
                raise _write_error(shown, exc, earlier=False) from None
            return
    target = os.path.realpath(shown)
    folder, name = os.path.split(target)
    earlier = os.path.exists(target)
    tmp = os.path.join(folder, f".{name}.{secrets.token_hex(4)}{PARTIAL_SUFFIX}")
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        os.close(fd)
    except OSError as exc:
        raise _write_error(shown, exc, earlier) from None
    try:
        yield tmp
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        if earlier:
            with suppress(OSError):
                os.chmod(tmp, stat.S_IMODE(os.stat(target).st_mode))
        else:
            os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, target)
    except BaseException as exc:
        with suppress(OSError):
            os.unlink(tmp)
        if isinstance(exc, OSError):
            raise _write_error(shown, exc, earlier) from None
        raise
    with suppress(OSError):  # the rename itself on the disk (best effort: not every file system allows it)
        dir_fd = os.open(folder or ".", os.O_RDONLY)
        try:
            os.fsync(dir_fd)
        finally:
            os.close(dir_fd)


def _write_error(path: str, exc: OSError, earlier: bool) -> OutputError:
    why = exc.strerror or (errno.errorcode.get(exc.errno or 0) if exc.errno else None) or str(exc)
    kept = "the earlier file at this path is unchanged" if earlier else "nothing was written"
    return OutputError(path, f"cannot be written ({why}); {kept}")


def write_atomically(write, data, path) -> None:
    """``write(data, path)`` through :func:`atomic_output`; ``"-"`` (standard output) as the writer does it."""
    if str(path) == "-":
        write(data, "-")
        return
    with atomic_output(str(path)) as tmp:
        write(data, tmp)

"""Atomic output files: written to a temporary file beside the target, then renamed.

Without ``overwrite`` an existing target is refused, also one that appears while
writing (the last step hard-links the temporary file, which cannot replace).  A
process killed while writing leaves at most a hidden temporary file (named with its
process id, removed by `remove_stale_temps` once that process is gone), never a
half-written file under the final name.  An output folder being filled carries the
`INCOMPLETE_MARKER` file until the last output is in place.
"""

import contextlib
import datetime as _dt
import errno
import os
import re
import secrets

from skyscale.core.validate import InputError

__all__ = ["atomic_output", "atomic_write_bytes", "check_output_dir", "incomplete_marker",
           "remove_stale_temps", "INCOMPLETE_MARKER"]

#: File present in an output folder while its outputs are incomplete.
INCOMPLETE_MARKER = "OUTPUTS_INCOMPLETE.txt"
_TEMP = re.compile(r"^\..+\.(\d+)-[0-9a-f]{12}\.tmp$")


def _reserve_temp(directory, base):
    while True:
        tmp = os.path.join(directory, f".{base}.{os.getpid()}-{secrets.token_hex(6)}.tmp")
        try:
            return os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666), tmp
        except FileExistsError:
            continue


def _exists_error(path):
    return FileExistsError(f"{path} already exists; pass overwrite=True (--overwrite on "
                           "the command line) to replace it, or choose another path")


@contextlib.contextmanager
def atomic_output(path, overwrite, *, text=False):
    """Yield a file in ``path``'s directory that becomes ``path`` only on success."""
    directory = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(directory):
        raise FileNotFoundError(f"output folder {directory} does not exist; create it first")
    if os.path.isdir(path):
        raise IsADirectoryError(f"{path} is a directory; pass a file name")
    if os.path.lexists(path) and not overwrite:
        raise _exists_error(path)
    fd, tmp = _reserve_temp(directory, os.path.basename(path))
    try:
        mode = dict(mode="w", newline="", encoding="utf-8") if text else dict(mode="wb")
        with os.fdopen(fd, **mode) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        if overwrite:
            os.replace(tmp, path)
            _sync_dir(directory)
        else:
            try:
                os.link(tmp, path)            # fails if someone created path meanwhile
            except FileExistsError:
                raise _exists_error(path) from None
            except OSError:                   # no hard links here: check, then rename
                if os.path.lexists(path):
                    raise _exists_error(path) from None
                os.replace(tmp, path)
            _sync_dir(directory)
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)


def atomic_write_bytes(path, data, *, overwrite=False):
    """Write ``data`` to ``path`` atomically; return the path as given."""
    with atomic_output(path, overwrite) as fh:
        fh.write(data)
    return path


def _sync_dir(directory):
    """Make a rename durable (best effort: not every file system allows it)."""
    with contextlib.suppress(OSError):
        fd = os.open(directory, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _alive(pid):
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def remove_stale_temps(directory):
    """Remove temporary files that killed writers left in ``directory``; return their names."""
    removed = []
    with contextlib.suppress(FileNotFoundError, NotADirectoryError):
        for name in os.listdir(directory):
            m = _TEMP.match(name)
            if m and int(m.group(1)) != os.getpid() and not _alive(int(m.group(1))):
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(os.path.join(directory, name))
                    removed.append(name)
    return removed


def check_output_dir(path, label="out"):
    """Make sure ``path`` is a folder this process can write into, or can become one.

    Nothing is created: a missing folder is checked through its nearest existing parent
    (the folder itself is made when the first output is written).  Raises `InputError`
    naming ``label`` when ``path`` is a file, lies under a file, or cannot be written
    (tested by creating and removing a temporary file).
    """
    path = os.path.abspath(os.fspath(path))
    if os.path.exists(path) and not os.path.isdir(path):
        raise InputError(f"{label} {path} is a file; give a folder for the outputs")
    probe_dir = path
    while not os.path.exists(probe_dir):
        probe_dir = os.path.dirname(probe_dir)
    if not os.path.isdir(probe_dir):
        raise InputError(f"{label} {path} cannot be made: {probe_dir} is a file; choose "
                         "another folder")
    try:
        fd, probe = _reserve_temp(probe_dir, "write-test")
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        why = {errno.EACCES: "permission denied", errno.EPERM: "permission denied",
               errno.EROFS: "the file system is read-only",
               errno.ENOSPC: "the disk is full"}.get(exc.errno, exc.strerror or str(exc))
        raise InputError(f"{label} {path} cannot be written ({why} in {probe_dir}); "
                         "choose a folder you can write to") from None
    return path


@contextlib.contextmanager
def incomplete_marker(directory, what="skyscale outputs"):
    """Keep `INCOMPLETE_MARKER` in ``directory`` while the block runs; remove it on success.

    On any exception (an interrupt included) the marker stays, saying that the folder's
    outputs are incomplete.
    """
    os.makedirs(directory, exist_ok=True)
    marker = os.path.join(directory, INCOMPLETE_MARKER)
    stamp = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    with open(marker, "w", encoding="utf-8") as fh:
        fh.write(f"The {what} in this folder are incomplete: they were being written "
                 f"(process {os.getpid()}, started {stamp}) and this file is removed only "
                 "after the last one is in place.  If it is still here, that run was "
                 "stopped while writing: run it again with --overwrite.\n")
    yield marker
    os.unlink(marker)
    _sync_dir(directory)

"""Atomic output files: written to a temporary file beside the target, then renamed.

Without ``overwrite`` an existing target is refused, also one that appears while
writing (the last step hard-links the temporary file, which cannot replace).
"""

import contextlib
import os
import secrets

__all__ = ["atomic_output", "atomic_write_bytes"]


def _reserve_temp(directory, base):
    while True:
        tmp = os.path.join(directory, f".{base}.{secrets.token_hex(6)}.tmp")
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
        else:
            try:
                os.link(tmp, path)            # fails if someone created path meanwhile
            except FileExistsError:
                raise _exists_error(path) from None
            except OSError:                   # no hard links here: check, then rename
                if os.path.lexists(path):
                    raise _exists_error(path) from None
                os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)


def atomic_write_bytes(path, data, *, overwrite=False):
    """Write ``data`` to ``path`` atomically; return the path as given."""
    with atomic_output(path, overwrite) as fh:
        fh.write(data)
    return path

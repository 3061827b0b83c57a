"""Files written whole or not at all, SHA-256 of a file, TOML text, free space: the one definition of each.

Every file qcpipe writes goes through :func:`atomic_path`: a temporary file in the
same folder, flushed to disk, then renamed over the final name (``os.replace``),
so a reader sees the old file or the complete new one, never a part.
"""

from __future__ import annotations

import errno
import hashlib
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

from .faults import crash_point


def sha256_of_file(path: str | Path) -> str:
    """Hex SHA-256 of a file's bytes (read in blocks; ``hashlib.file_digest``)."""
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


@contextmanager
def atomic_path(final: str | Path):
    """Yield a temporary path beside ``final``; rename it over ``final`` on success.

    The temporary file (``.<name>.<random>.tmp``) is in the same folder, so on the same
    file system, and the rename is atomic.  On any error it is removed.  A full disk or a
    permission problem becomes a one-line :class:`qcpipe.errors.ArchiveError`.
    """
    final = Path(final)
    try:
        final.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{final.name}.", suffix=".tmp", dir=final.parent)
    except OSError as err:
        raise storage_error(err, final) from None
    os.close(fd)
    tmp = Path(tmp)
    try:
        try:
            yield tmp
            with open(tmp, "rb") as fh:
                os.fsync(fh.fileno())
            crash_point(f"before-rename {final.name}")
            os.replace(tmp, final)
        except OSError as err:
            raise storage_error(err, final) from None
    finally:
        if tmp.exists():
            tmp.unlink()


def storage_error(err: OSError, final: Path):
    """An expected storage failure as a one-line ArchiveError (disk full, permissions); else ``err``."""
    from .errors import ArchiveError

    if err.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
        return ArchiveError(f"disk full while writing {final}: free space on the archive's disk and run again "
                            "(nothing half-written was kept; earlier files and versions are intact)")
    if err.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        return ArchiveError(f"cannot write {final} ({err.strerror}); check the archive folder's permissions")
    return err


def free_bytes(folder: str | Path) -> int:
    """Bytes free to this process on the disk that holds ``folder`` (or its nearest existing parent, for a
    folder not made yet); ``shutil.disk_usage``, so space reserved for root is not counted for others."""
    p = Path(folder).absolute()
    while not p.exists() and p != p.parent:
        p = p.parent
    return shutil.disk_usage(p).free


def write_text_atomic(final: str | Path, text: str) -> Path:
    """Write UTF-8 ``text`` to ``final`` atomically."""
    with atomic_path(final) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="\n")
    return Path(final)


def copy_atomic(src: str | Path, final: str | Path, *, sha256: str | None = None) -> Path:
    """Copy ``src`` to ``final`` atomically (the source is only read).

    With ``sha256``, the copy must have that hash, or nothing is kept and
    :class:`qcpipe.errors.SourceChanged` is raised (the source changed since it was hashed)."""
    from .errors import SourceChanged

    with atomic_path(final) as tmp:
        try:
            shutil.copyfile(src, tmp)
        except FileNotFoundError:
            raise SourceChanged(f"{src}: vanished before it was copied") from None
        if sha256 is not None and sha256_of_file(tmp) != sha256:
            raise SourceChanged(f"{src}: its content changed after it was hashed")
    return Path(final)


def toml_text(data: dict, *, comment: str = "") -> str:
    """``data`` as TOML text (tomli-w), after ``comment`` lines; ``None`` values are left out.

    Floats are written so that reading them back gives the same value.
    """
    import tomli_w

    head = "".join(f"# {line}\n" for line in comment.splitlines())
    return head + tomli_w.dumps(_without_none(data))


def _without_none(v):
    if isinstance(v, dict):
        return {k: _without_none(x) for k, x in v.items() if x is not None}
    if isinstance(v, (list, tuple)):
        return [_without_none(x) for x in v]
    return v

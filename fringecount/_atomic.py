"""Atomic writes: a reader never sees a half-written file or result folder."""

from __future__ import annotations

import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from .errors import ResultExistsError

__all__ = ["write_bytes_atomic", "write_text_atomic", "staged_directory"]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _ordinary_mode(path: Path, *, directory: bool) -> None:
    """Give a temporary file/folder the mode a plain open()/mkdir() would (mkstemp/mkdtemp use 0600/0700)."""
    os.chmod(path, (0o777 if directory else 0o666) & ~_umask())


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder, then rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        _ordinary_mode(Path(tmp), directory=False)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write UTF-8 ``text`` atomically (see :func:`write_bytes_atomic`)."""
    return write_bytes_atomic(path, text.encode("utf-8"))


@contextmanager
def staged_directory(out_dir: str | os.PathLike, *, force: bool = False,
                     marker: str = "summary.json") -> Iterator[Path]:
    """Yield a temporary sibling folder; on success it replaces ``out_dir`` in one rename.

    ``out_dir`` counts as holding a result when it contains ``marker``. Without
    ``force`` such a folder is never replaced (:class:`ResultExistsError`). An
    existing folder without a result (e.g. empty) is replaced. On any exception
    the staging folder is removed and ``out_dir`` is left as it was.
    """
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise ResultExistsError(
            f"{out_dir} exists and is not a folder; choose another --out path")
    if (out_dir / marker).exists() and not force:
        raise ResultExistsError(
            f"{out_dir} already holds a result; pass --force to replace it or choose another --out")
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".part", dir=out_dir.parent))
    _ordinary_mode(stage, directory=True)
    try:
        yield stage
        if out_dir.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".old", dir=out_dir.parent))
            os.rmdir(old)
            os.replace(out_dir, old)
            os.replace(stage, out_dir)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(stage, out_dir)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise

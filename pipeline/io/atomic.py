"""Atomic output writing: every file appears under its final name complete, or not at all.

Each writer writes to a temporary name in the destination folder, flushes it to
disk and renames it over the final name (``os.replace`` is atomic on POSIX), so
a killed run never leaves a half-written file where a finished one is expected.
"""

from __future__ import annotations

import contextlib
import json
import os
import socket
import tempfile
import time
from pathlib import Path
from typing import Any, Iterator

from astropy.io import fits
from astropy.table import Table

from pipeline.io.columns import described, table_kind

_UMASK = os.umask(0)
os.umask(_UMASK)

__all__ = ["atomic_path", "write_table", "write_fits", "write_text", "write_json"]


_HOST = socket.gethostname().replace(".", "_")
_STALE_ELSEWHERE_S = 86400.0


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _remove_stale(path: Path) -> None:
    """Remove temporary files of ``path`` left by writers that were killed.

    A temporary name carries the writer's host and process id: one from this
    host whose process is gone is removed; one from another host (a shared
    cluster file system) only when it is a day old. Live writers' files are
    never touched.
    """
    for stale in path.parent.glob(f".{path.name}.*.part"):
        parts = stale.name[len(path.name) + 2:].split(".")
        try:
            host, pid = parts[0], int(parts[1])
        except (IndexError, ValueError):
            continue
        with contextlib.suppress(FileNotFoundError):
            if host == _HOST and not _pid_alive(pid):
                stale.unlink()
            elif host != _HOST and time.time() - stale.stat().st_mtime > _STALE_ELSEWHERE_S:
                stale.unlink()


@contextlib.contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path next to ``path``; rename it to ``path`` on success.

    On any exception the temporary file is removed and ``path`` is untouched.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    _remove_stale(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.{_HOST}.{os.getpid()}.", suffix=".part", dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    os.chmod(tmp_path, 0o666 & ~_UMASK)  # mkstemp makes 0600 files; outputs get the usual permissions
    try:
        yield tmp_path
        with open(tmp_path, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp_path, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def write_table(table: Table, path: str | Path, kind: str | None = None) -> None:
    """Write an astropy table as ECSV (units and metadata kept), atomically.

    Each column gets its description and unit from :mod:`pipeline.io.columns` (looked up in the table ``kind``,
    by default the one the path names: ``limits.ecsv`` or ``limits/CO.ecsv`` is 'limits'); ``table`` itself is
    not changed. A column the registry does not list is written as it is.
    """
    out = described(table, kind if kind is not None else table_kind(path))
    with atomic_path(path) as tmp:
        out.write(tmp, format="ascii.ecsv", overwrite=True)


def write_fits(hdul: fits.HDUList, path: str | Path) -> None:
    """Write a FITS HDU list atomically, with CHECKSUM/DATASUM in every HDU.

    astropy's default checksum comment carries the current time, which would make identical data give
    different bytes; a fixed comment keeps reruns byte-identical.
    """
    for hdu in hdul:
        hdu.verify("silentfix")
        hdu.add_checksum(when="written by gasledger")
    with atomic_path(path) as tmp:
        hdul.writeto(tmp, overwrite=True, checksum=False)


def write_text(text: str, path: str | Path) -> None:
    """Write a text file atomically (UTF-8)."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_json(obj: Any, path: str | Path) -> None:
    """Write JSON atomically, keys sorted so identical inputs give identical bytes."""
    write_text(json.dumps(obj, indent=2, sort_keys=True, default=str) + "\n", path)

"""Provenance records: which config, which inputs (by checksum) and which version made an output.

Records hold no timestamps, so identical inputs give byte-identical tables.
"""

from __future__ import annotations

import functools
import hashlib
import json
import os
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterable

from astropy.io import fits

from pipeline.io import cards

if TYPE_CHECKING:
    from pipeline.settings import Settings

__all__ = ["file_checksum", "provenance_record", "add_to_header", "from_header"]

_CHUNK = 1 << 22


_TREE_MIN = 256 << 20     # files larger than this are hashed as a tree of 16 MiB blocks, in parallel
_TREE_BLOCK = 16 << 20


def _sha256(path: str | Path) -> str:
    """``sha256:<hex>`` of the bytes; for large files ``sha256-tree16M:<hex>``, the SHA-256 of the
    concatenated SHA-256 digests of consecutive 16 MiB blocks (hashed on all cores, so a cube is hashed at the
    speed of reading it)."""
    size = os.path.getsize(path)
    if size <= _TREE_MIN:
        digest = hashlib.sha256()
        with open(path, "rb") as fh:
            while block := fh.read(_CHUNK):
                digest.update(block)
        return "sha256:" + digest.hexdigest()
    # read sequentially (the disk's read-ahead keeps streaming) and hash the blocks on a pool of threads;
    # at most a few blocks are in flight, so memory stays bounded
    workers = max(1, os.cpu_count() or 1)
    digests: list = []
    with ThreadPoolExecutor(max_workers=workers) as pool, open(path, "rb", buffering=0) as fh:
        pending: list = []
        while block := fh.read(_TREE_BLOCK):
            pending.append(pool.submit(lambda b: hashlib.sha256(b).digest(), block))
            if len(pending) >= 2 * workers:
                digests.append(pending.pop(0).result())
        digests.extend(f.result() for f in pending)
    return "sha256-tree16M:" + hashlib.sha256(b"".join(digests)).hexdigest()


def file_checksum(path: str | Path, cache_dir: str | Path | None = None) -> str:
    """SHA-256 of a file's bytes, read in 4 MiB chunks (bounded memory).

    With ``cache_dir``, the checksum is remembered per file (keyed by its absolute path, size and modification
    time), so a large cube is hashed once per change rather than once per job that reads it.
    """
    if cache_dir is None:
        return _sha256(path)
    from pipeline.io.atomic import _remove_stale, write_json

    path = Path(path).resolve()
    st = path.stat()
    key = hashlib.sha1(str(path).encode()).hexdigest()
    entry = Path(cache_dir) / f"{key}.json"
    stamp = {"path": str(path), "size": st.st_size, "mtime_ns": st.st_mtime_ns}
    if entry.parent.is_dir():
        _remove_stale(entry)
    try:
        cached = json.loads(entry.read_text())
        if all(cached.get(k) == v for k, v in stamp.items()):
            return cached["checksum"]
    except (OSError, ValueError, KeyError):
        pass
    checksum = _sha256(path)
    write_json({**stamp, "checksum": checksum}, entry)
    return checksum


@functools.lru_cache(maxsize=1)
def code_version() -> str:
    """A digest of the package's code and data (every .py and .ecsv file below ``pipeline/``, and the schema).

    It goes into every rule's params, so a change of the code reruns the jobs it could change, and into every
    provenance record, beside the version number.
    """
    root = Path(__file__).resolve().parents[1]
    files = sorted(p for p in root.rglob("*") if p.suffix in (".py", ".ecsv") and "__pycache__" not in p.parts)
    files.append(root.parent / "config" / "schema.yaml")
    digest = hashlib.sha256()
    for path in files:
        if path.is_file():
            digest.update(str(path.relative_to(root.parent)).encode())
            digest.update(b"\0")
            digest.update(path.read_bytes())
    return digest.hexdigest()[:16]


def provenance_record(settings: "Settings | None", inputs: Iterable[str | Path], stage: str) -> dict[str, Any]:
    """A JSON-serialisable record of what made an output.

    Parameters
    ----------
    settings : Settings or None
        The step's settings: their ``record`` (the config sections the step was given, validated, defaults
        filled in) is stored, and input checksums are cached below their ``outdir``.
    inputs : paths
        Every file the output was computed from.
    stage : str
        Name of the workflow stage.
    """
    from pipeline import __version__

    cache = Path(settings.outdir) / ".checksums" if settings is not None else None
    return {
        "software": "gasledger",
        "version": __version__,
        "code": code_version(),
        "stage": stage,
        "inputs": {str(p): file_checksum(p, cache) for p in sorted(map(str, inputs))},
        "config": settings.record if settings is not None else None,
    }


def add_to_header(header: fits.Header, record: dict[str, Any]) -> None:
    """Store a provenance record in a FITS header (long-string card GLPROV)."""
    cards.put(header, "version", record["version"])
    cards.put(header, "stage", record["stage"])
    cards.put(header, "provenance", json.dumps(record, sort_keys=True, separators=(",", ":"), default=str))


def from_header(header: fits.Header) -> dict[str, Any]:
    """Read back a provenance record written by :func:`add_to_header`."""
    return json.loads(cards.get(header, "provenance", where="provenance"))

"""Results of exact, pure computations kept in a file between runs, by a digest of their inputs.

The campaign job combines every epoch again when one is added, yet most of what it computes for an earlier epoch
(a line-profile fit at a temperature of the sweep, say) has the same inputs as in the run before. A :class:`Memo`
keeps such results (a few floats and flags each) in a JSON file, by the SHA-256 of the computation's exact inputs
(arrays by their dtype, shape and bytes; numbers by their exact ``repr``), together with the code's digest
(:func:`pipeline.io.provenance.code_version`): a result read back is the one the computation gives, bit for bit
(JSON keeps a float's shortest round-tripping repr, NaN included), and changed code starts an empty memo. The file
keeps only the entries the last run used, so it does not grow with the runs.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np

__all__ = ["Memo", "memo_path", "inputs_key"]


def memo_path(outdir: str | Path, name: str) -> Path:
    """The file of memo ``name`` below a run's output folder."""
    return Path(outdir) / ".cache" / "memo" / f"{name}.json"


def inputs_key(*parts) -> str:
    """The SHA-256 of a computation's inputs: arrays by dtype, shape and bytes; anything else by its ``repr``
    (exact for Python and numpy floats, strings and tuples of them)."""
    digest = hashlib.sha256()
    for part in parts:
        if isinstance(part, np.ndarray):
            digest.update(repr((part.dtype.str, part.shape)).encode())      # a 0-d array keeps its shape ()
            digest.update(np.ascontiguousarray(part).tobytes())
        else:
            if isinstance(part, np.floating):
                part = float(part)
            digest.update(repr(part).encode())
        digest.update(b"\x1f")
    return digest.hexdigest()


class Memo:
    """A file of results (each a short sequence of floats, ints or bools) by :func:`inputs_key` digests.

    ``path`` None keeps nothing (every result is computed). Call :meth:`save` after the run's last
    :meth:`result`.
    """

    def __init__(self, path: str | Path | None) -> None:
        from pipeline.io.provenance import code_version

        self.path = None if path is None else Path(path)
        self._code = code_version()
        self._kept: dict[str, list] = {}
        self._used: dict[str, list] = {}
        self.computed = 0
        if self.path is not None and self.path.is_file():
            try:
                record = json.loads(self.path.read_text(encoding="utf-8"))
            except (OSError, ValueError):
                record = {}                     # unreadable (a foreign file): computed again and rewritten
            if isinstance(record, dict) and record.get("code") == self._code and isinstance(record.get("entries"),
                                                                                              dict):
                self._kept = record["entries"]

    def result(self, key: str, compute: Callable[[], Sequence[float | int | bool]]) -> tuple:
        """The kept result under ``key``, else ``compute()`` (kept from now on)."""
        value = self._kept.get(key)
        if value is None:
            value = [v.item() if isinstance(v, np.generic) else v for v in compute()]
            self.computed += 1
        self._used[key] = value
        return tuple(value)

    def save(self) -> None:
        """Write the results used since the memo was opened (atomically), when they differ from those read."""
        if self.path is None or (self.computed == 0 and self._used.keys() == self._kept.keys()):
            return
        from pipeline.io.atomic import atomic_path

        self.path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_path(self.path) as tmp:
            tmp.write_text(json.dumps({"code": self._code, "entries": self._used}), encoding="utf-8")

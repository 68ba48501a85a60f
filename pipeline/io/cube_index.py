"""The facts the workflow's job graph needs from each cube, read once per file version and kept in a small index.

Snakemake builds its job graph at every start (and, on a cluster, in every job it submits), and the graph needs
only each cube's regime and spectral range (which lines or bands it can hold). Reading and checking a header
costs milliseconds per cube; the index keeps, per cube path, the file's size and modification time with those
facts, so a start re-reads only the cubes that are new or have changed. A cube whose size or modification time
differs from its index entry is read again (and checked again by :func:`pipeline.io.cubes.read_cube_info`).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u

from pipeline.io.atomic import write_text
from pipeline.io.cubes import INFRARED_LIMIT, read_cube_info

__all__ = ["CubeSpan", "cube_spans", "index_location", "INDEX_VERSION"]

INDEX_VERSION = 1


@dataclass(frozen=True)
class CubeSpan:
    """A cube's spectral range as labelled (observed frequencies), and its regime."""

    freq_min: u.Quantity
    freq_max: u.Quantity

    @property
    def regime(self) -> str:
        """'infrared' when every channel lies short of :data:`pipeline.io.cubes.INFRARED_LIMIT`, else 'millimetre'."""
        longest = self.freq_min.to(u.um, equivalencies=u.spectral())
        return "infrared" if longest < INFRARED_LIMIT else "millimetre"

    @property
    def frequency_range(self) -> tuple[u.Quantity, u.Quantity]:
        return self.freq_min, self.freq_max


def _stamp(path: Path) -> list[int]:
    st = path.stat()
    return [st.st_size, st.st_mtime_ns]


def _read_index(index_path: Path | None) -> dict:
    if index_path is None or not index_path.is_file():
        return {}
    try:
        data = json.loads(index_path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}                       # a damaged index is rebuilt, never trusted
    return data.get("cubes", {}) if data.get("version") == INDEX_VERSION else {}


def cube_spans(cubes: dict[str, tuple[str, object]], index_path: str | Path | None = None) -> dict[str, CubeSpan]:
    """Each cube's :class:`CubeSpan`, from the index where the file is unchanged, else from its header.

    ``cubes`` maps cube id to (path, beam_arcsec as in the config). A header read also checks the cube as
    :func:`~pipeline.io.cubes.read_cube_info` does (and refuses a bad one). The index (JSON) is rewritten, atomically,
    only when an entry was added or changed; without ``index_path`` nothing is cached.
    """
    index_path = Path(index_path) if index_path is not None else None
    known = _read_index(index_path)
    out: dict[str, CubeSpan] = {}
    fresh: dict[str, dict] = {}
    for cube_id, (path, beam) in cubes.items():
        key = str(Path(path).resolve())
        stamp = _stamp(Path(path))
        entry = known.get(key)
        if entry is None or entry.get("stamp") != stamp:
            info = read_cube_info(path, beam)
            lo, hi = info.frequencies.min().to_value(u.Hz), info.frequencies.max().to_value(u.Hz)
            entry = {"stamp": stamp, "freq_min_hz": float(lo), "freq_max_hz": float(hi)}
        fresh[key] = entry
        out[cube_id] = CubeSpan(entry["freq_min_hz"] * u.Hz, entry["freq_max_hz"] * u.Hz)
    if index_path is not None and any(known.get(k) != v for k, v in fresh.items()):
        merged = dict(known, **fresh)
        index_path.parent.mkdir(parents=True, exist_ok=True)
        write_text(json.dumps({"version": INDEX_VERSION, "cubes": merged}, sort_keys=True, indent=0), index_path)
    return out


def index_location(workdir: str | Path = ".") -> Path:
    """Where a workflow's cube index lives: in Snakemake's own metadata folder of the working directory, never among
    the campaign's products (an output folder holds outputs only)."""
    return Path(workdir) / ".snakemake" / "gasledger" / "cube_index.json"

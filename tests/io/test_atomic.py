"""Tests of pipeline.io.atomic (complete-or-absent outputs) and pipeline.io.provenance checksums.

References: FIPS 180-2 SHA-256 example vectors; hashlib; astropy.io.fits checksum verification.
"""

import hashlib
import json
import os
import stat

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import QTable

from pipeline.io.atomic import atomic_path, write_fits, write_json, write_table, write_text
from pipeline.settings import Settings
from pipeline.io.provenance import code_version, add_to_header, file_checksum, from_header, provenance_record


def _only(folder, name):
    """The folder holds exactly ``name`` (no temporary ``.name.*.part`` left behind)."""
    assert sorted(p.name for p in folder.iterdir()) == [name]


def test_write_table_round_trip_and_no_temporary(tmp_path):
    table = QTable({"q": [1.0, 2.0] / u.s, "aperture_km": [1000.0, 3000.0] * u.km, "species": ["CO", "HCN"]})
    table.meta["note"] = "a test"
    path = tmp_path / "limits.ecsv"
    write_table(table, path)
    _only(tmp_path, "limits.ecsv")
    back = QTable.read(path, format="ascii.ecsv")    # astropy's own ECSV reader
    assert back["q"].unit == 1 / u.s and back["aperture_km"].unit == u.km
    assert list(back["species"]) == ["CO", "HCN"]
    assert back.meta["note"] == "a test"
    write_table(table[:1], path)                       # overwrite an existing file
    _only(tmp_path, "limits.ecsv")
    assert len(QTable.read(path, format="ascii.ecsv")) == 1


def test_write_fits_with_verified_checksums(tmp_path):
    data = np.arange(24, dtype=np.float32).reshape(2, 3, 4)
    path = tmp_path / "sub" / "cube.fits"                 # the folder is created
    write_fits(fits.HDUList([fits.PrimaryHDU(data)]), path)
    _only(path.parent, "cube.fits")
    # astropy verifies CHECKSUM/DATASUM on open (FITS checksum convention); a bad one would warn
    with fits.open(path, checksum=True) as hdul:
        assert "CHECKSUM" in hdul[0].header and "DATASUM" in hdul[0].header
        np.testing.assert_array_equal(hdul[0].data, data)


def test_write_text_and_json(tmp_path):
    write_text("héllo\n", tmp_path / "a.txt")
    _only(tmp_path, "a.txt")
    assert (tmp_path / "a.txt").read_bytes() == "héllo\n".encode("utf-8")
    write_json({"b": 1, "a": [1, 2]}, tmp_path / "a.txt")
    write_json({"a": [1, 2], "b": 1}, tmp_path / "b.json")
    # keys sorted: identical content gives identical bytes, independent of insertion order
    assert (tmp_path / "a.txt").read_bytes() == (tmp_path / "b.json").read_bytes()
    assert json.loads((tmp_path / "b.json").read_text()) == {"a": [1, 2], "b": 1}


def test_exception_leaves_the_old_file_untouched(tmp_path):
    path = tmp_path / "out.txt"
    path.write_text("old content\n")
    with pytest.raises(RuntimeError, match="stage failed"):
        with atomic_path(path) as tmp:
            tmp.write_text("half of the new")
            raise RuntimeError("stage failed")
    assert path.read_text() == "old content\n"
    _only(tmp_path, "out.txt")
    # a writer that fails half-way (the table cannot be serialised) leaves no partial file either
    with pytest.raises(TypeError, match="could not convert column 'x'"):
        write_table(QTable({"x": [object(), object()]}), tmp_path / "new.ecsv")
    _only(tmp_path, "out.txt")
    # KeyboardInterrupt (a BaseException) is cleaned up too
    with pytest.raises(KeyboardInterrupt):
        with atomic_path(tmp_path / "k.txt") as tmp:
            tmp.write_text("x")
            raise KeyboardInterrupt
    _only(tmp_path, "out.txt")


def test_output_permissions_follow_the_umask(tmp_path):
    # an output must get the mode an ordinary open() would give it (0666 & ~umask), not mkstemp's 0600
    ref = tmp_path / "ref.txt"
    ref.write_text("x")
    path = tmp_path / "out.txt"
    write_text("x", path)
    assert stat.S_IMODE(os.stat(path).st_mode) == stat.S_IMODE(os.stat(ref).st_mode)


def test_file_checksum_against_fips_vectors_and_hashlib(tmp_path):
    abc = tmp_path / "abc.bin"
    abc.write_bytes(b"abc")
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    assert file_checksum(abc) == "sha256:ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    empty = tmp_path / "empty.bin"
    empty.write_bytes(b"")
    # SHA-256 of the empty string (a standard test vector)
    assert file_checksum(empty) == "sha256:e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
    big = tmp_path / "big.bin"
    payload = np.random.default_rng(51).integers(0, 256, (1 << 22) + 12345, dtype=np.uint8).tobytes()
    big.write_bytes(payload)                      # longer than one 4 MiB read chunk
    assert file_checksum(big) == "sha256:" + hashlib.sha256(payload).hexdigest()


def test_provenance_record_and_header_round_trip(tmp_path):
    a = tmp_path / "a.bin"
    b = tmp_path / "b.bin"
    a.write_bytes(b"abc")
    b.write_bytes(b"xyz")
    sections = {"outdir": str(tmp_path / "out"), "limits": {"nsigma": 3}}
    settings = Settings.from_config(sections, sections=sections)
    record = provenance_record(settings, [b, a], stage="limits")
    assert list(record["inputs"]) == sorted([str(a), str(b)])
    assert record["inputs"][str(b)] == "sha256:" + hashlib.sha256(b"xyz").hexdigest()
    assert record["stage"] == "limits"
    # no timestamps: identical inputs give identical records
    assert set(record) == {"software", "version", "code", "stage", "inputs", "config"}
    assert record["config"] == sections                        # the sections the step was given, nothing else
    assert len(record["code"]) == 16 and record["code"] == code_version()
    assert provenance_record(settings, [a, b], stage="limits") == record
    header = fits.Header()
    add_to_header(header, record)
    path = tmp_path / "p.fits"
    fits.PrimaryHDU(header=header).writeto(path)  # long-string (CONTINUE) card survives the file
    assert from_header(fits.getheader(path)) == json.loads(json.dumps(record))
    assert fits.getheader(path)["GLSTAGE"] == "limits"


def test_checksum_cache_follows_the_file(tmp_path):
    # the cached value equals hashlib's, and a changed file (new size/mtime) is hashed again
    import hashlib
    import os

    from pipeline.io.provenance import file_checksum

    f = tmp_path / "cube.bin"
    f.write_bytes(b"abc")
    cache = tmp_path / "cache"
    first = file_checksum(f, cache)
    assert first == "sha256:" + hashlib.sha256(b"abc").hexdigest()
    assert file_checksum(f, cache) == first and len(list(cache.iterdir())) == 1
    f.write_bytes(b"abcd")
    os.utime(f, ns=(1, 2))
    assert file_checksum(f, cache) == "sha256:" + hashlib.sha256(b"abcd").hexdigest()


def test_large_files_use_the_block_tree_hash(tmp_path, monkeypatch):
    # the tree form: SHA-256 over the concatenated SHA-256 digests of consecutive blocks (computed here by hashlib)
    import hashlib

    import pipeline.io.provenance as prov

    monkeypatch.setattr(prov, "_TREE_MIN", 10)
    monkeypatch.setattr(prov, "_TREE_BLOCK", 7)
    data = bytes(range(40))
    f = tmp_path / "big.bin"
    f.write_bytes(data)
    blocks = b"".join(hashlib.sha256(data[i:i + 7]).digest() for i in range(0, 40, 7))
    assert prov.file_checksum(f) == "sha256-tree16M:" + hashlib.sha256(blocks).hexdigest()


def test_stale_temporary_files_of_dead_writers_only_are_removed(tmp_path):
    # a live writer's temporary file (this process) survives another write; a dead writer's is removed
    import os
    import subprocess
    import sys

    from pipeline.io.atomic import _HOST, write_text

    target = tmp_path / "out.txt"
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead_pid = int(dead.stdout)
    stale = tmp_path / f".out.txt.{_HOST}.{dead_pid}.abc.part"
    live = tmp_path / f".out.txt.{_HOST}.{os.getpid()}.xyz.part"
    stale.write_text("half")
    live.write_text("in progress")
    write_text("done", target)
    assert target.read_text() == "done" and not stale.exists() and live.exists()

"""The cube index: each cube's spectral range read once per file version, and re-read when the file changes."""

import json
import os

import astropy.units as u
import pytest

from pipeline.catalogue.coverage import lines_for_cube
from pipeline.catalogue.entries import load_catalogue
from pipeline.errors import CubeError
from pipeline.io import cube_index
from pipeline.io.cube_index import cube_spans
from pipeline.io.cubes import read_cube_info
from tests.cubes import write_cube


def test_span_equals_the_header_and_gives_the_same_lines(tmp_path):
    path = write_cube(tmp_path / "a.fits")
    index = tmp_path / "out" / ".cube_index.json"
    span = cube_spans({"a": (str(path), None)}, index)["a"]
    info = read_cube_info(path)
    # the header's own axis (CRVAL3 + (i - CRPIX3) CDELT3, FITS WCS paper III) is the reference
    assert span.freq_min == info.frequencies.min() and span.freq_max == info.frequencies.max()
    assert span.regime == info.regime == "millimetre"
    catalogue = load_catalogue()
    assert lines_for_cube(span, catalogue, ["CO"]) == lines_for_cube(info, catalogue, ["CO"]) == ["CO_230538"]
    assert index.is_file()


def test_an_unchanged_cube_is_not_read_again(tmp_path, monkeypatch):
    path = write_cube(tmp_path / "a.fits")
    index = tmp_path / ".cube_index.json"
    cube_spans({"a": (str(path), None)}, index)
    before = index.stat().st_mtime_ns

    def refuse(*args, **kwargs):
        raise AssertionError("header read although the index holds this file version")

    monkeypatch.setattr(cube_index, "read_cube_info", refuse)
    again = cube_spans({"a": (str(path), None)}, index)["a"]
    assert again.freq_max == read_cube_info(path).frequencies.max()
    assert index.stat().st_mtime_ns == before          # nothing new: the index is not rewritten


def test_a_changed_cube_is_read_and_checked_again(tmp_path):
    path = write_cube(tmp_path / "a.fits")
    index = tmp_path / ".cube_index.json"
    first = cube_spans({"a": (str(path), None)}, index)["a"]
    write_cube(path, CRVAL3=345.7e9)                       # same size, another band
    os.utime(path, ns=(path.stat().st_atime_ns, path.stat().st_mtime_ns + 10**9))
    second = cube_spans({"a": (str(path), None)}, index)["a"]
    assert (second.freq_max - first.freq_max).to_value(u.Hz) == pytest.approx(345.7e9 - 230.5e9)
    write_cube(path, BMAJ=None, BMIN=None)                 # a cube that is now unusable is refused, not served
    os.utime(path, ns=(path.stat().st_atime_ns, path.stat().st_mtime_ns + 2 * 10**9))
    with pytest.raises(CubeError, match="beam"):
        cube_spans({"a": (str(path), None)}, index)


def test_a_damaged_or_older_index_is_rebuilt(tmp_path):
    path = write_cube(tmp_path / "a.fits")
    index = tmp_path / ".cube_index.json"
    index.write_text("{not json")
    assert cube_spans({"a": (str(path), None)}, index)["a"].regime == "millimetre"
    assert json.loads(index.read_text())["version"] == cube_index.INDEX_VERSION
    index.write_text(json.dumps({"version": -1, "cubes": {str(path.resolve()): {"stamp": [0, 0]}}}))
    assert cube_spans({"a": (str(path), None)}, index)["a"].freq_min == read_cube_info(path).frequencies.min()

"""The bad-input catalogue: every way a user can hand gasledger a broken campaign, met the way a user meets it.

Each case spoils one thing of a tiny, otherwise valid one-cube campaign (bad_builders.tiny_campaign) and runs
it the way the workflow does: first the checks rules/common.smk makes when Snakemake builds the job graph, then
the stages in order (geometry, comoving, extract, stack, limits), each inside ``stage_errors`` as the rule
scripts run them. Every case must stop at the step named in the table with

* exactly one sentence, ``gasledger: <sentence>`` on stderr, naming the file, the config key or the header card,
  what was found and what was expected (checked by fragments of the text);
* exit status 1;
* no output for the failing step (nothing at all below the outdir when the job graph is refused).

Two inputs are not errors by design and are checked as handled and reported: blank (NaN) channel planes, and a
line whose integration window the band does not cover. tests/bad_inputs/test_cli_bad_inputs.py runs a few of
these cases through the real ``snakemake`` command line.
"""

import logging
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import QTable, Table
from astropy.time import Time
from bad_builders import (CUBE_ID, LINE_ID, N_CHAN, Failed, TinyCampaign, assert_one_sentence, cube_hdu, dag_checks,
                          ephemeris_table, outputs_below, run_workflow, tiny_campaign, write_hdu)

from pipeline.catalogue.entries import DEFAULT_LINES_FILE, DEFAULT_SPECIES_FILE
from pipeline.io.cubes import read_cube_info
from pipeline.geometry.ephemeris import read_ephemeris
from pipeline.errors import EphemerisError
from pipeline.geometry.orbit import write_ephemeris

REPO = Path(__file__).resolve().parents[2]


# --------------------------------------------------------------------------------------------------------------- #
# the spoilers: each changes one thing of the tiny campaign and returns the config to run


def _cube(**cards):
    def spoil(c: TinyCampaign) -> dict:
        write_hdu(cube_hdu(**cards), c.cube)
        return c.fresh_config()
    return spoil


def _data(data):
    return _cube(data=data)


def _ephem(change: Callable[[QTable], QTable]):
    def spoil(c: TinyCampaign) -> dict:
        write_ephemeris(change(ephemeris_table()), c.ephemeris)
        return c.fresh_config()
    return spoil


def _config(change: Callable[[TinyCampaign, dict], None]):
    def spoil(c: TinyCampaign) -> dict:
        config = c.fresh_config()
        change(c, config)
        return config
    return spoil


def _not_fits(c):
    c.cube.write_text("a text file saved with a .fits name\n" * 20)
    return c.fresh_config()


def _truncated(c):
    data = c.cube.read_bytes()
    c.cube.write_bytes(data[: len(data) // 2])
    return c.fresh_config()


def _image_2d(c):
    header = cube_hdu().header
    hdu = fits.PrimaryHDU(np.zeros((48, 48), dtype=np.float32))
    for key in ("CTYPE1", "CRVAL1", "CDELT1", "CRPIX1", "CTYPE2", "CRVAL2", "CDELT2", "CRPIX2", "SPECSYS",
                "BUNIT", "BMAJ", "BMIN", "DATE-OBS"):
        hdu.header[key] = header[key]
    write_hdu(hdu, c.cube)
    return c.fresh_config()


def _drop(name):
    def change(t):
        t.remove_column(name)
        return t
    return change


def _wrong_unit(t):
    t["delta"] = t["delta"].value * u.km / u.s
    return t


def _unsorted(t):
    order = list(range(len(t)))
    order[3], order[4] = order[4], order[3]
    return t[order]


def _gap(t):
    # rows every 2 h; none from 05-31T20:00 to 06-01T10:00, across the exposure (06-01T02:00 to 03:00)
    hours = (t["time"] - t["time"][0]).to_value(u.h)
    return t[(hours <= 20.0) | (hours >= 34.0)]


def _shift_ra(t):
    t["ra"] = t["ra"] + 0.05 * u.deg          # 180 arcsec east of a 14.4-arcsec field
    return t


def _late(t):
    return ephemeris_table(start="2030-06-02T00:00:00", hours=48.0)


def _set(key, value):
    def change(c, config):
        config[key] = value
    return change


def _second_cube_same_id(c, config):
    other = c.root / "data" / "again" / "c1.fits"
    other.parent.mkdir()
    other.write_bytes(c.cube.read_bytes())
    config["cubes"].append({"path": str(other)})


def _id(value):
    def change(c, config):
        config["cubes"][0]["id"] = value
    return change


def _user_catalogue(edit):
    def change(c, config):
        species = QTable.read(DEFAULT_SPECIES_FILE, format="ascii.ecsv")
        species = edit(species)
        path = c.root / "data" / "my_species.ecsv"
        species.write(path, format="ascii.ecsv", overwrite=True)
        config["catalogue"] = {"species_file": str(path), "lines_file": str(DEFAULT_LINES_FILE)}
    return change


def _rename_hcn(t):
    t["species"] = [("../HCN" if s == "HCN" else s) for s in t["species"]]
    return t


def _missing_file(which):
    def change(c, config):
        if which == "cube":
            config["cubes"][0]["path"] = str(c.root / "data" / "absent.fits")
        else:
            config["target"]["ephemeris"] = str(c.root / "data" / "absent.ecsv")
    return change


def _states(c: TinyCampaign, meta: dict, start: str = "2030-05-31T00:00:00") -> str:
    """A spacecraft's state table 1.5 million km from the Earth (astropy's built-in Earth), 6-hourly for 3 days."""
    from astropy.coordinates import get_body_barycentric_posvel

    times = Time(start, scale="utc") + np.arange(0, 73, 6) * u.hour
    pos, vel = get_body_barycentric_posvel("earth", times)
    xyz, v = pos.xyz.to(u.km) + [[1.5e6], [0.0], [0.0]] * u.km, vel.xyz.to(u.km / u.s)
    path = c.root / "data" / "probe.ecsv"
    QTable({"time": times, "x": xyz[0], "y": xyz[1], "z": xyz[2], "vx": v[0], "vy": v[1], "vz": v[2]},
           meta=meta).write(path, format="ascii.ecsv", overwrite=True)
    return str(path)


def _spacecraft(meta: dict, start: str = "2030-05-31T00:00:00", **cards):
    def spoil(c: TinyCampaign) -> dict:
        if cards:
            write_hdu(cube_hdu(**cards), c.cube)
        config = c.fresh_config()
        config["observatory"] = {"name": "Probe (fictional)", "states": _states(c, meta, start)}
        return config
    return spoil


def _geocentric_table_at_a_site(c: TinyCampaign) -> dict:
    table = ephemeris_table()
    table.meta["observer"] = "geocentre"
    write_ephemeris(table, c.ephemeris)
    return c.fresh_config(observatory={"name": "Mesa Alta (fictional)", "lon_deg": -70.0, "lat_deg": -24.0,
                                       "height_m": 2900.0})


def _cube_key(key, value):
    def change(c, config):
        config["cubes"][0][key] = value(c) if callable(value) else value
    return change


@dataclass(frozen=True)
class Case:
    name: str
    spoil: Callable[[TinyCampaign], dict]
    step: str                       # dag, geometry, comoving, extract, stack or limits
    fragments: tuple[str, ...]      # must all appear in the sentence (regular expressions)


SUB = rf"comoving/{CUBE_ID}/{LINE_ID}\.fits"
CASES = [
    # the cube file (its header is read when the job graph is built)
    Case("not a FITS file", _not_fits, "dag", (r"c1\.fits: not a readable FITS file", r"SIMPLE card",
                                                r"its first bytes are b'a text", r"expected a FITS cube")),
    Case("truncated FITS", _truncated, "dag", (r"c1\.fits: the FITS file is truncated", r"\d+ bytes, but its header",
                                               r"announces 2214720 bytes", r"expected a complete file")),
    Case("2-D image", _image_2d, "dag", (r"c1\.fits: NAXIS = 2 with axis lengths \[48, 48\]",
                                         r"expected a cube with two sky axes and one spectral axis")),
    Case("no spectral axis", _cube(CTYPE3="STOKES", CUNIT3=None), "dag",
         (r"c1\.fits: header card CTYPE3 = 'STOKES'", r"expected a spectral axis \(FREQ or VRAD")),
    Case("unknown SPECSYS", _cube(SPECSYS="LSRD"), "dag",
         (r"c1\.fits: header card SPECSYS = 'LSRD'", r"expected one of TOPOCENT, GEOCENTR")),
    Case("velocity axis without RESTFRQ", _cube(CTYPE3="VRAD", CUNIT3="m/s", CRVAL3=-33000.0, CDELT3=275.3,
                                                RESTFRQ=None), "dag",
         (r"c1\.fits: CTYPE3 = 'VRAD' is a velocity axis but header card RESTFRQ is missing",
          r"expected RESTFRQ \(or RESTFREQ\)")),
    Case("BUNIT missing", _cube(BUNIT=None), "dag",
         (r"c1\.fits: header card BUNIT is missing", r"expected a brightness unit \(Jy/beam")),
    Case("BUNIT unknown", _cube(BUNIT="counts/s"), "dag",
         (r"c1\.fits: header card BUNIT = 'counts/s'", r"expected one of Jy/beam, Jy/pixel, MJy/sr, K")),
    Case("Jy/beam without a beam", _cube(BMAJ=None, BMIN=None, BPA=None), "dag",
         (r"c1\.fits: BUNIT = 'Jy/beam' needs a beam", r"header cards BMAJ/BMIN are missing",
          r"expected BMAJ and BMIN")),
    Case("cube file missing", _config(_missing_file("cube")), "dag",
         (r"config: cubes\[0\]\.path names the file '.*absent\.fits', which does not exist",)),
    # the data (read by the stages)
    Case("all-NaN cube", _data(np.full((N_CHAN, 48, 48), np.nan)), "extract",
         (SUB, r"none of the \d+ channels has usable data", r"all-NaN cube", r"expected finite pixel values")),
    Case("constant data", _data(np.full((N_CHAN, 48, 48), 0.37)), "extract",
         (SUB, r"all \d+ line-free channels of the spectrum hold the same value", r"constant",
          r"no noise to measure", r"expected noisy data")),
    Case("zero-filled data", _data(np.zeros((N_CHAN, 48, 48))), "extract",
         (SUB, r"hold the same value \(0\)", r"expected noisy data")),
    # the exposure time
    Case("DATE-OBS missing", _cube(**{"DATE-OBS": None}), "geometry",
         (r"c1\.fits: no observation time in the header", r"expected one, or the cube's 'time' key")),
    Case("start-only DATE-OBS", _cube(**{"DATE-END": None}), "geometry",
         (r"c1\.fits: the header gives only DATE-OBS, not the exposure's end or middle",
          r"set the cube's 'time' \(mid-time\) or 'duration_s'")),
    Case("date-only DATE-OBS", _cube(**{"DATE-OBS": "2031-03-12"}), "geometry",
         (r"c1\.fits: header card DATE-OBS = '2031-03-12' holds a date without a time of day",
          r"expected DATE-OBS with a time, or TIME-OBS")),
    Case("DATE-OBS unparsable", _cube(**{"DATE-OBS": "yesterday evening"}), "geometry",
         (r"c1\.fits: header card DATE-OBS = 'yesterday evening' is not an ISO time", r"expected e\.g\. '2030")),
    # the ephemeris table
    Case("ephemeris missing a column", _ephem(_drop("delta_dot")), "geometry",
         (r"ephemeris file '.*eph\.ecsv' lacks the column\(s\) delta_dot", r"expected time \(or jd / mjd\)")),
    Case("ephemeris with wrong units", _ephem(_wrong_unit), "geometry",
         (r"eph\.ecsv': column 'delta' has unit km / s", r"expected a unit convertible to AU")),
    Case("ephemeris unsorted", _ephem(_unsorted), "geometry",
         (r"eph\.ecsv': column 'time' is not strictly increasing", r"row 5 at 2030-05-31T06:00:00\.0+ follows "
          r"2030-05-31T08:00:00\.0+\)")),
    Case("ephemeris with a gap", _ephem(_gap), "geometry",
         (r"cube c1 \(.*c1\.fits\): time 2030-06-01T02:00:00\.000 falls in a gap of the ephemeris .*eph\.ecsv",
          r"no row between 2030-05-31T20:00:00\.000 and 2030-06-01T10:00:00\.000", r"\(14 h, more than 5 times",
          r"120 min spacing", r"expected rows at the usual spacing")),
    Case("ephemeris not covering the time", _ephem(_late), "geometry",
         (r"cube c1 \(.*c1\.fits\): time 2030-06-01T02:00:00\.000 lies outside the ephemeris .*eph\.ecsv",
          r"which spans 2030-06-02T00:00:00\.000 to 2030-06-04T00:00:00\.000",
          r"expected a table covering the whole exposure")),
    Case("ephemeris file missing", _config(_missing_file("ephemeris")), "dag",
         (r"config: target\.ephemeris names the file '.*absent\.ecsv', which does not exist",)),
    Case("target outside the field", _ephem(_shift_ra), "geometry",
         (r"c1\.fits: the target \(RA 150\.05000 deg", r"outside the 48 x 48 field",
          r"expected the target inside the field")),
    # observers: a table seen from elsewhere, a spacecraft's state table
    Case("geocentric table used for a site", _geocentric_table_at_a_site, "geometry",
         (r"ephemeris file '.*eph\.ecsv' states it is seen from the geocentre \(metadata 'observer'\)",
          r"observed from the site 'Mesa Alta \(fictional\)'", r"expected a table seen from that observer")),
    Case("spacecraft states without a centre", _spacecraft({"axes": "icrs"}), "geometry",
         (r"observer state table '.*probe\.ecsv' does not state its centre \(metadata 'centre'\)",
          r"expected one of barycentre, geocentre, sun", r"config key 'observatory\.centre'")),
    Case("spacecraft states not covering the time",
         _spacecraft({"centre": "barycentre", "axes": "icrs"}, "2030-06-02T00:00:00", SPECSYS="BARYCENT"), "geometry",
         (r"time 2030-06-01T02:\d\d:\d\d\.\d+ \(UTC\) lies outside the observer's state table .*probe\.ecsv",
          r"observer Probe \(fictional\)", r"expected a table covering the whole exposure")),
    Case("a cube's own ephemeris missing", _config(_cube_key("ephemeris", lambda c: str(c.root / "data" / "own.ecsv"))),
         "dag", (r"config: cubes\[0\]\.ephemeris names the file '.*own\.ecsv', which does not exist",)),
    Case("a cube's spacecraft states missing",
         _config(_cube_key("observatory", lambda c: {"name": "Probe", "states": str(c.root / "data" / "gone.ecsv")})),
         "dag", (r"config: cubes\[0\]\.observatory\.states names the file '.*gone\.ecsv', which does not exist",)),
    # the campaign config
    Case("misspelt config key", _config(_set("apertures_kms", [1000.0])), "dag",
         (r"config: unknown key 'apertures_kms' under \(top level\) \(misspelt\?\)",
          r"allowed keys there: .*apertures_km,")),
    Case("misspelt nested key", _config(lambda c, cfg: cfg["comoving"].update(half_widht_km_s=20.0)), "dag",
         (r"config: unknown key 'half_widht_km_s' under comoving", r"allowed keys there: half_width_km_s")),
    Case("unknown species", _config(_set("species", ["HCNX"])), "dag",
         (r"species 'HCNX' is not in the catalogue .*species\.ecsv", r"expected one of: .*HCN,")),
    Case("zero aperture", _config(_set("apertures_km", [0.0])), "dag",
         (r"config: key apertures_km\[0\] = 0\.0 is not valid", r"less than or equal to the minimum of 0",
          r"expected a number > 0$")),
    Case("negative aperture", _config(_set("apertures_km", [1000.0, -500.0])), "dag",
         (r"config: key apertures_km\[1\] = -500\.0 is not valid", r"minimum of 0")),
    Case("aperture larger than the image", _config(_set("apertures_km", [20000.0])), "extract",
         (SUB + r": aperture 20000\.0 km: a circle of radius \d+\.\d px", r"does not fit inside the 48 x 48 image",
          r"expected an aperture smaller than the field \(reduce apertures_km")),
    Case("duplicated cube ids", _config(_second_cube_same_id), "dag",
         (r"config: cube id 'c1' is used by both '.*data/c1\.fits' and '.*again/c1\.fits'",
          r"expected unique ids")),
    Case("cube id escaping the outdir", _config(_id("../c1")), "dag",
         (r"config: key cubes\[0\]\.id = '\.\./c1' is not valid", r"used in file names",
          r"expected letters, digits and \. _ - only")),
    Case("cube id with a path separator", _config(_id("a/b")), "dag",
         (r"config: key cubes\[0\]\.id = 'a/b' is not valid", r"no '/' or '\.\.'")),
    Case("catalogue missing a column", _config(_user_catalogue(lambda t: t[[n for n in t.colnames if n != "mass"]])),
         "dag", (r"species catalogue file '.*my_species\.ecsv' has no column 'mass'",
                 r"expected columns: species, mass")),
    Case("catalogue species name with path characters", _config(_user_catalogue(_rename_hcn)), "dag",
         (r"species catalogue '.*my_species\.ecsv': species name '\.\./HCN' is not usable in file names",
          r"expected letters, digits and _ \+ - only")),
]


def test_the_catalogue_is_large_enough():
    assert len(CASES) >= 25
    assert len({c.name for c in CASES}) == len(CASES)


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_input(tmp_path, capsys, case):
    campaign = tiny_campaign(tmp_path)
    config = case.spoil(campaign)
    with pytest.raises(Failed) as stop:
        run_workflow(config)
    failed = stop.value
    err = capsys.readouterr().err
    assert failed.step == case.step, (failed.step, err)
    assert failed.code == 1
    if failed.step == "dag":
        sentence = failed.message
        assert outputs_below(campaign.outdir) == []          # the job graph was refused: nothing written at all
    else:
        # the rule script's stderr: exactly one line, "gasledger: <sentence>"
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("gasledger: "), err
        sentence = lines[0].removeprefix("gasledger: ")
        assert not failed.output.exists()
        assert not [p for p in outputs_below(campaign.outdir) if p.endswith(".part")]   # no half-written file
        # what the earlier steps wrote is there; nothing of the failing step or later
        written = outputs_below(campaign.outdir)
        later = {"geometry": ["geometry/"], "comoving": ["comoving/", "spectra/", "stack/", "limits/"],
                 "extract": ["spectra/", "stack/", "limits/"]}[failed.step]
        assert not [p for p in written if p.startswith(tuple(later))], written
    assert_one_sentence(sentence)
    for fragment in case.fragments:
        assert re.search(fragment, sentence), (fragment, sentence)


# --------------------------------------------------------------------------------------------------------------- #
# handled and reported, not errors


def test_nan_planes_are_handled_and_reported(tmp_path, caplog):
    rng = np.random.default_rng(5)
    data = 0.01 * rng.standard_normal((N_CHAN, 48, 48))
    planes = [40, 41, 200]                 # inside the sub-cube (channels ~29-210), away from the line (~120)
    data[planes] = np.nan
    campaign = tiny_campaign(tmp_path, data=data)
    with caplog.at_level(logging.INFO):
        out = run_workflow(campaign.fresh_config())
    spectra = out / "spectra" / CUBE_ID / f"{LINE_ID}.fits"
    with fits.open(spectra) as hdul:
        aps = Table.read(hdul["APERTURES"])
        chans = Table.read(hdul["CHANNELS"])
        flux = hdul[0].data[0]
        c0 = hdul[0].header["GLCHAN0"]
    # reported: the number of blank channels per aperture, and in the log
    assert aps["n_blank_chan"][0] == len(planes)
    assert "3 blank channels" in caplog.text
    # handled: the blank channels are blank in the spectrum and left out of the noise, the rest is finite
    blank = np.array(planes) - c0
    assert np.all(np.isnan(flux[blank]))
    assert not np.any(np.asarray(chans["line_free"])[blank])
    assert np.isfinite(np.delete(flux, blank)).all()
    table = QTable.read(out / "limits" / "HCN.ecsv", format="ascii.ecsv")
    assert np.all(np.isfinite(table["q_upper"].value)) and np.all(table["q_upper"].value > 0)


def test_line_outside_the_band_is_recorded_not_an_error(tmp_path, caplog):
    campaign = tiny_campaign(tmp_path)
    # a range rate 72 km/s off the one the band was tuned for: within the 100-km/s planning margin, so the line
    # is scheduled, but the integration window lies outside the +-33 km/s band
    table = ephemeris_table()
    table["delta_dot"] = np.full(len(table), -60.0) * u.km / u.s
    write_ephemeris(table, campaign.ephemeris)
    with caplog.at_level(logging.INFO):
        out = run_workflow(campaign.fresh_config())
    header = fits.getheader(out / "comoving" / CUBE_ID / f"{LINE_ID}.fits")
    assert header["GLCOVER"] is False
    reason = header["GLREASON"]
    assert_one_sentence(reason)
    assert re.search(rf"integration window \+-\d\.\d\d km/s of line {LINE_ID} is not fully inside the band "
                     r"\(which spans [+-]\d+\.\d to [+-]\d+\.\d km/s around the line\)", reason), reason
    assert "is not used" in caplog.text and "not covered or left out: c1:HCN_265886" in caplog.text
    limits_table = QTable.read(out / "limits" / "HCN.ecsv", format="ascii.ecsv")
    assert len(limits_table) == 0                 # no limit is made up from a line that was not observed


def test_line_far_outside_the_band_is_not_scheduled(tmp_path):
    campaign = tiny_campaign(tmp_path)
    config = campaign.fresh_config(species=["CO", "HCN"])     # CO 230.5 GHz is far from the 265.9 GHz band
    _, lines, _ = dag_checks(config)
    assert lines[CUBE_ID] == [LINE_ID]


def test_the_dag_checks_mirror_rules_common_smk():
    # bad_builders.dag_checks must make the calls the workflow makes when it builds the job graph
    text = (REPO / "rules" / "common.smk").read_text()
    for call in ("validate_config(config", "check_inputs_exist(config", "graph_settings(config)",
                 "SETTINGS.catalogue()", ".get_species(", "SETTINGS.cubes", "cube_spans(", "lines_for_cube(", 'sys.exit(f"gasledger: {exc}")'):
        assert call in text, call


def test_the_gap_rule_only_refuses_a_gap_at_the_cube_time(tmp_path):
    def table_without(first_h, last_h):
        t = ephemeris_table()
        hours = (t["time"] - t["time"][0]).to_value(u.h)
        path = tmp_path / f"eph_{first_h}_{last_h}.ecsv"
        write_ephemeris(t[(hours < first_h) | (hours > last_h)], path)
        return read_ephemeris(path)

    exposure = Time(["2030-06-01T02:00:00", "2030-06-01T02:30:00", "2030-06-01T03:00:00"], scale="utc")
    # one row missing at the cube time: a 4-h step among 2-h steps (2x, not a gap)
    table_without(26, 26).at(exposure, what="cube c1")
    # a 14-h gap a day later: not at the cube time, so not refused
    table_without(51, 63).at(exposure, what="cube c1")
    # the same gap at the cube time is refused; so is a step of just over 5x the spacing (12 h -> 5 missing rows)
    with pytest.raises(EphemerisError, match="falls in a gap"):
        table_without(21, 33).at(exposure, what="cube c1")
    with pytest.raises(EphemerisError, match=r"\(12 h, more than 5 times the 120 min spacing"):
        table_without(23, 33).at(exposure, what="cube c1")
    # exactly 5x (10 h) is still accepted (the rule is 'more than 5 times')
    table_without(23, 31).at(exposure, what="cube c1")
    # the first and the last row of a table can be asked for
    full = table_without(-1, -1)
    full.at(Time(full.jd[[0, -1]], format="jd", scale="utc"), what="the table's ends")


@pytest.mark.parametrize("bunit, base, scale", [("mJy/beam", u.Jy / u.beam, 1e-3), ("uJy/beam", u.Jy / u.beam, 1e-6),
                                               ("JY/BEAM", u.Jy / u.beam, 1.0), ("mJy/sr", u.Jy / u.sr, 1e-3),
                                               ("MJy/sr", u.Jy / u.sr, 1e6), ("MJY/SR", u.Jy / u.sr, 1e6),
                                               ("mK", u.K, 1e-3)])
def test_brightness_unit_prefixes_are_read_as_written(tmp_path, bunit, base, scale):
    # FITS standard 4.0 (table 28): 'm' is milli, 'u' micro, 'M' mega; an upper-cased 'MJY/SR' is taken as the
    # usual mega-jansky per steradian (an upper-cased spelling cannot say milli)
    info = read_cube_info(write_hdu(cube_hdu(BUNIT=bunit), tmp_path / "u.fits"))
    assert info.bunit.to(base) == pytest.approx(scale, rel=1e-12)

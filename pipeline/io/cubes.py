"""Reading spectral cubes: header checks, spectral axis, beam and data access (times: :mod:`pipeline.io.times`).

Cubes are FITS images with two celestial axes and one spectral axis (a
degenerate Stokes axis of length one is accepted and ignored). The data are
read memory-mapped, one region at a time; the whole cube is never loaded.
Inputs are opened read-only and never modified.

The cube is the primary HDU's image when it has one; otherwise an image extension
named SCI (or the first 3-D image extension), as infrared integral-field pipelines
write them, with the primary header's cards (times, exposure) filling in what the
extension lacks. An image extension named ERR of the same shape, when present, is
the per-pixel 1-sigma error of the data (:func:`open_error`).

Millimetre cubes carry Jy/beam, Jy/pixel, MJy/sr or K; infrared cubes a surface
brightness per unit frequency (MJy/sr) or per unit wavelength (W m^-2 um^-1 sr^-1,
erg s^-1 cm^-2 A^-1 sr^-1). :attr:`CubeInfo.regime` says which chain a cube goes
down: infrared when every channel lies short of 30 um.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.wcs import WCS, FITSFixedWarning
from astropy.wcs.utils import proj_plane_pixel_scales

from pipeline.errors import CubeError, GasledgerError

__all__ = [
    "cube_info_from_header",
    "read_beam_table",
    "open_quality",
    "flagged",
    "CubeInfo",
    "read_cube_info",
    "open_data",
    "SPECSYS_VALUES",
    "BRIGHTNESS_KINDS",
    "brightness_unit",
    "open_error",
    "INFRARED_LIMIT",
    "linear_axis",
]

SPECSYS_VALUES = ("TOPOCENT", "GEOCENTR", "BARYCENT", "LSRK", "SOURCE")
_SPECTRAL_CTYPES = ("FREQ", "VRAD", "VOPT", "WAVE")
_DEFAULT_CUNIT = {"FREQ": "Hz", "VRAD": "m/s", "VOPT": "m/s", "WAVE": "m"}
_CUNIT_KIND = {"FREQ": "frequency", "VRAD": "speed", "VOPT": "speed", "WAVE": "length"}
#: Spellings read case-insensitively when astropy cannot parse BUNIT as written (e.g. upper-case 'JY/BEAM';
#: upper-case 'MJY/SR' is taken as mega-jansky per steradian, the usual meaning of that spelling).
_BRIGHTNESS_UNITS = {
    "JY/BEAM": u.Jy / u.beam,
    "JYBEAM-1": u.Jy / u.beam,
    "JY.BEAM-1": u.Jy / u.beam,
    "JY/PIXEL": u.Jy / u.pix,
    "JY/PIX": u.Jy / u.pix,
    "MJY/SR": u.MJy / u.sr,
    "K": u.K,
    "ERG/S/CM2/A/SR": u.erg / u.s / u.cm**2 / u.AA / u.sr,
    "ERG/S/CM2/ANGSTROM/SR": u.erg / u.s / u.cm**2 / u.AA / u.sr,
    "ERG/S/CM2/AA/SR": u.erg / u.s / u.cm**2 / u.AA / u.sr,
    "W/M2/UM/SR": u.W / u.m**2 / u.um / u.sr,
    "W/M2/MICRON/SR": u.W / u.m**2 / u.um / u.sr,
    "W/M^2/UM/SR": u.W / u.m**2 / u.um / u.sr,
}
#: The kinds of brightness unit a cube may have; any prefix of them (mJy/beam, uJy/beam, mK, ...) is accepted.
BRIGHTNESS_KINDS = (u.Jy / u.beam, u.Jy / u.pix, u.Jy / u.sr, u.K, u.W / u.m**2 / u.um / u.sr)
#: Cubes whose every channel lies short of this wavelength go down the infrared (band) chain.
INFRARED_LIMIT = 30 * u.um


@dataclass(frozen=True)
class CubeInfo:
    """What gasledger needs to know about a cube, read from its header only."""

    path: Path
    header: fits.Header
    shape: tuple[int, int, int]          # (n_chan, n_y, n_x), numpy order
    celestial_wcs: WCS
    frequencies: u.Quantity              # observed frequency of each channel, as labelled
    specsys: str
    bunit: u.UnitBase
    beam_major: u.Quantity | None        # FWHM
    beam_minor: u.Quantity | None
    beam_pa: u.Quantity | None
    pixel_scale: u.Quantity              # geometric mean pixel side (angle)
    hdu: int = 0                         # index of the HDU holding the cube
    error_hdu: int | None = None         # index of the ERR extension, when there is one
    channel_beams: tuple[u.Quantity, u.Quantity, u.Quantity] | None = None   # per channel (major, minor, PA)
    beam_source: str = "BMAJ/BMIN cards"  # where the beam came from

    @property
    def regime(self) -> str:
        """'infrared' when every channel lies short of :data:`INFRARED_LIMIT`, else 'millimetre'."""
        longest = self.frequencies.min().to(u.um, equivalencies=u.spectral())
        return "infrared" if longest < INFRARED_LIMIT else "millimetre"

    @property
    def frequency_range(self) -> tuple[u.Quantity, u.Quantity]:
        """Lowest and highest channel frequency, as labelled."""
        return self.frequencies.min(), self.frequencies.max()

    @property
    def wavelengths(self) -> u.Quantity:
        """Vacuum wavelength of each channel, as labelled (um)."""
        return self.frequencies.to(u.um, equivalencies=u.spectral())

    @property
    def channel_width(self) -> u.Quantity:
        """Absolute frequency step between channels (the axis is linear)."""
        return np.abs(self.frequencies[1] - self.frequencies[0])

    def beam_solid_angle(self) -> u.Quantity:
        """Solid angle of the Gaussian beam, pi/(4 ln 2) * BMAJ * BMIN (the cube's one, or median, beam)."""
        if self.beam_major is None:
            msg = f"{self.path}: no beam (BMAJ/BMIN cards) in the header"
            raise CubeError(msg)
        return (np.pi / (4 * np.log(2)) * self.beam_major * self.beam_minor).to(u.sr)

    def channel_beam_solid_angles(self) -> u.Quantity:
        """Beam solid angle of each channel (shape (n_chan,)) from a per-channel beam table; else the one beam's."""
        if self.channel_beams is None:
            return self.beam_solid_angle()
        major, minor, _ = self.channel_beams
        return (np.pi / (4 * np.log(2)) * major * minor).to(u.sr)

    def pixel_solid_angle(self) -> u.Quantity:
        """Solid angle of one pixel (from the WCS pixel scales)."""
        return (self.pixel_scale**2).to(u.sr)


def _card(header: fits.Header, name: str, path: Path, expected: str):
    if name not in header:
        msg = f"{path}: header card {name} is missing; expected {expected}"
        raise CubeError(msg)
    return header[name]


def linear_axis(header: fits.Header, axis: int, n: int | None = None, path: str | Path | None = None) -> np.ndarray:
    """World coordinate of each pixel along the linear FITS axis ``axis``, in that axis's unit (CUNITi).

    ``CRVALi + (p - CRPIXi) * step`` for the pixels p = 1 .. ``n`` (default NAXISi), the step being
    CDELTi x PCi_i (PCi_i defaults to 1), or CDi_i where CDELTi is absent (FITS WCS paper I: Greisen &
    Calabretta 2002, A&A 395, 1061); CRPIXi defaults to 1.  Meant for every place these cards become an
    axis: a cube's spectral axis, a sub-cube's velocities, a stacked spectrum's velocities.

    Raises
    ------
    CubeError
        When CRVALi (or NAXISi, with no ``n``) is missing or not a number, or the step is missing or zero;
        the message names ``path`` (when given) and the card.
    """
    where = "" if path is None else f"{path}: "

    def number(card: str, default: float | None, expected: str) -> float:
        if card not in header:
            if default is not None:
                return default
            msg = f"{where}header card {card} is missing; expected {expected}"
            raise CubeError(msg)
        try:
            return float(header[card])
        except (TypeError, ValueError) as exc:
            msg = f"{where}header card {card} = {header[card]!r} is not a number; expected {expected}"
            raise CubeError(msg) from exc

    crval = number(f"CRVAL{axis}", None, f"the coordinate of the reference pixel of axis {axis}")
    if f"CDELT{axis}" in header:
        step = number(f"CDELT{axis}", None, "a number") * number(f"PC{axis}_{axis}", 1.0, "a number")
    else:
        step = number(f"CD{axis}_{axis}", 0.0, "a number")
    if step == 0.0:
        msg = f"{where}header card CDELT{axis} is missing or zero; expected the pixel step of axis {axis}"
        raise CubeError(msg)
    crpix = number(f"CRPIX{axis}", 1.0, "a number")
    if n is None:
        n = int(number(f"NAXIS{axis}", None, f"the length of axis {axis}"))
    return crval + (np.arange(n, dtype=float) + 1 - crpix) * step


def _open_hdul(path: Path) -> fits.HDUList:
    if not path.is_file():
        msg = f"{path}: cube file does not exist"
        raise CubeError(msg)
    with open(path, "rb") as fh:
        head = fh.read(80)
    if not head.startswith(b"SIMPLE  ="):
        msg = (f"{path}: not a readable FITS file (it does not begin with the SIMPLE card; its first bytes are "
               f"{head[:20]!r}); expected a FITS cube")
        raise CubeError(msg)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            hdul = fits.open(path, mode="readonly", memmap=True)
            hdul[0].header  # noqa: B018 - force the header to be parsed
        except (OSError, ValueError, TypeError) as exc:
            reason = " ".join(str(exc).split()).split(". ")[0].rstrip(".")
            msg = f"{path}: not a readable FITS file ({reason}); expected a FITS cube"
            raise CubeError(msg) from exc
    # astropy only warns about a file shorter than its header announces (and fails later, on reading the data)
    short = [w for w in caught if "truncated" in str(w.message)]
    if short:
        expected = _expected_size(hdul[0].header)
        hdul.close()
        msg = (f"{path}: the FITS file is truncated ({path.stat().st_size} bytes, but its header (BITPIX, NAXISn) "
               f"announces {expected} bytes); expected a complete file (copy or export it again)")
        raise CubeError(msg)
    for w in caught:  # pass on anything else astropy had to say
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    return hdul


def _expected_size(header: fits.Header) -> int:
    """Bytes of a primary HDU with ``header``: header blocks plus data padded to 2880-byte blocks."""
    n_header = len(header.tostring())
    naxis = int(header.get("NAXIS", 0))
    nbytes = abs(int(header.get("BITPIX", 8))) // 8 if naxis else 0
    for i in range(1, naxis + 1):
        nbytes *= int(header.get(f"NAXIS{i}", 0))
    return n_header + -(-nbytes // 2880) * 2880


def brightness_unit(text: str) -> u.UnitBase | None:
    """The unit a BUNIT card names, when it is a brightness unit gasledger can convert to Jy; else None.

    Parsed as written (case matters: 'mJy/beam' is milli-, 'MJy/sr' mega-jansky), with the FITS unit
    grammar; upper-case spellings astropy does not parse ('JY/BEAM', 'JY/PIXEL', 'MJY/SR') are looked up.
    The unit must convert to one of :data:`BRIGHTNESS_KINDS` (any SI prefix is accepted).
    """
    unit = None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", u.UnitsWarning)
        try:
            unit = u.Unit(str(text).strip(), format="fits")
        except ValueError:
            unit = _BRIGHTNESS_UNITS.get("".join(str(text).upper().split()))
    if unit is None or not any(unit.is_equivalent(kind) for kind in BRIGHTNESS_KINDS):
        unit = _BRIGHTNESS_UNITS.get("".join(str(text).upper().split()))  # e.g. 'erg/s/cm2/A/sr' (A read as ampere)
    if unit is None or not any(unit.is_equivalent(kind) for kind in BRIGHTNESS_KINDS):
        return None
    return unit


#: Primary-header cards copied into the header of a cube held in an extension, when the extension lacks them.
_INHERITED = ("DATE-OBS", "TIME-OBS", "DATE-BEG", "DATE-AVG", "DATE-END", "MJD-OBS", "MJD-BEG", "MJD-AVG", "MJD-END",
              "EXPSTART", "EXPMID", "EXPEND", "TIMESYS", "TELAPSE", "EXPTIME", "XPOSURE", "TELESCOP", "INSTRUME",
              "OBJECT", "SPECSYS", "BUNIT", "BMAJ", "BMIN", "BPA", "RESTFRQ", "RESTFREQ")


def _cube_hdus(hdul: fits.HDUList, path: Path) -> tuple[int, int | None]:
    """Index of the HDU holding the cube and of its ERR extension (None when absent)."""
    def is_image(h) -> bool:
        return isinstance(h, (fits.PrimaryHDU, fits.ImageHDU)) and int(h.header.get("NAXIS", 0)) >= 3

    if is_image(hdul[0]):
        index = 0
    else:
        named = [i for i, h in enumerate(hdul) if i and h.name == "SCI" and is_image(h)]
        images = [i for i, h in enumerate(hdul) if i and is_image(h) and h.name != "ERR"]
        if not (named or images) and int(hdul[0].header.get("NAXIS", 0)) > 0:
            return 0, None  # a primary image of the wrong dimension: read_cube_info says what is wrong with it
        if not (named or images):
            kinds = ", ".join(f"{h.name or i} (NAXIS = {h.header.get('NAXIS', 0)})" for i, h in enumerate(hdul))
            msg = (f"{path}: no HDU holds a 3-D image (found {kinds}); expected the cube in the primary HDU or "
                   "in an image extension named SCI")
            raise CubeError(msg)
        index = (named or images)[0]
    errors = [i for i, h in enumerate(hdul) if i and h.name == "ERR" and is_image(h)]
    err = errors[0] if errors else None
    if err is not None:
        shape = [hdul[index].header.get(f"NAXIS{k}") for k in range(1, int(hdul[index].header["NAXIS"]) + 1)]
        eshape = [hdul[err].header.get(f"NAXIS{k}") for k in range(1, int(hdul[err].header["NAXIS"]) + 1)]
        if shape != eshape:
            msg = (f"{path}: the ERR extension has axis lengths {eshape} but the cube {shape}; expected the "
                   "per-pixel error cube of the same shape")
            raise CubeError(msg)
    return index, err


def read_cube_info(path: str | Path, beam_arcsec: tuple[float, float, float] | None = None) -> CubeInfo:
    """Read and check a cube's header.

    Raises
    ------
    CubeError
        When the file is not FITS, the image is not 3-D, there is no spectral
        axis, SPECSYS is missing or unknown, BUNIT is missing or unknown, or a
        Jy/beam cube has no beam. The message names the file and the card.
    """
    path = Path(path)
    with _open_hdul(path) as hdul:
        index, err_index = _cube_hdus(hdul, path)
        header = hdul[index].header.copy()
        if index:
            for card in _INHERITED:
                if card in hdul[0].header and card not in header:
                    header[card] = hdul[0].header[card]
        beams = read_beam_table(hdul, path) if "BEAMS" in hdul else None
    return cube_info_from_header(header, path, index, err_index, beams=beams, beam_arcsec=beam_arcsec)


def read_beam_table(hdul: fits.HDUList, path: str | Path) -> tuple[u.Quantity, u.Quantity, u.Quantity]:
    """Per-channel beams (major, minor FWHM, position angle) from a ``BEAMS`` binary table.

    The layout radio-interferometer pipelines write (columns BMAJ, BMIN, BPA in arcsec and deg unless TUNITn
    says otherwise, CHAN, POL; header card CASAMBM = T), as radio-beam's ``Beams`` reads it. The rows of the
    first polarisation, ordered by CHAN, give one beam per channel.
    """
    table = hdul["BEAMS"].data
    names = [n.upper() for n in table.columns.names]
    missing = [c for c in ("BMAJ", "BMIN", "BPA", "CHAN") if c not in names]
    if missing:
        msg = (f"{path}: the BEAMS table lacks the column(s) {', '.join(missing)}; expected BMAJ, BMIN, BPA, CHAN "
               "(and POL) with one row per channel")
        raise CubeError(msg)
    cols = hdul["BEAMS"].columns
    units = {c.name.upper(): (c.unit or "") for c in cols}
    chan = np.asarray(table["CHAN"], dtype=int)
    keep = np.ones(chan.size, dtype=bool)
    if "POL" in names:
        pol = np.asarray(table["POL"], dtype=int)
        keep = pol == pol.min()
    order = np.argsort(chan[keep], kind="stable")

    def column(name: str, default: u.UnitBase) -> u.Quantity:
        unit = u.Unit(units[name]) if units[name] else default
        return u.Quantity(np.asarray(table[name], dtype=float)[keep][order], unit)

    major, minor, pa = column("BMAJ", u.arcsec), column("BMIN", u.arcsec), column("BPA", u.deg)
    if np.any(~np.isfinite(major)) or np.any(major <= 0) or np.any(minor <= 0):
        msg = f"{path}: the BEAMS table has non-positive or blank BMAJ/BMIN; expected positive beam sizes"
        raise CubeError(msg)
    return major.to(u.deg), minor.to(u.deg), pa.to(u.deg)


def cube_info_from_header(header: fits.Header, path: str | Path, hdu: int = 0,
                          error_hdu: int | None = None,
                          beams: tuple[u.Quantity, u.Quantity, u.Quantity] | None = None,
                          beam_arcsec: tuple[float, float, float] | None = None) -> CubeInfo:
    """Check a cube's header (as :func:`read_cube_info` does) and describe the cube; no file is read.

    ``path`` names the cube in messages (a file, or a label for a cube held in memory); ``hdu`` and
    ``error_hdu`` are where its data and ERR extension sit in that file. ``beams`` are per-channel beams
    (:func:`read_beam_table`); ``beam_arcsec`` (major, minor FWHM [arcsec], PA [deg]) is the config's beam for
    a cube whose header carries none.
    """
    path = Path(path)
    index, err_index = hdu, error_hdu
    naxis = header.get("NAXIS", 0)
    dims = [header.get(f"NAXIS{i}", 1) for i in range(1, naxis + 1)]
    if naxis < 3 or sum(d > 1 for d in dims) < 3:
        msg = (f"{path}: NAXIS = {naxis} with axis lengths {dims}; expected a cube with two sky axes "
               "and one spectral axis")
        raise CubeError(msg)
    if naxis > 4 or (naxis == 4 and dims[3] != 1):
        msg = f"{path}: axis lengths {dims}; expected 3 axes, or a 4th (Stokes) axis of length 1"
        raise CubeError(msg)
    ctype3 = str(header.get("CTYPE3", "")).strip()
    if ctype3[:4] not in _SPECTRAL_CTYPES:
        msg = (f"{path}: header card CTYPE3 = {ctype3!r}; expected a spectral axis "
               f"({' or '.join(_SPECTRAL_CTYPES)}) as the third axis")
        raise CubeError(msg)
    specsys = str(_card(header, "SPECSYS", path, f"one of {', '.join(SPECSYS_VALUES)}")).strip()
    if specsys not in SPECSYS_VALUES:
        msg = f"{path}: header card SPECSYS = {specsys!r}; expected one of {', '.join(SPECSYS_VALUES)}"
        raise CubeError(msg)
    bunit_text = str(_card(header, "BUNIT", path, "a brightness unit (Jy/beam, Jy/pixel, MJy/sr, K, W/m2/um/sr)"))
    bunit = brightness_unit(bunit_text)
    if bunit is None:
        msg = (f"{path}: header card BUNIT = {bunit_text!r}; expected one of Jy/beam, Jy/pixel, MJy/sr, K "
               "(or a prefixed form such as mJy/beam), or for infrared cubes W/m2/um/sr or erg/s/cm2/A/sr")
        raise CubeError(msg)

    axis_values = linear_axis(header, 3, dims[2], path)

    kind = ctype3[:4]
    try:
        cunit = u.Unit(str(header.get("CUNIT3", _DEFAULT_CUNIT[kind])))
    except ValueError as exc:
        msg = f"{path}: header card CUNIT3 = {header.get('CUNIT3')!r} is not a unit"
        raise CubeError(msg) from exc
    if cunit.physical_type != _CUNIT_KIND[kind]:
        msg = (f"{path}: header cards CTYPE3 = {ctype3!r} and CUNIT3 = {header.get('CUNIT3')!r} contradict each "
               f"other; expected a {_CUNIT_KIND[kind]} unit for a {kind} axis")
        raise CubeError(msg)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FITSFixedWarning)
        try:
            wcs = WCS(header, naxis=3)
        except ValueError as exc:  # astropy.wcs.WcsError and its kin subclass ValueError
            msg = f"{path}: the WCS header cards are not usable ({exc}); expected a valid FITS WCS"
            raise CubeError(msg) from exc
    celestial = wcs.celestial
    if celestial.naxis != 2:
        msg = f"{path}: header cards CTYPE1/CTYPE2 do not describe sky coordinates (RA/Dec)"
        raise CubeError(msg)
    scales = proj_plane_pixel_scales(celestial)  # deg per pixel along each sky axis
    pixel_scale = np.sqrt(scales[0] * scales[1]) * u.deg

    axis = axis_values * cunit
    rest = [float(header[k]) for k in ("RESTFRQ", "RESTFREQ") if k in header]
    if len(rest) == 2 and not np.isclose(rest[0], rest[1], rtol=1e-12):
        msg = (f"{path}: header cards RESTFRQ = {rest[0]} and RESTFREQ = {rest[1]} contradict each other; "
               "expected one rest frequency")
        raise CubeError(msg)
    if kind == "FREQ":
        freqs = axis.to(u.Hz)
    elif kind == "WAVE":  # vacuum wavelength (FITS WCS paper III)
        freqs = axis.to(u.Hz, equivalencies=u.spectral())
    else:
        if not rest:
            msg = (f"{path}: CTYPE3 = {ctype3!r} is a velocity axis but header card RESTFRQ is missing; expected "
                   "RESTFRQ (or RESTFREQ), the rest frequency in Hz the velocities refer to")
            raise CubeError(msg)
        doppler = u.doppler_radio if kind == "VRAD" else u.doppler_optical
        freqs = axis.to(u.Hz, equivalencies=doppler(rest[0] * u.Hz))
    if np.any(~np.isfinite(freqs)) or np.any(freqs <= 0):
        msg = f"{path}: the spectral axis (CTYPE3 = {ctype3!r}) gives non-positive frequencies"
        raise CubeError(msg)

    bmaj = bmin = bpa = None
    source = "BMAJ/BMIN cards"
    if beams is not None:
        if len(beams[0]) != dims[2]:
            msg = (f"{path}: the BEAMS table has {len(beams[0])} rows for one polarisation; expected one per "
                   f"channel ({dims[2]})")
            raise CubeError(msg)
        if beam_arcsec is not None:
            msg = (f"{path}: the cube carries a per-channel BEAMS table and the config gives beam_arcsec; expected "
                   "only one of them (remove beam_arcsec for this cube)")
            raise CubeError(msg)
        bmaj, bmin, bpa = (np.median(b) for b in beams)
        source = "BEAMS table (per channel)"
    elif "BMAJ" in header and "BMIN" in header:
        if beam_arcsec is not None:
            msg = (f"{path}: header cards BMAJ/BMIN give the beam and the config gives beam_arcsec too; expected "
                   "only one of them (beam_arcsec is for a cube whose header has no beam)")
            raise CubeError(msg)
        bmaj = float(header["BMAJ"]) * u.deg
        bmin = float(header["BMIN"]) * u.deg
        bpa = float(header.get("BPA", 0.0)) * u.deg
        if not (bmaj > 0 and bmin > 0):
            msg = f"{path}: header cards BMAJ/BMIN = {header['BMAJ']}/{header['BMIN']}; expected positive sizes"
            raise CubeError(msg)
    elif beam_arcsec is not None:
        bmaj, bmin, bpa = (float(beam_arcsec[0]) * u.arcsec).to(u.deg), (float(beam_arcsec[1]) * u.arcsec).to(
            u.deg), float(beam_arcsec[2]) * u.deg
        source = "config beam_arcsec"
    elif bunit.is_equivalent(u.Jy / u.beam) or bunit.is_equivalent(u.K):
        msg = (f"{path}: BUNIT = {bunit_text!r} needs a beam but header cards BMAJ/BMIN are missing and there is no "
               "BEAMS table; expected BMAJ and BMIN (the beam's FWHM axes, deg), or set the cube's beam_arcsec "
               "[major, minor, pa] in the config")
        raise CubeError(msg)
    return CubeInfo(path=path, header=header, shape=(dims[2], dims[1], dims[0]), celestial_wcs=celestial,
                    frequencies=freqs, specsys=specsys, bunit=bunit, beam_major=bmaj, beam_minor=bmin,
                    beam_pa=bpa, pixel_scale=pixel_scale.to(u.arcsec), hdu=index, error_hdu=err_index,
                    channel_beams=beams, beam_source=source)


def open_data(path: str | Path):
    """Open a cube's data memory-mapped and read-only; use as a context manager.

    Yields an array of shape (n_chan, n_y, n_x) (a length-1 Stokes axis removed). A
    :class:`~pipeline.errors.GasledgerError` raised inside the ``with`` block is re-raised (same class)
    with the file's path in front, unless its message already names the file, so an error found in the
    data (e.g. no noise to measure) says which cube it is about.
    """
    return _DataContext(Path(path))


def open_error(path: str | Path):
    """Open a cube's ERR extension (per-pixel 1-sigma, same shape and unit as the data), like :func:`open_data`.

    Yields None when the file has no ERR extension.
    """
    return _DataContext(Path(path), error=True)


def open_quality(path: str | Path):
    """Open a cube's DQ extension (integer data-quality flags per voxel, same shape as the data), like
    :func:`open_data`. Yields None when the file has no DQ extension."""
    return _DataContext(Path(path), quality=True)


def flagged(quality: np.ndarray, bad_bits: int) -> np.ndarray:
    """Voxels whose data-quality flags hold any of ``bad_bits`` (a bit mask)."""
    return (np.asarray(quality).astype(np.int64) & int(bad_bits)) != 0


class _DataContext:
    def __init__(self, path: Path, error: bool = False, quality: bool = False):
        self.path = path
        self.error = error
        self.quality = quality
        self.hdul = None

    def __enter__(self) -> np.ndarray | None:
        self.hdul = _open_hdul(self.path)
        try:
            index, err = _cube_hdus(self.hdul, self.path)
        except CubeError:
            self.hdul.close()
            raise
        if self.quality:
            dq = [i for i, h in enumerate(self.hdul) if i and h.name == "DQ" and h.data is not None]
            if not dq:
                return None
            data = self.hdul[dq[0]].data
            data = data[0] if data.ndim == 4 else data
            cube = self.hdul[index].data
            cube_shape = cube.shape[1:] if cube.ndim == 4 else cube.shape
            if data.shape != cube_shape:
                self.hdul.close()
                msg = (f"{self.path}: the DQ extension has shape {data.shape} but the cube {cube_shape}; expected "
                       "one data-quality flag per voxel")
                raise CubeError(msg)
            return data
        if self.error and err is None:
            return None
        hdu = self.hdul[err if self.error else index]
        data = hdu.data
        if data is None:
            self.hdul.close()
            msg = f"{self.path}: HDU {hdu.name or index} has no data; expected a cube"
            raise CubeError(msg)
        if data.ndim == 4:
            data = data[0]
        return data

    def __exit__(self, exc_type, exc, tb) -> None:
        self.hdul.close()
        # an error met while this cube's data were in use names the cube, unless it already does
        if isinstance(exc, GasledgerError) and str(self.path) not in str(exc):
            try:
                named = type(exc)(f"{self.path}: {exc}")
            except TypeError:  # an error class with another signature: leave it as it is
                return
            raise named from exc

"""Inter-stage products as objects: a line's sub-cube and its aperture spectra, each with to_fits / from_fits.

A :class:`SubCube` is what the comoving step writes (one line's channels cut
from a cube, on a velocity axis in the target's rest frame, cropped around the
target); :class:`LineSpectra` is what the extract step writes (flux density per
aperture and channel, with the noise figures of each aperture). Both keep the
standard FITS cards (celestial WCS, spectral axis, BUNIT, beam, RESTFRQ) in a
header and their own metadata as typed fields; the private cards that carry
those fields in the files are written and read only here (names in
:mod:`pipeline.io.cards`).
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import Table
from astropy.wcs import WCS

from pipeline.errors import GasledgerError
from pipeline.io import cards
from pipeline.io.cubes import CubeInfo, cube_info_from_header, linear_axis, read_beam_table

if TYPE_CHECKING:      # the stacking module loads scipy.special: only the stack steps need it
    from pipeline.rates.stacking import StackInput

__all__ = ["ProductMeta", "SubCube", "LineSpectra", "BandMeasurements", "BAND_COLUMN_UNITS", "StackedSpectrum", "SpeciesStack",
           "STACK_COLUMN_UNITS", "EpochInputs"]

_STANDARD = ("RESTFRQ", "BMAJ", "BMIN", "BPA")


def _read_file(cls, path: str | Path):
    """``cls.from_fits`` of the file at ``path``, read whole and closed again."""
    with fits.open(path) as hdul:
        hdul.readall()
        return cls.from_fits(hdul)


@dataclass(frozen=True)
class ProductMeta:
    """Which line of which cube a product holds, and where the target is (shared by sub-cube and spectra).

    Distances are in au, the range rate in km/s, pixels 0-based in the sub-cube's grid; None where not known
    (a line that is not covered has no geometry).
    """

    cube_id: str
    epoch: str
    line_id: str
    species: str
    covered: bool = True
    reason: str = ""
    spectral_response: str = "hanning"
    target_x: float | None = None
    target_y: float | None = None
    r_h_au: float | None = None
    delta_au: float | None = None
    delta_dot_km_s: float | None = None
    first_channel: int = -1
    freq0_hz: float | None = None
    dfreq_hz: float | None = None
    linear: bool = True
    n_flagged: int = 0                    # voxels blanked by their data-quality flags

    @property
    def r_h(self) -> u.Quantity:
        """Heliocentric distance."""
        return self.r_h_au * u.au

    @property
    def delta(self) -> u.Quantity:
        """Observer-target distance."""
        return self.delta_au * u.au

    def write(self, header: fits.Header) -> None:
        """Put the metadata into ``header`` as private cards (only what is known)."""
        for key in ("cube_id", "epoch", "line_id", "species", "covered", "spectral_response"):
            cards.put(header, key, getattr(self, key))
        if self.reason:
            cards.put(header, "reason", self.reason)
        if not self.covered:
            return
        cards.put(header, "linear", self.linear)
        cards.put(header, "first_channel", self.first_channel)
        cards.put(header, "n_flagged", int(self.n_flagged))
        for key, value in (("target_x", self.target_x), ("target_y", self.target_y), ("delta", self.delta_au),
                           ("r_h", self.r_h_au), ("delta_dot", self.delta_dot_km_s), ("freq0", self.freq0_hz),
                           ("dfreq", self.dfreq_hz)):
            if value is not None:
                cards.put(header, key, float(value))

    @classmethod
    def read(cls, header: fits.Header, where: str) -> "ProductMeta":
        """The metadata from a product's header (written by :meth:`write`)."""
        def number(key: str) -> float | None:
            value = cards.get(header, key, None, where)
            return None if value is None else float(value)

        return cls(cube_id=str(cards.get(header, "cube_id", where=where)),
                   epoch=str(cards.get(header, "epoch", where=where)),
                   line_id=str(cards.get(header, "line_id", where=where)),
                   species=str(cards.get(header, "species", "", where)),
                   covered=bool(cards.get(header, "covered", False, where)),
                   reason=str(cards.get(header, "reason", "", where)),
                   spectral_response=str(cards.get(header, "spectral_response", "hanning", where)),
                   target_x=number("target_x"),
                   target_y=number("target_y"),
                   r_h_au=number("r_h"),
                   delta_au=number("delta"),
                   delta_dot_km_s=number("delta_dot"),
                   first_channel=int(cards.get(header, "first_channel", -1, where)),
                   freq0_hz=number("freq0"),
                   dfreq_hz=number("dfreq"),
                   linear=bool(cards.get(header, "linear", True, where)),
                   n_flagged=int(cards.get(header, "n_flagged", 0, where)))


@dataclass
class SubCube:
    """One line's sub-cube in the target's rest frame, or the reason there is none.

    Attributes
    ----------
    meta : ProductMeta
    header : fits.Header
        Standard cards only: the celestial WCS (axes 1, 2), the VRAD axis (axis 3), BUNIT, BMAJ/BMIN/BPA,
        RESTFRQ, SPECSYS.
    data : ndarray or None
        (n_chan, n_y, n_x) in BUNIT; None when not covered.
    velocity : ndarray or None
        Exact radio velocity of each channel [km/s] (the WCS axis is its linear approximation).
    name : str
        What to call it in messages (its file, or a label for one made in memory).
    """

    meta: ProductMeta
    header: fits.Header = field(default_factory=fits.Header)
    data: np.ndarray | None = None
    velocity: np.ndarray | None = None
    name: str = "sub-cube"
    beams: tuple[u.Quantity, u.Quantity, u.Quantity] | None = None   # per channel (major, minor, PA), or None

    @classmethod
    def build(cls, meta: ProductMeta, data: np.ndarray, velocity: np.ndarray, celestial_wcs: WCS, bunit: str,
              rest_frequency: u.Quantity, beam: tuple[float, float, float] | None = None,
              name: str = "sub-cube",
              beams: tuple[u.Quantity, u.Quantity, u.Quantity] | None = None) -> "SubCube":
        """A covered sub-cube from its data, exact velocities [km/s] and celestial WCS.

        ``beam`` is (BMAJ, BMIN [deg], BPA [deg]) as in FITS: the one beam, or the median of the per-channel
        ``beams`` (major, minor, PA Quantities, one per channel) when the cube has a beam table. The spectral
        axis written is the linear fit of ``velocity`` (:func:`pipeline.geometry.frames.linear_axis`); the
        exact values travel with the product.
        """
        from pipeline.geometry.frames import linear_axis as fit_linear_axis

        v0, dv, _ = fit_linear_axis(np.asarray(velocity, dtype=float))
        header = fits.Header()
        header["RESTFRQ"] = (u.Quantity(rest_frequency).to_value(u.Hz), "[Hz] line rest frequency")
        header.update(celestial_wcs.to_header())
        header["WCSAXES"] = 3
        header["CTYPE3"] = "VRAD"
        header["CUNIT3"] = "km/s"
        header["CRPIX3"] = 1.0
        header["CRVAL3"] = v0
        header["CDELT3"] = dv
        header["SPECSYS"] = ("SOURCE", "velocity in the target's rest frame")
        header["VELREF"] = 259  # radio convention, SOURCE frame (AIPS convention code)
        header["BUNIT"] = bunit
        if beam is not None:
            header["BMAJ"], header["BMIN"], header["BPA"] = (float(b) for b in beam)
        return cls(meta=meta, header=header, data=data, velocity=np.asarray(velocity, dtype=float), name=name,
                   beams=beams)

    @contextlib.contextmanager
    def in_use(self):
        """A context in which a gasledger error names this sub-cube (its file), unless it already does."""
        try:
            yield self
        except GasledgerError as exc:
            if self.name in str(exc):
                raise
            try:
                named = type(exc)(f"{self.name}: {exc}")
            except TypeError:  # an error class with another signature: leave it as it is
                raise exc from None
            raise named from exc

    def info(self) -> CubeInfo:
        """The sub-cube described (and checked) as a cube: WCS, units, beam, pixel scale.

        Made once and kept while the header, the data's shape and the beams stay what they were (extraction and
        injection ask for it once per placement and line).
        """
        key = (self.header.tostring(), None if self.data is None else self.data.shape, id(self.beams), self.name)
        cached = self.__dict__.get("_info")
        if cached is not None and cached[0] == key:
            return cached[1]
        header = self.header.copy()
        header["NAXIS"] = 3
        for i, n in enumerate(self.data.shape[::-1], start=1):
            header[f"NAXIS{i}"] = n
        info = cube_info_from_header(header, self.name, beams=self.beams)
        self.__dict__["_info"] = (key, info)
        return info

    def to_fits(self) -> fits.HDUList:
        """The sub-cube file: primary HDU (data, standard and private cards), VELOCITY table when covered."""
        prim = fits.PrimaryHDU(self.data, header=self.header.copy() if self.data is not None else None)
        if self.data is None:
            for key in ("RESTFRQ",):
                if key in self.header:
                    prim.header[key] = self.header[key]
        self.meta.write(prim.header)
        hdus = [prim]
        if self.data is not None:
            velocity = fits.BinTableHDU(Table({"velocity": self.velocity * u.km / u.s}), name="VELOCITY")
            hdus.append(velocity)
        if self.beams is not None:
            major, minor, pa = self.beams
            n = len(major)
            table = Table({"BMAJ": major.to(u.arcsec), "BMIN": minor.to(u.arcsec), "BPA": pa.to(u.deg),
                           "CHAN": np.arange(n, dtype=np.int32), "POL": np.zeros(n, dtype=np.int32)})
            beams = fits.BinTableHDU(table, name="BEAMS")
            prim.header["CASAMBM"] = (True, "per-channel beams in the BEAMS table")
            hdus.append(beams)
        return fits.HDUList(hdus)

    @classmethod
    def from_fits(cls, path: str | Path) -> "SubCube":
        """Read a sub-cube file written by :meth:`to_fits` (the data read whole: sub-cubes are small)."""
        with fits.open(path) as hdul:
            header = hdul[0].header.copy()
            meta = ProductMeta.read(header, str(path))
            data = None if hdul[0].data is None else np.array(hdul[0].data)
            velocity = None
            beams = read_beam_table(hdul, path) if "BEAMS" in hdul else None
            if "VELOCITY" in hdul:
                velocity = np.asarray(Table.read(hdul["VELOCITY"])["velocity"].to(u.km / u.s).value, dtype=float)
            elif data is not None:
                velocity = (linear_axis(header, 3, data.shape[0], path)
                            * u.Unit(header.get("CUNIT3", "km/s"))).to_value(u.km / u.s)
        for name in [k for k in header if k.startswith("GL") or k in ("NAXIS", "NAXIS1", "NAXIS2", "NAXIS3",
                                                                        "SIMPLE", "BITPIX", "EXTEND", "CASAMBM")]:
            del header[name]
        return cls(meta=meta, header=header, data=data, velocity=velocity, name=str(path), beams=beams)


@dataclass
class LineSpectra:
    """Aperture spectra of one line's sub-cube and their noise figures (what the extract step writes).

    Attributes
    ----------
    meta : ProductMeta
        The sub-cube's metadata.
    flux : ndarray or None
        (n_apertures, n_chan) flux density [Jy], baseline removed.
    blank : ndarray or None
        (n_apertures, n_chan) number of blank pixels in each aperture and channel.
    apertures : Table or None
        One row per aperture: radius_km, radius_arcsec, radius_pix, area_pix, sigma_chan [Jy],
        sigma_window and sigma_window_naive [Jy km/s], n_windows, n_independent, sigma_chan_offsource,
        n_offsource, n_blank_chan.
    channels : Table or None
        velocity [km/s], line_free, window_weight.
    window, v_centre : float
        Integration window half-width and centre [km/s].
    centre : (float, float)
        Aperture centre (x, y), 0-based pixels of the sub-cube.
    pixel_scale_arcsec : float
    grid_shape : (int, int)
        (n_y, n_x) of the sub-cube.
    beam_deg : (float, float, float) or None
        BMAJ, BMIN [deg], BPA [deg] of the sub-cube.
    rest_frequency_hz : float
    injected_q : float or None
        Set for the spectra of an injection ([1/s]), with ``injected_index`` the sky position.
    """

    meta: ProductMeta
    flux: np.ndarray | None = None
    blank: np.ndarray | None = None
    apertures: Table | None = None
    channels: Table | None = None
    window: float = float("nan")
    v_centre: float = 0.0
    centre: tuple[float, float] = (float("nan"), float("nan"))
    pixel_scale_arcsec: float = float("nan")
    grid_shape: tuple[int, int] = (0, 0)
    beam_deg: tuple[float, float, float] | None = None
    rest_frequency_hz: float = float("nan")
    injected_q: float | None = None
    injected_index: int | None = None

    @property
    def velocity(self) -> np.ndarray:
        """Velocity of each channel [km/s]."""
        return np.asarray(self.channels["velocity"], dtype=float)

    def injected(self, q: float, index: int) -> "LineSpectra":
        """The same spectra marked as an injection of ``q`` [1/s] at sky position ``index``."""
        return replace(self, injected_q=float(q), injected_index=int(index))

    def to_fits(self) -> fits.HDUList:
        """The spectra file: primary (n_apertures, n_chan) flux [Jy] on a VRAD axis, BLANK, APERTURES, CHANNELS."""
        if self.flux is None:
            prim = fits.PrimaryHDU()
            self.meta.write(prim.header)
            return fits.HDUList([prim])
        prim = fits.PrimaryHDU(np.asarray(self.flux, dtype=np.float64))
        h = prim.header
        vel = self.velocity
        h["CTYPE1"], h["CUNIT1"], h["CRPIX1"] = "VRAD", "km/s", 1.0
        h["CRVAL1"], h["CDELT1"] = float(vel[0]), float(vel[1] - vel[0])
        h["CTYPE2"], h["CRPIX2"], h["CRVAL2"], h["CDELT2"] = "APERTURE", 1.0, 0.0, 1.0
        h["SPECSYS"], h["BUNIT"] = "SOURCE", "Jy"
        if np.isfinite(self.rest_frequency_hz):
            h["RESTFRQ"] = self.rest_frequency_hz
        if self.beam_deg is not None:
            h["BMAJ"], h["BMIN"], h["BPA"] = self.beam_deg
        self.meta.write(h)
        cards.put(h, "window", float(self.window))
        cards.put(h, "v_centre", float(self.v_centre))
        cards.put(h, "aperture_x", float(self.centre[0]))
        cards.put(h, "aperture_y", float(self.centre[1]))
        cards.put(h, "pixel_scale", float(self.pixel_scale_arcsec))
        cards.put(h, "grid_nx", int(self.grid_shape[1]))
        cards.put(h, "grid_ny", int(self.grid_shape[0]))
        if self.injected_q is not None:
            cards.put(h, "injected_q", self.injected_q)
            cards.put(h, "injected_index", self.injected_index)
        aps = fits.table_to_hdu(self.apertures)
        aps.name = "APERTURES"
        chans = fits.table_to_hdu(self.channels)
        chans.name = "CHANNELS"
        return fits.HDUList([prim, fits.ImageHDU(np.asarray(self.blank, dtype=np.int32), name="BLANK"), aps, chans])

    @classmethod
    def from_fits(cls, source: str | Path | fits.HDUList) -> "LineSpectra":
        """Read a spectra file (a path or an open HDU list) written by :meth:`to_fits`."""
        if not isinstance(source, fits.HDUList):
            return _read_file(cls, source)
        where = source.filename() or "spectra"
        h = source[0].header
        meta = ProductMeta.read(h, where)
        if source[0].data is None:
            return cls(meta=meta)
        beam = (float(h["BMAJ"]), float(h["BMIN"]), float(h.get("BPA", 0.0))) if "BMAJ" in h else None
        q = cards.get(h, "injected_q", None, where)
        return cls(meta=meta, flux=np.asarray(source[0].data, dtype=float),
                   blank=np.asarray(source["BLANK"].data), apertures=Table.read(source["APERTURES"]),
                   channels=Table.read(source["CHANNELS"]), window=float(cards.get(h, "window", where=where)),
                   v_centre=float(cards.get(h, "v_centre", 0.0, where)),
                   centre=(float(cards.get(h, "aperture_x", where=where)),
                           float(cards.get(h, "aperture_y", where=where))),
                   pixel_scale_arcsec=float(cards.get(h, "pixel_scale", where=where)),
                   grid_shape=(int(cards.get(h, "grid_ny", where=where)), int(cards.get(h, "grid_nx", where=where))),
                   beam_deg=beam, rest_frequency_hz=float(h.get("RESTFRQ", np.nan)),
                   injected_q=None if q is None else float(q),
                   injected_index=None if q is None else int(cards.get(h, "injected_index", where=where)))


#: Units of the columns of the bands file's tables (a column not listed is a count, flag, label or ratio).
BAND_COLUMN_UNITS = {
    "aperture_km": "km", "window_lo": "um", "window_hi": "um", "radius_pix": "pix", "flux": "W m-2",
    "sigma": "W m-2", "sigma_err": "W m-2", "sigma_empirical": "W m-2", "continuum": "W m-2 um-1",
    "g_factor": "s-1", "response": "W m-2 s", "q": "s-1", "sigma_q": "s-1", "outflow": "km s-1", "r_h": "AU",
    "delta": "AU", "wavelength": "um", "flux_density": "W m-2 um-1", "flux_density_err": "W m-2 um-1",
    "afrho": "cm", "afrho_err": "cm", "phase": "deg", "wavelength_min": "um", "wavelength_max": "um",
}


def _with_units(table: Table) -> Table:
    for name, unit in BAND_COLUMN_UNITS.items():
        if name in table.colnames:
            table[name].unit = unit
    return table


@dataclass
class BandMeasurements:
    """What the bands step measured in one infrared cube (the bands file).

    Attributes
    ----------
    cube_id, epoch : str
    r_h_au, delta_au : float
    resolving_power : float
        The resolving power used, and ``resolving_power_source`` where it came from.
    doppler : float
        Observed over rest wavelength of the target.
    centre : (float, float)
        The target's pixel (x, y), 0-based.
    pixel_scale_arcsec : float
    sigma_source : str
        Where the per-channel sigma came from (the ERR extension, or the scatter of channel differences).
    band_ids : tuple of str
        The bands measured.
    spectra, sigma : ndarray
        (n_apertures, n_chan) aperture spectra F_lambda and their sigma [W m-2 um-1].
    continuum : ndarray
        (n_bands, n_apertures, n_chan) fitted continuum under each band [W m-2 um-1], NaN where not fitted.
    wave : Table
        Observed and rest wavelength of each channel [um].
    apertures : Table
        radius_km, radius_pix, area_pix.
    bands, dust, colour : Table
        One row per band and aperture (flux, its errors, response, Q ...); Afrho per wavelength and aperture;
        the colour per aperture. Columns carry units (:data:`BAND_COLUMN_UNITS`).
    """

    cube_id: str
    epoch: str
    r_h_au: float
    delta_au: float
    resolving_power: float
    resolving_power_source: str
    doppler: float
    centre: tuple[float, float]
    pixel_scale_arcsec: float
    sigma_source: str
    band_ids: tuple[str, ...]
    spectra: np.ndarray
    sigma: np.ndarray
    continuum: np.ndarray
    wave: Table
    apertures: Table
    bands: Table
    dust: Table
    colour: Table

    def to_fits(self) -> fits.HDUList:
        """The bands file: primary (metadata), SPECTRA, SIGMA, CONTINUUM, WAVE, APERTURES, BANDS, DUST, COLOUR."""
        prim = fits.PrimaryHDU()
        h = prim.header
        for key, value in (("regime", "infrared"), ("cube_id", self.cube_id), ("epoch", self.epoch),
                           ("r_h", float(self.r_h_au)), ("delta", float(self.delta_au)),
                           ("resolving_power", float(self.resolving_power)),
                           ("resolving_power_source", self.resolving_power_source[:60]),
                           ("doppler", float(self.doppler)), ("aperture_x", float(self.centre[0])),
                           ("aperture_y", float(self.centre[1])), ("pixel_scale", float(self.pixel_scale_arcsec)),
                           ("sigma_source", self.sigma_source[:60]), ("bands", ",".join(self.band_ids))):
            cards.put(h, key, value)
        hdus = [prim]
        for name, image in (("SPECTRA", self.spectra), ("SIGMA", self.sigma), ("CONTINUUM", self.continuum)):
            hdu = fits.ImageHDU(np.asarray(image, dtype=np.float64), name=name)
            hdu.header["BUNIT"] = "W m-2 um-1"
            hdus.append(hdu)
        for name, table in (("WAVE", self.wave), ("APERTURES", self.apertures), ("BANDS", _with_units(self.bands)),
                            ("DUST", _with_units(self.dust)), ("COLOUR", _with_units(self.colour))):
            hdu = fits.table_to_hdu(table)
            hdu.name = name
            hdus.append(hdu)
        return fits.HDUList(hdus)

    @classmethod
    def from_fits(cls, source: str | Path | fits.HDUList) -> "BandMeasurements":
        """Read a bands file (a path or an open HDU list) written by :meth:`to_fits`."""
        if not isinstance(source, fits.HDUList):
            return _read_file(cls, source)
        where = source.filename() or "bands file"
        h = source[0].header
        tables = {}
        for name in ("WAVE", "APERTURES", "BANDS", "DUST", "COLOUR"):
            table = Table.read(source[name])
            table.meta.clear()              # no FITS bookkeeping cards (EXTNAME ...) in the table's meta
            tables[name] = table
        continuum = source["CONTINUUM"].data
        return cls(cube_id=str(cards.get(h, "cube_id", where=where)), epoch=str(cards.get(h, "epoch", where=where)),
                   r_h_au=float(cards.get(h, "r_h", where=where)), delta_au=float(cards.get(h, "delta", where=where)),
                   resolving_power=float(cards.get(h, "resolving_power", where=where)),
                   resolving_power_source=str(cards.get(h, "resolving_power_source", "", where)),
                   doppler=float(cards.get(h, "doppler", where=where)),
                   centre=(float(cards.get(h, "aperture_x", where=where)),
                           float(cards.get(h, "aperture_y", where=where))),
                   pixel_scale_arcsec=float(cards.get(h, "pixel_scale", where=where)),
                   sigma_source=str(cards.get(h, "sigma_source", "", where)),
                   band_ids=tuple(b for b in str(cards.get(h, "bands", "", where)).split(",") if b),
                   spectra=np.asarray(source["SPECTRA"].data, dtype=float),
                   sigma=np.asarray(source["SIGMA"].data, dtype=float),
                   continuum=np.asarray(continuum, dtype=float) if continuum is not None else np.zeros((0, 0, 0)),
                   wave=tables["WAVE"], apertures=tables["APERTURES"], bands=tables["BANDS"], dust=tables["DUST"],
                   colour=tables["COLOUR"])

    @staticmethod
    def is_bands_file(header: fits.Header) -> bool:
        """Whether a file's primary header is that of a bands file (an infrared cube's measurements)."""
        return cards.get(header, "regime", None) == "infrared"


#: Units of the columns of a stack file's INPUTS and SUMMARY tables ('response' mixes line and band units).
STACK_COLUMN_UNITS = {"t_kin": "K", "aperture_km": "km", "window": "km s-1", "q": "s-1", "sigma_q": "s-1",
                      "r_h": "AU", "delta": "AU", "outflow": "km s-1", "response": "Jy km s-1 s",
                      "scale": "Jy km s-1 s", "nonlte_scale": "Jy km s-1 s", "q_distributed": "s-1",
                      "sigma_q_distributed": "s-1"}


@dataclass
class StackedSpectrum:
    """One epoch group's stacked Q density, (n_T, n_apertures, n_chan) in s-1 / (km s-1), on a regular axis."""

    group: str
    density: np.ndarray
    v_start: float          # velocity of the first channel centre [km/s]
    v_step: float           # channel step [km/s]

    @property
    def velocity(self) -> np.ndarray:
        """Velocity of each channel centre [km/s] (the FITS axis of the stored image)."""
        header = fits.Header()
        header["CRVAL1"], header["CDELT1"], header["CRPIX1"] = self.v_start, self.v_step, 1.0
        return linear_axis(header, 1, self.density.shape[-1])


@dataclass
class SpeciesStack:
    """One species' measurements in Q units, combined per epoch group and over all epochs (the stack file).

    ``spectra`` maps each epoch group ('all' included) to its stacked spectrum (millimetre lines only);
    ``inputs`` has one row per line or band, cube, temperature and aperture (its response, window capture,
    Q and sigma_Q); ``summary`` one row per group, temperature and aperture (the combined Q and sigma_Q, the
    lines and cubes that went in); ``curves`` one row per line input and aperture with its response curve S(T)
    (the window flux per unit Q, Jy km/s s) on :data:`pipeline.rates.temperature.TEMPERATURE_GRID`, and with the
    non-LTE comparison also 'nonlte_scale', the same under the comparison's non-LTE excitation. Table
    columns carry units (:data:`STACK_COLUMN_UNITS`).
    """

    species: str
    n_inputs: int
    spectra: dict[str, StackedSpectrum]
    inputs: Table
    summary: Table
    curves: Table | None = None      # per line input and aperture: 'scale' (and 'nonlte_scale'), S(T) on the grid

    def to_fits(self) -> fits.HDUList:
        """The stack file: primary (species), one STACK_<group> image per group, INPUTS and SUMMARY tables."""
        prim = fits.PrimaryHDU()
        cards.put(prim.header, "species", self.species)
        cards.put(prim.header, "n_inputs", int(self.n_inputs))
        hdus = [prim]
        for group, spec in self.spectra.items():
            hdu = fits.ImageHDU(spec.density, name=f"STACK_{group}")
            hdu.header["CTYPE1"], hdu.header["CUNIT1"], hdu.header["CRPIX1"] = "VRAD", "km/s", 1.0
            hdu.header["CRVAL1"], hdu.header["CDELT1"] = float(spec.v_start), float(spec.v_step)
            hdu.header["CTYPE2"], hdu.header["CTYPE3"] = "APERTURE", "TKIN"
            hdu.header["SPECSYS"], hdu.header["BUNIT"] = "SOURCE", "s-1 / (km s-1)"
            cards.put(hdu.header, "group", group)
            hdus.append(hdu)
        tables = [("INPUTS", self.inputs), ("SUMMARY", self.summary)]
        if self.curves is not None:
            tables.append(("CURVES", self.curves))
        for name, table in tables:
            for column, unit in STACK_COLUMN_UNITS.items():
                if column in table.colnames:
                    table[column].unit = unit
            hdu = fits.table_to_hdu(table)
            hdu.name = name
            hdus.append(hdu)
        return fits.HDUList(hdus)

    @classmethod
    def from_fits(cls, source: str | Path) -> "SpeciesStack":
        """Read a stack file written by :meth:`to_fits`."""
        with fits.open(source) as hdul:
            where = str(source)
            spectra = {}
            for hdu in hdul[1:]:
                if hdu.name.startswith("STACK_"):
                    group = str(cards.get(hdu.header, "group", hdu.name[len("STACK_"):], where))
                    spectra[group] = StackedSpectrum(group=group, density=np.array(hdu.data, dtype=float),
                                                     v_start=float(hdu.header["CRVAL1"]),
                                                     v_step=float(hdu.header["CDELT1"]))
            tables = {}
            for name in ("INPUTS", "SUMMARY", "CURVES"):
                if name not in hdul:
                    continue
                table = Table.read(hdul[name])
                table.meta.clear()
                tables[name] = table
            return cls(species=str(cards.get(hdul[0].header, "species", where=where)),
                       n_inputs=int(cards.get(hdul[0].header, "n_inputs", 0, where)), spectra=spectra,
                       inputs=tables["INPUTS"], summary=tables["SUMMARY"], curves=tables.get("CURVES"))


@dataclass
class EpochInputs:
    """One species' spectra and band measurements of one epoch in Q units (the stack inputs), with their rows
    for the stack's INPUTS table and the lines left out: what the stack combines, computed once per epoch.

    The file keeps every array exactly (float64), so a stack made from these files equals one made from the
    spectra directly.
    """

    species: str
    epoch: str
    inputs: list[StackInput]
    rows: Table
    skipped: list[str]

    def to_fits(self) -> fits.HDUList:
        """Primary (species, epoch), one INPUT table per input (a row per aperture), ROWS and SKIPPED tables."""
        prim = fits.PrimaryHDU()
        cards.put(prim.header, "species", self.species)
        cards.put(prim.header, "epoch", self.epoch)
        cards.put(prim.header, "n_inputs", len(self.inputs))
        hdus = [prim]
        for k, inp in enumerate(self.inputs, start=1):
            columns = {"aperture": list(inp.labels), "radius_km": np.asarray(inp.radius_km, dtype=float),
                       "q": np.asarray(inp.q, dtype=float).T, "sigma_q": np.asarray(inp.sigma_q, dtype=float).T}
            if inp.density is not None:
                columns["density"] = np.asarray(inp.density, dtype=float).transpose(1, 0, 2)
                columns["velocity"] = np.tile(np.asarray(inp.velocity, dtype=float), (len(inp.labels), 1))
            if inp.curve is not None:
                columns["curve"] = np.asarray(inp.curve, dtype=float).T
            if inp.nonlte_curve is not None:
                columns["nonlte_curve"] = np.asarray(inp.nonlte_curve, dtype=float).T
            if inp.distributed_ratio is not None:
                columns["distributed_ratio"] = np.asarray(inp.distributed_ratio, dtype=float)
            hdu = fits.table_to_hdu(Table(columns))
            hdu.name, hdu.ver = "INPUT", k
            cards.put(hdu.header, "epoch", inp.epoch)
            cards.put(hdu.header, "cube_id", inp.cube_id)
            cards.put(hdu.header, "line_id", inp.line_id)
            if np.isfinite(inp.window):                  # bands have no integration window
                cards.put(hdu.header, "window", float(inp.window))
            hdus.append(hdu)
        rows = fits.table_to_hdu(self.rows if len(self.rows.colnames) else Table(names=["epoch"], dtype=[str]))
        rows.name = "ROWS"
        skipped = fits.table_to_hdu(Table({"note": np.array(self.skipped, dtype=str)}))
        skipped.name = "SKIPPED"
        return fits.HDUList([*hdus, rows, skipped])

    @classmethod
    def from_fits(cls, source: str | Path) -> "EpochInputs":
        """Read a file written by :meth:`to_fits` (the arrays as written, bit for bit)."""
        from pipeline.rates.stacking import StackInput

        where = str(source)
        with fits.open(source) as hdul:
            inputs = []
            for hdu in hdul[1:]:
                if hdu.name != "INPUT":
                    continue
                data, h = hdu.data, hdu.header
                names = data.columns.names
                density = (np.array(data["density"], dtype=float).transpose(1, 0, 2) if "density" in names
                           else None)
                inputs.append(StackInput(
                    epoch=str(cards.get(h, "epoch", where=where)), cube_id=str(cards.get(h, "cube_id", where=where)),
                    line_id=str(cards.get(h, "line_id", where=where)),
                    velocity=np.array(data["velocity"][0], dtype=float) if "velocity" in names else None,
                    density=density, q=np.array(data["q"], dtype=float).T,
                    sigma_q=np.array(data["sigma_q"], dtype=float).T,
                    radius_km=np.array(data["radius_km"], dtype=float),
                    apertures=tuple(str(a) for a in data["aperture"]),
                    curve=np.array(data["curve"], dtype=float).T if "curve" in names else None,
                    nonlte_curve=(np.array(data["nonlte_curve"], dtype=float).T if "nonlte_curve" in names
                                  else None),
                    window=float(cards.get(h, "window", float("nan"), where)),
                    distributed_ratio=(np.array(data["distributed_ratio"], dtype=float)
                                       if "distributed_ratio" in names else None)))
            rows = Table.read(hdul["ROWS"], mask_invalid=False)     # NaN stays NaN, as the stack wrote it
            rows.meta.clear()
            skipped = [str(n) for n in hdul["SKIPPED"].data["note"]] if len(hdul["SKIPPED"].data) else []
            return cls(species=str(cards.get(hdul[0].header, "species", where=where)),
                       epoch=str(cards.get(hdul[0].header, "epoch", where=where)), inputs=inputs, rows=rows,
                       skipped=skipped)

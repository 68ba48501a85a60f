"""The molecular catalogue: species properties, millimetre lines and infrared bands.

The built-in catalogue lives in ``pipeline/data/species.ecsv``,
``pipeline/data/lines.ecsv`` and ``pipeline/data/bands.ecsv``; every value has
a provenance column beside it. A user catalogue with the same columns can be
given instead.

Upper-level degeneracies and partition functions follow one convention (no
nuclear-spin weights) so that the population fraction g_u exp(-E_u/kT)/Q(T)
does not silently move by a spin-statistics factor.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.table import QTable

from pipeline.errors import CatalogueError

__all__ = [
    "Species",
    "Line",
    "Band",
    "Catalogue",
    "load_catalogue",
    "DEFAULT_SPECIES_FILE",
    "DEFAULT_LINES_FILE",
    "DEFAULT_BANDS_FILE",
]

_DATA = Path(__file__).parent / "data"
DEFAULT_SPECIES_FILE = _DATA / "species.ecsv"
DEFAULT_LINES_FILE = _DATA / "lines.ecsv"
DEFAULT_BANDS_FILE = _DATA / "bands.ecsv"

_SPECIES_COLUMNS = {
    "species": None,
    "mass": u.u,
    "partition": None,
    "rot_a": u.GHz,
    "rot_b": u.GHz,
    "rot_c": u.GHz,
    "multiplicity": None,
    "photo_quiet": 1 / u.s,
    "photo_active": 1 / u.s,
    "parent": None,
}
_LINE_COLUMNS = {
    "line_id": None,
    "species": None,
    "transition": None,
    "freq": u.GHz,
    "a_ul": 1 / u.s,
    "e_up": u.K,
    "g_up": None,
}
_BAND_COLUMNS = {
    "band_id": None,
    "species": None,
    "band": None,
    "wavelength": u.um,
    "g_1au": 1 / u.s,
    "extent_lo": u.um,
    "extent_hi": u.um,
}
_LINE_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.+-]*$")
#: Species names become file names (stack/<species>.fits) and a workflow wildcard: no path characters.
_SPECIES_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_+-]*$")


@dataclass(frozen=True)
class Species:
    """Properties of one molecule."""

    name: str
    mass: u.Quantity
    partition: str
    rot_a: u.Quantity
    rot_b: u.Quantity
    rot_c: u.Quantity
    multiplicity: float
    photo_quiet: u.Quantity
    photo_active: u.Quantity
    parent: str | None

    def photo_rate(self, solar_activity: str) -> u.Quantity:
        """Photodestruction rate at 1 au for ``'quiet'`` or ``'active'`` Sun."""
        if solar_activity == "quiet":
            return self.photo_quiet
        if solar_activity == "active":
            return self.photo_active
        msg = f"solar_activity must be 'quiet' or 'active', found {solar_activity!r}"
        raise CatalogueError(msg)

    def partition_function(self, t_kin: u.Quantity) -> np.ndarray:
        """Rotational partition function Q(T), with the catalogue's stated approximation.

        Notes
        -----
        ``linear``: Q = m (kT/(hB) + 1/3), the high-temperature expansion of
        the sum over (2J+1) exp(-hBJ(J+1)/kT) (e.g. Gordy & Cook, Microwave
        Molecular Spectra, 1984). ``asymmetric``: the classical rigid-rotor
        result Q = m sqrt(pi (kT/h)^3 / (ABC)) (same source); a symmetric top
        uses it with C = B. m is the catalogue's multiplicity (torsional species
        counted, symmetry number, fine-structure factor); the catalogue's
        ``partition_ref`` column states each species' choice and its accuracy.
        """
        temp = u.Quantity(t_kin, u.K).value
        if np.any(~np.isfinite(temp)) or np.any(temp <= 0):
            msg = f"t_kin must be positive and finite, found {t_kin!r}"
            raise CatalogueError(msg)
        kt_h = (const.k_B * temp * u.K / const.h).to_value(u.GHz)
        if self.partition == "linear":
            return self.multiplicity * (kt_h / self.rot_b.to_value(u.GHz) + 1.0 / 3.0)
        if self.partition == "asymmetric":
            abc = (self.rot_a * self.rot_b * self.rot_c).to_value(u.GHz**3)
            return self.multiplicity * np.sqrt(np.pi * kt_h**3 / abc)
        msg = (f"species {self.name!r}: column 'partition' must be 'linear' or "
               f"'asymmetric', found {self.partition!r}")
        raise CatalogueError(msg)


@dataclass(frozen=True)
class Line:
    """One rotational transition."""

    line_id: str
    species: str
    transition: str
    freq: u.Quantity
    a_ul: u.Quantity
    e_up: u.Quantity
    g_up: float


@dataclass(frozen=True)
class Band:
    """One infrared vibrational band excited by solar fluorescence."""

    band_id: str
    species: str
    band: str
    wavelength: u.Quantity
    g_1au: u.Quantity
    extent_lo: u.Quantity = None      # rest wavelengths between which the band's rotational lines lie
    extent_hi: u.Quantity = None

    def g_factor(self, r_h: u.Quantity) -> u.Quantity:
        """Fluorescence efficiency (photons per molecule per second) at ``r_h``.

        Notes
        -----
        Solar pumping of an optically thin coma scales with the solar flux,
        g(r_h) = g_1au (1 au / r_h)^2 (Crovisier & Encrenaz 1983, A&A 126, 170).
        """
        try:
            r_au = np.asarray(u.Quantity(r_h).to_value(u.au), dtype=float)
        except u.UnitConversionError:
            msg = f"r_h must be a distance (e.g. in au), found {r_h!r}"
            raise CatalogueError(msg) from None
        if np.any(~np.isfinite(r_au)) or np.any(r_au <= 0):
            msg = f"r_h must be positive and finite, found {r_h!r}"
            raise CatalogueError(msg)
        return self.g_1au * r_au**-2


@dataclass(frozen=True)
class Catalogue:
    """Species, lines and infrared bands, looked up by name."""

    species: dict[str, Species]
    lines: tuple[Line, ...]
    source: tuple[str, str]
    bands: tuple[Band, ...] = ()
    bands_source: str | None = None

    def get_species(self, name: str) -> Species:
        """The species called ``name``; a clear error when it is not in the catalogue."""
        try:
            return self.species[name]
        except KeyError:
            known = ", ".join(sorted(self.species))
            msg = (f"species {name!r} is not in the catalogue {self.source[0]}; "
                   f"expected one of: {known}")
            raise CatalogueError(msg) from None

    def lines_of(self, name: str) -> tuple[Line, ...]:
        """All lines of one species, ordered by frequency."""
        self.get_species(name)
        return tuple(sorted((ln for ln in self.lines if ln.species == name),
                            key=lambda ln: ln.freq.to_value(u.GHz)))

    def get_line(self, line_id: str) -> Line:
        """The line with identifier ``line_id``."""
        for ln in self.lines:
            if ln.line_id == line_id:
                return ln
        msg = f"line {line_id!r} is not in the catalogue {self.source[1]}"
        raise CatalogueError(msg)

    def bands_of(self, name: str) -> tuple[Band, ...]:
        """All infrared bands of one species, ordered by wavelength."""
        self.get_species(name)
        return tuple(sorted((b for b in self.bands if b.species == name),
                            key=lambda b: b.wavelength.to_value(u.um)))

    def get_band(self, band_id: str) -> Band:
        """The infrared band with identifier ``band_id``."""
        for band in self.bands:
            if band.band_id == band_id:
                return band
        where = self.bands_source if self.bands_source is not None else "(no bands file loaded)"
        known = ", ".join(b.band_id for b in self.bands) or "none"
        msg = f"band {band_id!r} is not in the catalogue {where}; expected one of: {known}"
        raise CatalogueError(msg)


def _read(path: Path, columns: dict, what: str) -> QTable:
    try:
        table = QTable.read(path, format="ascii.ecsv")
    except FileNotFoundError:
        msg = f"{what} file {str(path)!r} does not exist"
        raise CatalogueError(msg) from None
    except Exception as exc:  # astropy raises several types for malformed ECSV
        msg = f"{what} file {str(path)!r} is not a readable ECSV table: {exc}"
        raise CatalogueError(msg) from exc
    for name, unit in columns.items():
        if name not in table.colnames:
            msg = (f"{what} file {str(path)!r} has no column {name!r}; expected columns: "
                   f"{', '.join(columns)}")
            raise CatalogueError(msg)
        if unit is not None:
            col = table[name]
            if not isinstance(col, u.Quantity) or not col.unit.is_equivalent(unit):
                found = getattr(col, "unit", None)
                msg = (f"{what} file {str(path)!r}: column {name!r} has unit {found}, "
                       f"expected a unit convertible to {unit}")
                raise CatalogueError(msg)
    return table


def _read_bands(path: Path, species: dict[str, Species], species_file: Path) -> tuple[Band, ...]:
    table = _read(path, _BAND_COLUMNS, "band catalogue")
    bands = []
    seen = set()
    for row in table:
        band_id = str(row["band_id"])
        if not _LINE_ID.match(band_id) or band_id in seen:
            msg = (f"band catalogue {str(path)!r}: band_id {band_id!r} is duplicated or "
                   "not made of letters, digits and . _ + -")
            raise CatalogueError(msg)
        seen.add(band_id)
        name = str(row["species"])
        if name not in species:
            msg = (f"band catalogue {str(path)!r}: band {band_id!r} belongs to species {name!r}, "
                   f"which {str(species_file)!r} does not define (give bands_file=None or a band "
                   "table of its species)")
            raise CatalogueError(msg)
        wavelength = u.Quantity(row["wavelength"], u.um)
        g_1au = u.Quantity(row["g_1au"], 1 / u.s)
        lo, hi = u.Quantity(row["extent_lo"], u.um), u.Quantity(row["extent_hi"], u.um)
        for col, value in (("wavelength", wavelength), ("g_1au", g_1au), ("extent_lo", lo), ("extent_hi", hi)):
            if not (np.isfinite(value.value) and value.value > 0):
                msg = (f"band catalogue {str(path)!r}: band {band_id!r} has {col} {value}, "
                       "expected a positive finite value")
                raise CatalogueError(msg)
        if not lo < wavelength < hi:
            msg = (f"band catalogue {str(path)!r}: band {band_id!r} has extent_lo {lo} and extent_hi {hi} around "
                   f"its wavelength {wavelength}; expected extent_lo < wavelength < extent_hi")
            raise CatalogueError(msg)
        bands.append(Band(band_id=band_id, species=name, band=str(row["band"]),
                          wavelength=wavelength, g_1au=g_1au, extent_lo=lo, extent_hi=hi))
    return tuple(bands)


def load_catalogue(species_file: str | Path = DEFAULT_SPECIES_FILE,
                   lines_file: str | Path = DEFAULT_LINES_FILE,
                   bands_file: str | Path | None = DEFAULT_BANDS_FILE) -> Catalogue:
    """Read and check a catalogue (species, line and band tables, ECSV).

    ``bands_file=None`` reads no infrared bands.

    Raises
    ------
    CatalogueError
        When a file is missing, lacks a column, has a wrong unit, a duplicated
        name, a line or band of a species it does not define, or a band with a
        non-positive wavelength or fluorescence efficiency.
    """
    species_file, lines_file = Path(species_file), Path(lines_file)
    st = _read(species_file, _SPECIES_COLUMNS, "species catalogue")
    lt = _read(lines_file, _LINE_COLUMNS, "line catalogue")
    species: dict[str, Species] = {}
    for row in st:
        name = str(row["species"])
        if name in species:
            msg = f"species catalogue {str(species_file)!r} lists {name!r} twice"
            raise CatalogueError(msg)
        if not _SPECIES_NAME.match(name):
            msg = (f"species catalogue {str(species_file)!r}: species name {name!r} is not usable in file names; "
                   "expected letters, digits and _ + - only, starting with a letter or digit")
            raise CatalogueError(msg)
        parent = str(row["parent"])
        species[name] = Species(
            name=name, mass=u.Quantity(row["mass"], u.u), partition=str(row["partition"]),
            rot_a=u.Quantity(row["rot_a"], u.GHz), rot_b=u.Quantity(row["rot_b"], u.GHz),
            rot_c=u.Quantity(row["rot_c"], u.GHz), multiplicity=float(row["multiplicity"]),
            photo_quiet=u.Quantity(row["photo_quiet"], 1 / u.s),
            photo_active=u.Quantity(row["photo_active"], 1 / u.s),
            parent=None if parent in ("-", "", "None") else parent,
        )
    lines = []
    seen = set()
    for row in lt:
        line_id = str(row["line_id"])
        if not _LINE_ID.match(line_id) or line_id in seen:
            msg = (f"line catalogue {str(lines_file)!r}: line_id {line_id!r} is duplicated or "
                   "not made of letters, digits and . _ + -")
            raise CatalogueError(msg)
        seen.add(line_id)
        if str(row["species"]) not in species:
            msg = (f"line catalogue {str(lines_file)!r}: line {line_id!r} belongs to species "
                   f"{str(row['species'])!r}, which {str(species_file)!r} does not define")
            raise CatalogueError(msg)
        lines.append(Line(line_id=line_id, species=str(row["species"]),
                          transition=str(row["transition"]),
                          freq=u.Quantity(row["freq"], u.GHz), a_ul=u.Quantity(row["a_ul"], 1 / u.s),
                          e_up=u.Quantity(row["e_up"], u.K), g_up=float(row["g_up"])))
    bands: tuple[Band, ...] = ()
    if bands_file is not None:
        bands = _read_bands(Path(bands_file), species, species_file)
    return Catalogue(species=species, lines=tuple(lines), source=(str(species_file), str(lines_file)),
                     bands=bands, bands_source=None if bands_file is None else str(bands_file))

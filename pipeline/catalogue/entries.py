"""The molecular catalogue: species properties, millimetre lines and infrared bands.

The built-in catalogue lives in ``pipeline/catalogue/data/species.ecsv``,
``lines.ecsv``, ``bands.ecsv`` and ``partition.ecsv``; every value has a
provenance column beside it. A user catalogue with the same columns can be
given instead.

Upper-level degeneracies and partition functions follow one convention, that of
the CDMS and JPL catalogues: a single entry per molecule, with the
nuclear-spin statistical weights included both in g_u and in Q(T) (ortho 3,
para 1 for H2CO and H2S; the K = 3n ladders of CH3CN weigh twice the others;
g_I = 4 for CH3OH as in CDMS 032504; the 14N factor 3 of CDMS 027501 for HCN),
so that the population fraction g_u exp(-E_u/kT)/Q(T) is that of the catalogue
entry the line was taken from.
"""

from __future__ import annotations

import re
import difflib
from dataclasses import dataclass
from functools import cached_property
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
    "DEFAULT_PARTITION_FILE",
    "EXTRAPOLATION_FACTOR",
    "PartitionTable",
]

_DATA = Path(__file__).parent / "data"
DEFAULT_SPECIES_FILE = _DATA / "species.ecsv"
DEFAULT_LINES_FILE = _DATA / "lines.ecsv"
DEFAULT_BANDS_FILE = _DATA / "bands.ecsv"
DEFAULT_PARTITION_FILE = _DATA / "partition.ecsv"
#: How far beyond its first or last tabulated temperature a partition-function table is extrapolated (a factor).
EXTRAPOLATION_FACTOR = 2.0

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
_PARTITION_COLUMNS = {
    "species": None,
    "temperature": u.K,
    "log10_q": None,
    "ref": None,
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
class PartitionTable:
    """A catalogue's tabulated partition function of one species: log10 Q at ascending temperatures."""

    temperature: tuple[float, ...]
    log10_q: tuple[float, ...]
    source: str

    def evaluate(self, name: str, temp: np.ndarray) -> np.ndarray:
        """Q at ``temp`` (kelvin, positive): log Q interpolated linearly in log T.

        Notes
        -----
        Between tabulated temperatures Q is taken as a power law of T, i.e.
        log10 Q linear in log10 T (the tables step by factors of about 2, over
        which Q of a rotor is close to a power law, Q ~ T^1 for a linear and
        T^1.5 for a non-linear molecule; e.g. Gordy & Cook, Microwave Molecular
        Spectra, 1984). Within a factor :data:`EXTRAPOLATION_FACTOR` below the
        first or above the last tabulated temperature, the power law of the end
        interval is extended; further out the temperature is refused.
        """
        log_t = np.log10(np.asarray(self.temperature, dtype=float))
        log_q = np.asarray(self.log10_q, dtype=float)
        t_lo, t_hi = self.temperature[0], self.temperature[-1]
        outside = (temp < t_lo / EXTRAPOLATION_FACTOR) | (temp > t_hi * EXTRAPOLATION_FACTOR)
        if np.any(outside):
            bad = np.asarray(temp)[outside].ravel()[0]
            msg = (f"species {name!r}: t_kin = {bad:g} K lies outside its partition-function table "
                   f"({self.source}, {t_lo:g} to {t_hi:g} K) by more than a factor {EXTRAPOLATION_FACTOR:g}; "
                   "expected a temperature within that range")
            raise CatalogueError(msg)
        x = np.log10(temp)
        out = np.interp(x, log_t, log_q)
        slope_lo = (log_q[1] - log_q[0]) / (log_t[1] - log_t[0])
        slope_hi = (log_q[-1] - log_q[-2]) / (log_t[-1] - log_t[-2])
        out = np.where(x < log_t[0], log_q[0] + slope_lo * (x - log_t[0]), out)
        out = np.where(x > log_t[-1], log_q[-1] + slope_hi * (x - log_t[-1]), out)
        return 10.0**out


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
    partition_table: PartitionTable | None = None
    distributed_scale: u.Quantity | None = None   # scale length at 1 au of a distributed source (∝ r_h^2), if any

    def photo_rate(self, solar_activity: str) -> u.Quantity:
        """Photodestruction rate at 1 au for ``'quiet'`` or ``'active'`` Sun."""
        if solar_activity == "quiet":
            return self.photo_quiet
        if solar_activity == "active":
            return self.photo_active
        msg = f"solar_activity must be 'quiet' or 'active', found {solar_activity!r}"
        raise CatalogueError(msg)

    def partition_function(self, t_kin: u.Quantity) -> np.ndarray:
        """Partition function Q(T), in the convention of the catalogue's line degeneracies.

        Notes
        -----
        ``table``: the catalogue entry's own level sum, tabulated over
        temperature in ``partition.ecsv`` (CDMS or JPL, nuclear-spin weights
        included as in g_u), interpolated in log Q against log T
        (:meth:`PartitionTable.evaluate`). ``linear``: Q = m (kT/(hB) + 1/3),
        the high-temperature expansion of the sum over (2J+1) exp(-hBJ(J+1)/kT)
        (e.g. Gordy & Cook, Microwave Molecular Spectra, 1984), for linear
        rotors; m is the catalogue's multiplicity (a nuclear-spin factor common
        to every level, e.g. 3 for the 14N of HCN in CDMS 027501, or 1/2 for
        the symmetric CO2 and CS2 whose odd J do not exist). ``asymmetric``:
        the classical rigid-rotor result Q = m sqrt(pi (kT/h)^3 / (ABC)) (same
        source), kept for user catalogues. The ``partition_ref`` column states
        each species' choice and its accuracy.
        """
        temp = u.Quantity(t_kin, u.K).value
        if np.any(~np.isfinite(temp)) or np.any(temp <= 0):
            msg = f"t_kin must be positive and finite, found {t_kin!r}"
            raise CatalogueError(msg)
        if self.partition == "table":
            if self.partition_table is None:
                msg = (f"species {self.name!r}: column 'partition' is 'table' but no tabulated partition "
                       "function was loaded for it (give load_catalogue a partition_file with its rows)")
                raise CatalogueError(msg)
            return self.partition_table.evaluate(self.name, temp)
        kt_h = (const.k_B * temp * u.K / const.h).to_value(u.GHz)
        if self.partition == "linear":
            return self.multiplicity * (kt_h / self.rot_b.to_value(u.GHz) + 1.0 / 3.0)
        if self.partition == "asymmetric":
            abc = (self.rot_a * self.rot_b * self.rot_c).to_value(u.GHz**3)
            return self.multiplicity * np.sqrt(np.pi * kt_h**3 / abc)
        msg = (f"species {self.name!r}: column 'partition' must be 'table', 'linear' or "
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
            # a case slip ('hcn') or a digit zero for the letter O ('C0') first, then the closest spelling
            same = [s for s in self.species if s.lower() in (str(name).lower(), str(name).lower().replace("0", "o"))]
            close = same or difflib.get_close_matches(str(name).upper(), list(self.species), n=3, cutoff=0.6)
            hint = f" (did you mean {' or '.join(repr(c) for c in close)}?)" if close else ""
            msg = (f"species {name!r} is not in the catalogue {self.source[0]}{hint}; "
                   f"expected one of: {known}")
            raise CatalogueError(msg) from None

    @cached_property
    def line_frequencies_ghz(self) -> np.ndarray:
        """The rest frequencies of :attr:`lines` [GHz], in their order (computed once; read-only)."""
        freqs = np.array([ln.freq.to_value(u.GHz) for ln in self.lines], dtype=float)
        freqs.flags.writeable = False
        return freqs

    @cached_property
    def _lines_by_species(self) -> dict[str, tuple[Line, ...]]:
        """Each species' lines ordered by frequency (ties in catalogue order), computed once."""
        by_species: dict[str, list[Line]] = {}
        for k in np.argsort(self.line_frequencies_ghz, kind="stable"):
            by_species.setdefault(self.lines[k].species, []).append(self.lines[k])
        return {name: tuple(lines) for name, lines in by_species.items()}

    def lines_of(self, name: str) -> tuple[Line, ...]:
        """All lines of one species, ordered by frequency."""
        self.get_species(name)
        return self._lines_by_species.get(name, ())

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


def _read_partition(path: Path, species_file: Path, wanted: set[str]) -> dict[str, PartitionTable]:
    table = _read(path, _PARTITION_COLUMNS, "partition-function")
    rows: dict[str, list[tuple[float, float, str]]] = {}
    for row in table:
        name = str(row["species"])
        if name not in wanted:
            continue  # rows of species this species file does not tabulate (a user catalogue may drop some)
        temp = float(u.Quantity(row["temperature"], u.K).value)
        log_q = float(row["log10_q"])
        if not (np.isfinite(temp) and temp > 0 and np.isfinite(log_q)):
            msg = (f"partition-function file {str(path)!r}: species {name!r} has temperature {temp:g} K and "
                   f"log10_q {log_q:g}; expected a positive finite temperature and a finite log10_q")
            raise CatalogueError(msg)
        rows.setdefault(name, []).append((temp, log_q, str(row["ref"])))
    out = {}
    for name in sorted(wanted):
        got = sorted(rows.get(name, []))
        temps = [t for t, _, _ in got]
        if len(got) < 2 or len(set(temps)) != len(temps):
            msg = (f"species catalogue {str(species_file)!r}: species {name!r} has partition 'table', but "
                   f"{str(path)!r} holds {len(got)} rows for it{' with a repeated temperature' if got else ''}; "
                   "expected at least two rows at distinct temperatures")
            raise CatalogueError(msg)
        sources = sorted({ref for _, _, ref in got})
        out[name] = PartitionTable(temperature=tuple(temps), log10_q=tuple(q for _, q, _ in got),
                                   source="; ".join(sources))
    return out


def _distributed_scale(row, source: Path) -> u.Quantity | None:
    """The optional column ``distributed_scale_km`` (km at 1 au; NaN, masked or absent: no distributed source).

    Raises
    ------
    CatalogueError
        For a value that is not a positive length.
    """
    if "distributed_scale_km" not in row.colnames or np.ma.is_masked(row["distributed_scale_km"]):
        return None
    value = u.Quantity(row["distributed_scale_km"], u.km)
    if not np.isfinite(value.value):
        return None
    if value.value <= 0:
        msg = (f"species catalogue {str(source)!r}: species {str(row['species'])!r} has distributed_scale_km = "
               f"{value.value:g}; expected a positive scale length at 1 au, or nan for no distributed source")
        raise CatalogueError(msg)
    return value


def load_catalogue(species_file: str | Path = DEFAULT_SPECIES_FILE,
                   lines_file: str | Path = DEFAULT_LINES_FILE,
                   bands_file: str | Path | None = DEFAULT_BANDS_FILE,
                   partition_file: str | Path | None = DEFAULT_PARTITION_FILE) -> Catalogue:
    """Read and check a catalogue (species, line, band and partition-function tables, ECSV).

    ``bands_file=None`` reads no infrared bands. ``partition_file`` holds the
    tabulated partition functions of the species whose ``partition`` is
    ``'table'`` (rows of other species are ignored); ``None`` reads none, and
    then no species may be ``'table'``.

    Raises
    ------
    CatalogueError
        When a file is missing, lacks a column, has a wrong unit, a duplicated
        name, a line or band of a species it does not define, a band with a
        non-positive wavelength or fluorescence efficiency, or a species with
        partition 'table' without at least two tabulated temperatures.
    """
    species_file, lines_file = Path(species_file), Path(lines_file)
    st = _read(species_file, _SPECIES_COLUMNS, "species catalogue")
    lt = _read(lines_file, _LINE_COLUMNS, "line catalogue")
    tabulated = {str(row["species"]) for row in st if str(row["partition"]) == "table"}
    tables: dict[str, PartitionTable] = {}
    if tabulated and partition_file is None:
        msg = (f"species catalogue {str(species_file)!r}: species {', '.join(sorted(tabulated))} have partition "
               "'table', but no partition_file was given")
        raise CatalogueError(msg)
    if tabulated:
        tables = _read_partition(Path(partition_file), species_file, tabulated)
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
            partition_table=tables.get(name),
            distributed_scale=_distributed_scale(row, species_file),
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

"""Readers of the CDMS and JPL catalogue files that astroquery ships inside its package.

astroquery (a test dependency, pyproject's ``test`` extra) carries copies of

- the CDMS partition-function table, ``astroquery/linelists/cdms/data/partfunc.cat``
  (log10 Q at 1000, 500, 300, 225, 150, 75, 37.5, 18.75, 9.375, 5 and 2.725 K per entry tag);
- the JPL catalogue directory, ``astroquery/jplspec/data/catdir.cat`` (log10 Q at 300, 225,
  150, 75, 37.5, 18.75 and 9.375 K per tag; format (I6,X,A13,I6,7F7.4,I2) of the JPL catalogue
  documentation);
- catalogue line files for its own tests: ``linelists/cdms/tests/data/028503 CO, v=0.data`` (the
  CDMS search form's output for CO v=0, whose third column is log10 of the Einstein A in s^-1),
  ``jplspec/tests/data/CO.data`` (JPL 028001 CO in the catalogue's .cat format, third column the
  log10 300 K intensity in nm^2 MHz) and ``jplspec/tests/data/multi.data`` (JPL 018003 H2O and
  isotopologues, .cat format).

The files are read by path; astroquery itself is not imported (no network, no configuration).
"""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np
from astropy.io import ascii

__all__ = ["astroquery_file", "cdms_log_q", "jpl_log_q", "read_cat", "read_cdms_form", "einstein_a_from_intensity",
           "CAT_TEMPERATURES"]

#: the temperatures (K) of the CDMS partition-function table, in its column order
CAT_TEMPERATURES = (1000.0, 500.0, 300.0, 225.0, 150.0, 75.0, 37.5, 18.75, 9.375, 5.0, 2.725)
_JPL_TEMPERATURES = (300.0, 225.0, 150.0, 75.0, 37.5, 18.75, 9.375)


def astroquery_file(relative: str) -> Path:
    """The path of a file inside the installed astroquery package (which must be installed: test extra)."""
    spec = importlib.util.find_spec("astroquery")
    if spec is None or spec.origin is None:
        msg = "astroquery is not installed; it is a test dependency (pip install -e '.[test]')"
        raise RuntimeError(msg)
    path = Path(spec.origin).parent / relative
    if not path.is_file():
        msg = f"astroquery's packaged file {relative!r} is missing at {path}"
        raise RuntimeError(msg)
    return path


def cdms_log_q(tag: int) -> dict[float, float]:
    """{T: log10 Q} of CDMS entry ``tag`` from astroquery/linelists/cdms/data/partfunc.cat (NaN left out)."""
    table = ascii.read(astroquery_file("linelists/cdms/data/partfunc.cat"), format="fixed_width", delimiter="|")
    rows = table[table["tag"] == tag]
    if len(rows) != 1:
        msg = f"CDMS tag {tag} found {len(rows)} times in partfunc.cat"
        raise LookupError(msg)
    columns = [c for c in table.colnames if c.startswith("lg(Q(")]
    temps = [float(c[len("lg(Q("):-2]) for c in columns]
    assert tuple(temps) == CAT_TEMPERATURES
    return {t: float(rows[0][c]) for t, c in zip(temps, columns) if np.isfinite(rows[0][c])}


def jpl_log_q(tag: int) -> dict[float, float]:
    """{T: log10 Q} of JPL entry ``tag`` from astroquery/jplspec/data/catdir.cat."""
    for line in astroquery_file("jplspec/data/catdir.cat").read_text().splitlines():
        if line[:6].strip() and int(line[:6]) == tag:
            values = [float(line[26 + 7 * i:33 + 7 * i]) for i in range(7)]
            return dict(zip(_JPL_TEMPERATURES, values))
    msg = f"JPL tag {tag} not in catdir.cat"
    raise LookupError(msg)


def read_cat(relative: str) -> list[dict]:
    """Lines of a catalogue file in the CDMS/JPL .cat format (FREQ, ERR, LGINT, DR, ELO, GUP, TAG, QNFMT, QN).

    Format (F13.4,F8.4,F8.4,I2,F10.4,I3,I7,I4,6I2,6I2) of the JPL catalogue documentation
    (Pickett et al. 1998, JQSRT 60, 883); header lines are skipped.
    """
    out = []
    for line in astroquery_file(relative).read_text().splitlines():
        try:
            row = {"freq": float(line[0:13]), "lgint": float(line[21:29]), "elo": float(line[31:41]),
                   "gup": int(line[41:44]), "tag": abs(int(line[44:51])), "qn": line[55:79]}
        except ValueError:
            continue
        out.append(row)
    return out


def read_cdms_form(relative: str) -> list[dict]:
    """Lines of the CDMS search form's output (whitespace-separated: FREQ, ERR, log10 A, DR, ELO, GUP, TAG, ...)."""
    out = []
    for line in astroquery_file(relative).read_text().splitlines():
        parts = line.split()
        try:
            row = {"freq": float(parts[0]), "log_a": float(parts[2]), "elo": float(parts[4]),
                   "gup": int(parts[5]), "tag": abs(int(parts[6]))}
        except (ValueError, IndexError):
            continue
        out.append(row)
    return out


def einstein_a_from_intensity(freq_mhz: float, lgint: float, elo_cm: float, gup: int, q300: float) -> float:
    """A_ul from a catalogue's 300 K intensity (CDMS documentation, 'useful equations').

    A = 2.7964e-16 I nu^2 Q(300) / (g_u (exp(-E_l/kT) - exp(-E_u/kT))), nu in MHz, I in nm^2 MHz,
    E in cm^-1 with hc/k = 1.4387769 cm K (CODATA second radiation constant).
    """
    c2, t = 1.4387769, 300.0
    e_up = elo_cm + freq_mhz / 29979.2458
    return (2.7964e-16 * 10**lgint * freq_mhz**2 * q300
            / (gup * (math.exp(-elo_cm * c2 / t) - math.exp(-e_up * c2 / t))))

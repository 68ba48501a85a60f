"""When a cube was observed: the exposure's start, mid and end time (UTC) from the cards real products carry.

Facility pipelines write the time of an exposure in several ways (FITS time
paper: Rots et al. 2015, A&A 574, A36): begin/end pairs (DATE-BEG/DATE-END,
MJD-BEG/MJD-END, EXPSTART/EXPEND as MJD), an explicit mid (DATE-AVG, MJD-AVG,
EXPMID), a start (DATE-OBS, with TIME-OBS when DATE-OBS holds only the date,
or MJD-OBS) with an end (DATE-END) or an elapsed time (TELAPSE, or EXPTIME for
a single exposure), all in the time scale TIMESYS (UTC when absent). On-source
or summed exposure (XPOSURE, EXPOSURE) is not wall-clock time and never places
the mid-time. A header that gives only a start is refused: the mid-time is
never guessed.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
from astropy.io import fits
from astropy.time import Time

from pipeline.errors import CubeError

__all__ = ["ObservationTimes", "observation_times", "TIME_SCALES"]

#: TIMESYS values understood (FITS time paper, Table 2), as astropy time scales.
TIME_SCALES = {"UTC": "utc", "TT": "tt", "TDT": "tt", "ET": "tt", "TAI": "tai", "IAT": "tai", "TDB": "tdb",
               "GPS": "gps"}


@dataclass(frozen=True)
class ObservationTimes:
    """Start, mid and end of an exposure (UTC), and the header cards (or config keys) they came from."""

    start: Time
    mid: Time
    end: Time
    source: str

    def __iter__(self):
        """Unpacks as (start, mid, end)."""
        return iter((self.start, self.mid, self.end))


def _scale(h: fits.Header, path) -> str:
    value = str(h.get("TIMESYS", "UTC")).strip().upper()
    if value not in TIME_SCALES:
        msg = (f"{path}: header card TIMESYS = {h['TIMESYS']!r} is not a time scale gasledger reads; expected one "
               f"of {', '.join(sorted(TIME_SCALES))}")
        raise CubeError(msg)
    return TIME_SCALES[value]


def _iso(h: fits.Header, card: str, path, scale: str) -> Time:
    value = str(h[card]).strip()
    try:
        return Time(value, format="isot" if "T" in value else "iso", scale=scale).utc
    except ValueError as exc:
        msg = f"{path}: header card {card} = {h[card]!r} is not an ISO time; expected e.g. '2030-06-01T02:00:00'"
        raise CubeError(msg) from exc


def _mjd(h: fits.Header, card: str, path, scale: str) -> Time:
    try:
        return Time(float(h[card]), format="mjd", scale=scale).utc
    except (TypeError, ValueError) as exc:
        msg = f"{path}: header card {card} = {h[card]!r} is not a number; expected a Modified Julian Date"
        raise CubeError(msg) from exc


def _seconds(h: fits.Header, card: str, path) -> u.Quantity:
    try:
        value = float(h[card])
    except (TypeError, ValueError) as exc:
        msg = f"{path}: header card {card} = {h[card]!r} is not a number; expected a duration in seconds"
        raise CubeError(msg) from exc
    if not value > 0:
        msg = f"{path}: header card {card} = {h[card]!r}; expected a positive duration in seconds"
        raise CubeError(msg)
    return value * u.s


def _date_obs(h: fits.Header, path, scale: str) -> tuple[Time, str]:
    """DATE-OBS, completed by TIME-OBS when it holds only a date."""
    value = str(h["DATE-OBS"]).strip()
    if "T" in value or " " in value:
        return _iso(h, "DATE-OBS", path, scale), "DATE-OBS"
    if "TIME-OBS" not in h:
        msg = (f"{path}: header card DATE-OBS = {h['DATE-OBS']!r} holds a date without a time of day and there is "
               "no TIME-OBS card; expected DATE-OBS with a time, or TIME-OBS (or set the cube's 'time' key in the "
               "config)")
        raise CubeError(msg)
    joined = fits.Header()
    joined["DATE-OBS"] = f"{value}T{str(h['TIME-OBS']).strip()}"
    return _iso(joined, "DATE-OBS", path, scale), "DATE-OBS + TIME-OBS"


def observation_times(header: fits.Header, path: str | Path, override: str | None = None,
                      duration: u.Quantity | None = None) -> ObservationTimes:
    """The exposure's start, mid and end time (UTC) and where they came from.

    Parameters
    ----------
    header : fits.Header
        The cube's header (the primary header's cards inherited, as :func:`pipeline.io.cubes.read_cube_info`
        gives it).
    path : str or Path
        The cube, named in messages.
    override : str, optional
        The config's per-cube ``time``: the mid-time (ISO, UTC), taken as instantaneous.
    duration : Quantity [time], optional
        The config's per-cube ``duration_s`` (as a Quantity): the wall-clock length of the exposure, for a header that gives only
        its start.

    Notes
    -----
    Order of precedence: the config's ``time``; an explicit mid (DATE-AVG, MJD-AVG, EXPMID) with a begin/end
    pair when there is one; a begin/end pair (DATE-BEG/DATE-END, MJD-BEG/MJD-END, EXPSTART/EXPEND,
    DATE-OBS/DATE-END, MJD-OBS/DATE-END); a start (DATE-BEG, DATE-OBS [+ TIME-OBS], MJD-BEG, MJD-OBS,
    EXPSTART) plus TELAPSE, EXPTIME (a single exposure's length) or the config's ``duration_s``. Times are
    read in TIMESYS and returned in UTC (astropy's time-scale conversions).

    Raises
    ------
    CubeError
        When the header gives no start, only a start, an unreadable card, or an end before the start; the
        sentence names the file, the card and the config key that fixes it.
    """
    h = header
    if override is not None:
        try:
            t = Time(override, scale="utc")
        except ValueError as exc:
            msg = f"{path}: config 'time' = {override!r} is not a valid ISO time; expected e.g. '2030-06-01T02:30:00'"
            raise CubeError(msg) from exc
        return ObservationTimes(t, t, t, "config 'time'")
    scale = _scale(h, path)

    start = start_card = None
    for card, reader in (("DATE-BEG", _iso), ("MJD-BEG", _mjd), ("EXPSTART", _mjd)):
        if card in h:
            start, start_card = reader(h, card, path, scale), card
            break
    if start is None and "DATE-OBS" in h:
        start, start_card = _date_obs(h, path, scale)
    if start is None and "MJD-OBS" in h:
        start, start_card = _mjd(h, "MJD-OBS", path, scale), "MJD-OBS"

    end = end_card = None
    for card, reader in (("DATE-END", _iso), ("MJD-END", _mjd), ("EXPEND", _mjd)):
        if card in h:
            end, end_card = reader(h, card, path, scale), card
            break

    mid = mid_card = None
    for card, reader in (("DATE-AVG", _iso), ("MJD-AVG", _mjd), ("EXPMID", _mjd)):
        if card in h:
            mid, mid_card = reader(h, card, path, scale), card
            break

    if start is None and mid is None:
        msg = (f"{path}: no observation time in the header (none of DATE-BEG, DATE-OBS, MJD-BEG, MJD-OBS, "
               "EXPSTART, DATE-AVG, MJD-AVG, EXPMID); expected one, or the cube's 'time' key in the config")
        raise CubeError(msg)
    if start is not None and end is None:
        for card in ("TELAPSE", "EXPTIME"):
            if card in h:
                end, end_card = start + _seconds(h, card, path), f"+ {card}"
                break
        else:
            if duration is not None:
                end, end_card = start + u.Quantity(duration, u.s), "+ config 'duration_s'"
    if end is not None and start is not None and end < start:
        msg = (f"{path}: header card {end_card.lstrip('+ ')} ({end.isot}) precedes {start_card} ({start.isot}); "
               "expected the end of the exposure after its start")
        raise CubeError(msg)
    if mid is not None:
        first, last = (start, end) if start is not None and end is not None else (mid, mid)
        return ObservationTimes(first, mid, last, mid_card + (f" (span {start_card} to {end_card})"
                                                               if start is not None and end is not None else ""))
    if end is None:
        exposure = [c for c in ("XPOSURE", "EXPOSURE") if c in h]
        found = f"only {start_card}" + (f" and {', '.join(exposure)} (on-source time, not wall-clock)"
                                         if exposure else "")
        msg = (f"{path}: the header gives {found}, not the exposure's end or middle; expected DATE-END (or "
               "DATE-BEG/DATE-END, MJD-END, EXPEND, TELAPSE), or set the cube's 'time' (mid-time) or 'duration_s' "
               "key in the config")
        raise CubeError(msg)
    source = f"{start_card} {end_card}" if end_card.startswith("+") else f"{start_card}/{end_card}"
    return ObservationTimes(start, start + (end - start) / 2, end, source)

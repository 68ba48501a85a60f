"""Offline configuration of astropy.

gasledger runs on machines with no network.  astropy would otherwise try to
download Earth-orientation (IERS) tables and, for dates past its bundled table
(the demo's future epochs), raise.  :func:`configure_astropy_offline` switches
downloads off and degrades to the bundled predictions with a warning;
:func:`future_time_tolerated` silences the resulting per-call warnings and logs
the reduced accuracy once instead.

Notes
-----
Past the bundled IERS table, UT1-UTC and polar motion fall back to their last
values or 50-year means.  That moves topocentric positions at the arcsecond
level at most and the diurnal velocity by far less than 1 m/s, well below a
channel of any spectrometer this tool serves.
"""

import contextlib
import logging
import warnings

__all__ = ["configure_astropy_offline", "future_time_tolerated"]

log = logging.getLogger(__name__)
_logged = False


def configure_astropy_offline() -> None:
    """Tell astropy never to download IERS tables and to warn instead of raise."""
    from astropy.utils import iers

    iers.conf.auto_download = False
    iers.conf.iers_degraded_accuracy = "warn"
    iers.conf.auto_max_age = None


@contextlib.contextmanager
def future_time_tolerated():
    """Silence astropy/ERFA warnings about dates beyond the bundled tables.

    The reduced accuracy is logged once per process instead of warned per call.
    """
    global _logged
    from astropy.utils.exceptions import AstropyWarning
    from erfa import ErfaWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ErfaWarning)
        warnings.simplefilter("always", AstropyWarning)
        astropy_logger = logging.getLogger("astropy")
        previous = astropy_logger.level
        astropy_logger.setLevel(logging.ERROR)
        try:
            yield
        finally:
            astropy_logger.setLevel(previous)
    others = []
    for w in caught:
        text = str(w.message)
        if issubclass(w.category, ErfaWarning) and "dubious year" in text:
            continue
        if issubclass(w.category, AstropyWarning) and ("IERS" in text or "polar motion" in text):
            continue
        others.append(w)
    if len(caught) > len(others) and not _logged:
        log.info(
            "dates lie beyond astropy's bundled leap-second/IERS tables: UT1 and polar "
            "motion use predictions or means (arcsecond-level, <1 m/s in velocity)"
        )
        _logged = True
    for w in others:
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)

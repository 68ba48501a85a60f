"""The water production rate that excites the millimetre lines under non-LTE, and where it comes from.

Collisions with water (and the electrons its ionisation feeds) set the rotational populations
(:mod:`pipeline.coma.nonlte`), so the non-LTE model and the comparison beside the LTE sweep need Q(H2O) at each
epoch. With ``excitation.q_h2o_from: measured`` (the default) an epoch whose cubes cover a water band takes the
campaign's own measurement there: the inverse-variance mean of the epoch's H2O band measurements in the aperture
where it is best measured, if its S/N reaches ``excitation.q_h2o_min_snr`` (3 by default; a key apart from
``limits.nsigma``, so that changing the limits' significance does not redo every epoch's stack inputs). Bands are
used because their Q does not depend on the swept kinetic temperature (fluorescence); a millimetre water line's
would. An epoch without a water
band, or whose water is not detected, takes ``excitation.q_h2o_per_s``; without that, it has no non-LTE model (the
comparison is left out; model nonlte already requires the key). ``q_h2o_from: config`` always takes the key.

The choice is recorded beside every input (``q_h2o_excitation``, ``q_h2o_from``) and shown in the report.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import astropy.units as u
import numpy as np

from pipeline.coma.departure import NonLteSettings
from pipeline.rates.statistics import inverse_variance_mean

if TYPE_CHECKING:
    from pipeline.coma.response import ComaModel
    from pipeline.settings import Settings

__all__ = ["ExcitationWater", "measured_water", "excitation_water", "epoch_water", "with_water", "model_with_water",
           "WATER"]

#: The species whose measurement gives the collisions' water production rate.
WATER = "H2O"
#: The S/N a water measurement needs to set the excitation (``excitation.q_h2o_min_snr``'s default).
DEFAULT_MIN_SNR = 3.0


@dataclass(frozen=True)
class ExcitationWater:
    """Q(H2O) for the non-LTE excitation of one epoch, and where it comes from.

    ``origin`` is 'measured' or 'config' (or, for the report's figure, 'epochs': a value summarising several);
    ``source`` says it in words (the measurement, or the config key and why).
    """

    q_h2o: u.Quantity
    origin: str
    source: str

    @property
    def q_h2o_per_s(self) -> float:
        return float(self.q_h2o.to_value(1 / u.s))


def measured_water(rows, epoch: str, nsigma: float) -> tuple[u.Quantity, u.Quantity, str] | None:
    """The epoch's measured Q(H2O) from the H2O stack inputs' rows (:func:`pipeline.workflow.stack.run_epoch`'s
    INPUTS table): its bands at one temperature (their Q is the same at every one), combined by inverse variance
    per aperture; the aperture with the highest S/N. Returns (Q, sigma_Q, a description), or None without a
    water band at the epoch.

    Raises nothing for a non-detection: the caller compares Q / sigma_Q with its threshold (``nsigma`` is only
    used in the description).
    """
    if rows is None or not len(rows) or "kind" not in rows.colnames:
        return None
    band = (np.asarray(rows["kind"], dtype=str) == "band") & (np.asarray(rows["epoch"], dtype=str) == epoch)
    if not np.any(band):
        return None
    sel = rows[band]
    t_kin = np.asarray(sel["t_kin"], dtype=float)
    sel = sel[t_kin == np.min(t_kin)]
    best = None
    for label in dict.fromkeys(str(a) for a in sel["aperture"]):
        pick = sel[np.asarray(sel["aperture"], dtype=str) == label]
        q, s = inverse_variance_mean(np.asarray(pick["q"], dtype=float), np.asarray(pick["sigma_q"], dtype=float))
        snr = q / s if s > 0 else -np.inf
        if best is None or snr > best[3]:
            bands = ", ".join(dict.fromkeys(f"{c}:{b}" for c, b in zip(pick["cube_id"], pick["line_id"])))
            best = (float(q), float(s), label, float(snr), bands)
    q, s, label, snr, bands = best
    text = (f"H2O measured at {epoch}: Q = {q:.3g} +/- {s:.2g} /s, S/N {snr:.1f} (threshold {nsigma:g}), "
            f"{label} aperture, bands {bands}")
    return q / u.s, s / u.s, text


def excitation_water(epoch: str, water_rows, q_from: str, configured: float | None,
                     nsigma: float) -> ExcitationWater | None:
    """Q(H2O) for the non-LTE excitation at ``epoch``.

    Parameters
    ----------
    epoch : str
    water_rows : Table or None
        The H2O stack inputs' rows of the epoch (None when the campaign has no water band there, or for the water
        itself).
    q_from : {'measured', 'config'}
        ``excitation.q_h2o_from``.
    configured : float or None
        ``excitation.q_h2o_per_s`` [1/s], if given.
    nsigma : float
        ``excitation.q_h2o_min_snr``: the measurement is used if Q / sigma_Q reaches it.

    Returns the value and its source; None when neither a detection nor the key gives one.
    """
    found = measured_water(water_rows, epoch, nsigma) if q_from == "measured" else None
    if found is not None:
        q, s, text = found
        if s.value > 0 and (q / s).decompose().value >= nsigma:
            return ExcitationWater(q_h2o=q, origin="measured", source=text)
    if configured is None:
        return None
    why = ("excitation.q_h2o_from is config" if q_from == "config"
           else f"{found[2]}: not a detection" if found is not None
           else f"no H2O band measured at {epoch}")
    return ExcitationWater(q_h2o=float(configured) / u.s, origin="config",
                           source=f"excitation.q_h2o_per_s = {float(configured):.3g} /s ({why})")


def with_water(settings: NonLteSettings, water: ExcitationWater) -> NonLteSettings:
    """The non-LTE settings with the epoch's water production rate."""
    return replace(settings, q_h2o_per_s=water.q_h2o_per_s)


def model_with_water(model: "ComaModel", water: ExcitationWater | None) -> "ComaModel":
    """The coma model of one epoch: under model nonlte with the epoch's water production rate; else unchanged."""
    if water is None or model.excitation is None or not isinstance(model.excitation, NonLteSettings):
        return model
    return replace(model, excitation=with_water(model.excitation, water))


def epoch_water(settings: "Settings", species: str, epoch: str, water_inputs_path: str | None) -> ExcitationWater | None:
    """:func:`excitation_water` for a step of ``species`` at ``epoch``, from its settings (``excitation``,
    ``limits``) and the H2O stack inputs of the epoch (``stack_epoch/<epoch>/H2O.fits``, None without). The water
    itself takes ``excitation.q_h2o_per_s`` (its own measurement is not an input of its own stack)."""
    from pipeline.io.products import EpochInputs

    exc = settings.record["excitation"]
    rows = (EpochInputs.from_fits(water_inputs_path).rows if water_inputs_path and species != WATER else None)
    return excitation_water(epoch, rows, str(exc.get("q_h2o_from", "measured")),
                            float(exc["q_h2o_per_s"]) if "q_h2o_per_s" in exc else None,
                            float(exc.get("q_h2o_min_snr", DEFAULT_MIN_SNR)))

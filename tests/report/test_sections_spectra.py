"""The stacked-spectra panels: drawn at the quoted temperature, and a combined limit says what it rests on."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable, Table
from scipy.stats import norm

from pipeline.catalogue.entries import load_catalogue
from pipeline.io.products import SpeciesStack, StackedSpectrum
from pipeline.rates.temperature import TEMPERATURE_GRID
from pipeline.report.figures import plot_stacked_spectra
from pipeline.report.sections import spectrum_panels

T_SWEEP = [10.0, 20.0, 40.0, 80.0]
W, SIGMA_W = -2.0e25, 1.6e25          # the line's window flux and its error, in units where S(T) = 1 / T


def _stack(tmp_path, with_band=True):
    """A CO stack: one millimetre line (S(T) = 1/T, so its Q estimate is W T) and, optionally, one band."""
    rows = []
    for t in T_SWEEP:
        s = 1.0 / t
        rows.append({"epoch": "e1", "cube_id": "e1_co", "line_id": "CO_230538", "t_kin": t, "aperture": "1000 km",
                     "aperture_km": 1000.0, "kind": "line", "q": W / s, "sigma_q": SIGMA_W / s, "scale": s,
                     "window": 1.2, "outflow": 0.5, "distributed_ratio": np.nan})
        if with_band:
            rows.append({"epoch": "e1", "cube_id": "e1_ir", "line_id": "CO_v1-0", "t_kin": t, "aperture": "1000 km",
                         "aperture_km": 1000.0, "kind": "band", "q": 1.0e24, "sigma_q": 1.0e25, "scale": 1.0,
                         "window": 0.0, "outflow": 0.5, "distributed_ratio": np.nan})
    curves = Table({"epoch": ["e1"], "cube_id": ["e1_co"], "line_id": ["CO_230538"], "aperture": ["1000 km"],
                    "scale": [1.0 / TEMPERATURE_GRID]})
    summary = Table({"epoch": ["all"] * 4, "t_kin": T_SWEEP, "aperture_index": [0] * 4, "aperture_km": [1000.0] * 4})
    density = np.arange(4 * 64, dtype=float).reshape(4, 1, 64)
    stack = SpeciesStack(species="CO", n_inputs=len(rows), spectra={"all": StackedSpectrum("all", density, -8.0, 0.25)},
                         inputs=Table(rows=rows), summary=summary, curves=curves)
    path = tmp_path / "CO.fits"
    stack.to_fits().writeto(path)
    return str(path), density


def _limits(t_quoted, detected=False):
    return QTable(rows=[{"species": "CO", "epoch": "all", "aperture_km": 1000.0 * u.km, "t_kin_K": t_quoted * u.K,
                         "q": 1e24 / u.s, "q_err": 1e25 / u.s, "q_upper": 3.0e25 / u.s, "detected": detected,
                         "adopted": True, "conservative": False, "t_origin": "measured", "confidence": 0.99865}])


def test_combined_panel_names_its_instrument_and_draws_the_model_at_the_quoted_temperature(tmp_path):
    path, density = _stack(tmp_path)
    (panel,) = spectrum_panels([path], _limits(50.0), load_catalogue())
    # the sweep's nearest temperature to 50 K (in log T) is 40 K; with S = 1/T the Q density scales as T, so the
    # 40 K stack times 50/40 is the stack at 50 K (closed form of the rescaling)
    assert np.allclose(panel.density, density[2, 0] * 50.0 / 40.0)
    assert "T_kin = 50 K" in panel.title and "40 K rescaled" in panel.title
    # weights 1/sigma^2: the band's sigma 1e25 against the line's 1.6e25 x 50 = 8e26 -> the band carries > 99.9 %
    assert "rests on the infrared bands (> 99.9 % of the weight)" in panel.title
    # the model's window integral is the quoted limit; the dashed one the line's own Bayesian limit, which for a flat
    # prior on Q >= 0 is x + s Phi^-1(CL + (1 - CL) Phi(-x/s)) (closed form, the truncated Gaussian posterior)
    dv = 0.25
    assert np.sum(panel.model) * dv == pytest.approx(3.0e25, rel=0.02)
    x, s = W * 50.0, SIGMA_W * 50.0
    own = x + s * norm.ppf(0.99865 + (1 - 0.99865) * norm.cdf(-x / s))
    assert np.sum(panel.own_model) * dv == pytest.approx(own, rel=0.02)
    labels = [e[0] for e in panel.estimates]
    assert labels == ["millimetre lines (1 inputs)", "infrared bands (1 inputs)"]
    fig = plot_stacked_spectra([panel])
    assert "infrared bands" in fig.axes[0].get_title(loc="left") and fig.axes[1].get_xlabel().startswith("Q")


def test_a_millimetre_only_panel_makes_no_claim_about_instruments(tmp_path):
    path, density = _stack(tmp_path, with_band=False)
    (panel,) = spectrum_panels([path], _limits(80.0, detected=True), load_catalogue())
    assert np.allclose(panel.density, density[3, 0])            # on the sweep's grid: no rescaling
    assert "rests on" not in panel.title and panel.own_model is None and "rescaled" not in panel.title

"""Tests of pipeline.rates.temperature (rotational temperature from several lines) and of blended windows in
pipeline.rates.q_units.

References outside the project: the population (rotational) diagram of optically thin lines,
ln(W / (g_u A_ul nu^0)) = const - E_u / T (Goldsmith & Langer 1999, ApJ 517, 209, from memory), fitted with
numpy.polyfit; the Delta chi^2 = 1 interval of one parameter with the others profiled (Wilks' theorem; Press et
al., Numerical Recipes, 3rd ed., section 15.6, from memory) and its binomial coverage; the Boltzmann ratio
g_u exp(-E_u/T) of two lines (closed form).
"""

import astropy.units as u
import numpy as np
import pytest
from cubes import write_subcube

from pipeline.catalogue.entries import load_catalogue
from pipeline.coma.excitation import flux_per_molecule
from pipeline.coma.image import apply_spectral_response, model_line_cube
from pipeline.coma.response import ComaModel
from pipeline.io.products import LineSpectra, SubCube
from pipeline.rates.q_units import stack_input
from pipeline.rates.temperature import TEMPERATURE_GRID, WindowMeasure, fit_temperature, q_at_temperature
from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra

CAT = load_catalogue()
# CH3OH J=5-4 lines far enough apart not to blend (E_u 35-131 K)
LADDER = ["CH3OH_241791", "CH3OH_241767", "CH3OH_241700", "CH3OH_241879", "CH3OH_241842", "CH3OH_241830"]
N_MOL = 3.0e-26 * 1e30        # molecules per unit Q counted in the aperture (any number: it cancels)


def _measures(t_true, q_true, rel_sigma=0.0, rng=None):
    out = []
    sp = CAT.get_species("CH3OH")
    for lid in LADDER:
        line = CAT.get_line(lid)
        curve = N_MOL * flux_per_molecule(line, sp, TEMPERATURE_GRID * u.K, 1 * u.au).to_value(u.Jy * u.km / u.s)
        w = q_true * N_MOL * float(flux_per_molecule(line, sp, t_true * u.K, 1 * u.au).to_value(u.Jy * u.km / u.s))
        sigma = rel_sigma * w if rel_sigma else 1e-3 * w
        noisy = w + (rng.standard_normal() * sigma if rng is not None else 0.0)
        out.append(WindowMeasure(epoch="e1", cube_id="c", line_id=lid, aperture="1000 km", aperture_km=1000.0,
                                 kind="line", flux=noisy, sigma=sigma, curve=curve))
    return out


@pytest.mark.parametrize("t_true", [15.0, 40.0, 90.0])
def test_noise_free_ladder_gives_back_its_temperature_and_the_population_diagram_agrees(t_true):
    fit = fit_temperature(_measures(t_true, 3e26), CAT)
    assert fit.t_kin == pytest.approx(t_true, rel=3e-3)
    assert fit.q == pytest.approx(3e26, rel=3e-3)
    assert fit.bounded and fit.t_lo <= fit.t_kin <= fit.t_hi and fit.n_lines == len(LADDER)
    # the population diagram (Goldsmith & Langer 1999): slope of ln(W / (g_u A_ul)) against E_u is -1/T; the lines
    # lie within 0.1 % in frequency, and the background factor differs between them by < 1e-3, so the slope's T
    # agrees with the full fit to 1 %
    e_u = np.array([CAT.get_line(lid).e_up.to_value(u.K) for lid in LADDER])
    y = np.log([m.flux / (CAT.get_line(m.line_id).g_up * CAT.get_line(m.line_id).a_ul.to_value(1 / u.s))
                for m in _measures(t_true, 3e26)])
    slope = np.polyfit(e_u, y, 1)[0]
    assert -1.0 / slope == pytest.approx(fit.t_kin, rel=0.01)


def test_the_temperature_interval_covers_as_delta_chi2_of_one_says():
    # Wilks: the Delta chi^2 = 1 interval covers the truth in 68.3 % of noisy realisations; 300 of them,
    # 3 binomial sigma
    rng = np.random.default_rng(11)
    n, hits = 300, 0
    for _ in range(n):
        fit = fit_temperature(_measures(40.0, 3e26, rel_sigma=0.1, rng=rng), CAT)
        hits += fit.t_lo <= 40.0 <= fit.t_hi
    p = 0.6827
    assert abs(hits - n * p) <= 3 * np.sqrt(n * p * (1 - p)), hits


def test_scatter_beyond_the_errors_widens_the_interval():
    # the same lines with errors understated 3 times: chi2/dof ~ 9 scales the Delta chi2 level by chi2/dof and
    # sigma_Q by its square root (PDG scale factor), so the interval is about as wide as with honest errors
    rng = np.random.default_rng(5)
    honest = _measures(40.0, 3e26, rel_sigma=0.15, rng=rng)
    under = [WindowMeasure(**{**m.__dict__, "sigma": m.sigma / 3.0}) for m in honest]
    a, b = fit_temperature(honest, CAT), fit_temperature(under, CAT)
    assert b.chi2 == pytest.approx(9 * a.chi2, rel=1e-6)
    width_a, width_b = np.log(a.t_hi / a.t_lo), np.log(b.t_hi / b.t_lo)
    # unscaled, the understated errors would give an interval about 3 times narrower; scaled, it is within a
    # factor sqrt(chi2/dof) of the honest one's
    assert b.chi2 / b.dof > 1 and width_b > 0.6 * width_a * min(1.0, np.sqrt(a.chi2 / a.dof))
    assert b.sigma_q == pytest.approx(a.sigma_q / 3 * np.sqrt(max(1.0, b.chi2 / b.dof)), rel=1e-6)


def test_lines_of_one_energy_cannot_tell_a_temperature():
    one = [m for m in _measures(40.0, 3e26) if m.line_id in ("CH3OH_241791",)]
    assert fit_temperature(one, CAT) is None
    near = [m for m in _measures(40.0, 3e26) if m.line_id in ("CH3OH_241791", "CH3OH_241767")]   # E_u 35, 40 K
    assert fit_temperature(near, CAT) is None


def test_q_at_any_temperature_is_the_inverse_variance_mean_of_the_lines():
    ms = _measures(40.0, 3e26)
    q, s, q_i, s_i = q_at_temperature(ms, 40.0)
    assert q == pytest.approx(3e26, rel=1e-3)
    w = 1 / np.square(s_i)                                         # closed form of the weighted mean and its error
    assert s == pytest.approx(1 / np.sqrt(np.sum(w)), rel=1e-12)
    q20, _, _, _ = q_at_temperature(ms, 20.0)
    assert q20 != pytest.approx(q, rel=0.05)                        # the wrong temperature gives another Q


def test_a_blended_window_is_modelled_jointly():
    # two CH3OH lines 0.48 km/s apart (5(3)-4(3) A+ and A-, CDMS 032504) in one noise-free sub-cube: the window on
    # one holds both; with the partner modelled the window estimate gives back the injected Q, and the partner's
    # share of the window flux follows their Boltzmann populations (equal g_u, A and E_u: one half, closed form)
    shape = (160, 24, 24)
    a, b = CAT.get_line("CH3OH_241832.718"), CAT.get_line("CH3OH_241833.106")
    vel = -0.2 * (shape[0] // 2) + 0.2 * np.arange(shape[0])
    sp = CAT.get_species("CH3OH")
    c = 299792.458
    v_b = c * (1 - b.freq.to_value(u.GHz) / a.freq.to_value(u.GHz))
    signal = sum(model_line_cube(shape[1:], 11.5, 11.5, 0.3, vel - shift, a, sp, 3e26, 40 * u.K, 1 * u.au, 1 * u.au,
                                 (1.0, 1.0, 0.0), ComaModel(), spectral_response=None) for shift in (0.0, v_b))
    import tempfile
    from pathlib import Path
    path = write_subcube(Path(tempfile.mkdtemp()) / "sub.fits", np.zeros(shape), line_id=a.line_id,
                         rest_hz=a.freq.to_value(u.Hz), channel_km_s=0.2)
    settings = ExtractionSettings(radii=[1000 * u.km], window=1.5 * 0.85 * u.km / u.s, other_lines=[] * u.km / u.s)
    cube = apply_spectral_response(signal, "hanning")
    spectra = extract_spectra(SubCube.from_fits(path), settings, data=cube, offsource=False)
    inp, rows = stack_input(LineSpectra.from_fits(spectra.to_fits()), CAT, [40.0] * u.K, ComaModel())
    assert rows[0]["blend"] == b.line_id
    assert rows[0]["blend_share"] == pytest.approx(0.5, abs=0.05)
    assert inp.q[0, 0] == pytest.approx(3e26, rel=0.05)


def test_the_adopted_temperature_falls_back_in_a_stated_order():
    from astropy.table import QTable

    from pipeline.rates.temperature import adopted_temperature

    fits = QTable(rows=[("CH3OH", "all", "1000 km", 30.0, 20.0, 45.0, True),
                        ("CH3OH", "all", "3000 km", 16.0, 5.0, 60.0, False),
                        ("H2CO", "e1", "1000 km", 50.0, 45.0, 56.0, True)],
                  names=["species", "epoch", "aperture", "t_kin_K", "t_lo_K", "t_hi_K", "bounded"])
    assert adopted_temperature(fits, "e1", "1000 km")["source"] == "H2CO (e1, 1000 km)"        # its own group first
    assert adopted_temperature(fits, "e2", "1000 km")["source"] == "CH3OH (all, 1000 km)"      # then all epochs
    # no closed interval at 3000 km: another aperture's measurement, never the conservative temperature
    assert adopted_temperature(fits, "e2", "3000 km")["t"] == 30.0
    chosen = adopted_temperature(fits, "e2", "3000 km", configured=25.0)        # a configured one wins
    assert (chosen["t"], chosen["origin"], chosen["source"]) == (25.0, "configured", "excitation.t_adopted_K")
    assert adopted_temperature(fits[2:2], "e1", "1000 km") is None


def test_escape_probability_factor():
    # closed form tau / (1 - exp(-tau)) (Mangum & Shirley 2015, from memory): 1 + tau/2 for small tau, tau for
    # large tau, and 1/(1 - e^-1) at tau = 1
    from pipeline.rates.detections import opacity_factor

    assert float(opacity_factor(1.0)) == pytest.approx(1 / (1 - np.exp(-1.0)), rel=1e-12)
    assert float(opacity_factor(1e-4)) == pytest.approx(1 + 0.5e-4, rel=1e-8)
    assert float(opacity_factor(0.0)) == 1.0
    assert float(opacity_factor(30.0)) == pytest.approx(30.0, rel=1e-12)

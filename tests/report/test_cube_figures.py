"""Each cube's figures: the geometry drawn where it was computed, the spectra models at the quoted Q, the HTML."""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.table import QTable, Table
from matplotlib.lines import Line2D
from matplotlib.patches import Circle, Ellipse

from pipeline.catalogue import load_catalogue
from pipeline.coma.response import ComaModel
from pipeline.io.products import BandMeasurements, LineSpectra, ProductMeta
from pipeline.report.cube_figures import plot_cube_images, plot_cube_spectra, unit_label
from pipeline.report.cubes_section import CUBE_IMAGE_CLASS, cube_images_html
from pipeline.report.cube_spectra import (aperture_brightness_temperature, band_spectrum_panels,
                                          line_spectrum_panels, quoted_model)
from pipeline.report.figures import to_png
from pipeline.spectra.cube_images import BeamEllipse, ImageFrame, SkyImage

CAT = load_catalogue()


def _frame() -> ImageFrame:
    beam = BeamEllipse(width_pix=4.0, height_pix=3.0, angle_deg=155.0, major=1.2 * u.arcsec, minor=0.9 * u.arcsec,
                       pa=65 * u.deg)
    return ImageFrame(ys=slice(10, 51), xs=slice(5, 46), target=(20.3, 19.6), pixel_scale=0.3 * u.arcsec,
                      radii_pix=(4.8, 14.4), aperture_labels=("1000 km", "3000 km"), beam=beam,
                      north=(0.0, 1.0), east=(-1.0, 0.0))


def test_image_panel_draws_the_computed_geometry():
    frame = _frame()
    rng = np.random.default_rng(1)
    image = SkyImage("line", "HCN", rng.normal(size=frame.shape) * u.Jy / u.beam * u.km / u.s, 9, "1 line")
    continuum = SkyImage("continuum", "continuum", None, 0, "", note="no channel free of catalogue lines")
    fig = plot_cube_images("cube", frame, [image, continuum], [{"noise": 1.0, "peak": 3.0, "snr": 3.0,
                                                                  "offset_arcsec": 0.3}, None])
    ax = fig.axes[0]
    # the predicted position at offset (0, 0): the cross
    crosses = [ln for ln in ax.lines if isinstance(ln, Line2D) and ln.get_marker() == "+"]
    assert len(crosses) == 1 and tuple(crosses[0].get_xydata()[0]) == (0.0, 0.0)
    # the apertures: circles about the predicted position of radius r_pix x pixel scale (arcsec)
    radii = sorted(p.get_radius() for p in ax.patches if isinstance(p, Circle))
    assert radii == pytest.approx([4.8 * 0.3, 14.4 * 0.3])
    # the beam: the ellipse of the frame, in arcsec
    (beam,) = [p for p in ax.patches if isinstance(p, Ellipse) and not isinstance(p, Circle)]
    assert (beam.width, beam.height, beam.angle) == pytest.approx((4.0 * 0.3, 3.0 * 0.3, 155.0))
    # the image's extent puts pixel (x, y) of the box at ((x - x_t) s, (y - y_t) s)
    left, right, bottom, top = ax.images[0].get_extent()
    assert (left, bottom) == pytest.approx(((-0.5 - 20.3) * 0.3, (-0.5 - 19.6) * 0.3))
    assert right - left == pytest.approx(41 * 0.3)
    assert any("no image" in t.get_text() for t in fig.axes[1].texts)      # the continuum panel says why
    assert len(to_png(fig)) > 10_000


def test_unit_labels():
    assert unit_label(u.Jy / u.beam * u.km / u.s) == "Jy/beam km/s"
    assert unit_label(u.K * u.km / u.s) == "K km/s"
    assert unit_label(u.MJy / u.sr) == "MJy/sr"
    assert unit_label(u.W / u.m**2 / u.sr) == "W m$^{-2}$/sr"
    assert unit_label(u.W / u.m**2 / u.um / u.sr) == "W m$^{-2}$ µm$^{-1}$/sr"


def test_html_has_one_classed_image_per_cube_named_in_its_alt():
    png = to_png(plot_cube_spectra("x", [], []))
    text = cube_images_html([("e1_co", png, "caption", png), ("e2_co", png, "caption", None)])
    assert text.count(f'class="{CUBE_IMAGE_CLASS}"') == 2
    assert 'alt="integrated-line and continuum images of cube e1_co"' in text
    assert 'alt="integrated-line and continuum images of cube e2_co"' in text


def _limits(species="HCN", epoch="e1", detected=True, q=2.0e25, q_upper=3.0e25, t_kin=40.0):
    return QTable({"species": [species, species], "epoch": [epoch, epoch],
                   "aperture_km": [1000.0, 3000.0] * u.km, "t_kin_K": [t_kin, t_kin], "q": [q, q] / u.s,
                   "q_upper": [q_upper, q_upper] / u.s, "detected": [detected, detected],
                   "adopted": [True, True]})


def test_quoted_model_takes_the_smallest_aperture_the_spectra_have():
    model, j = quoted_model(_limits(detected=False), "HCN", "e1", np.array([3000.0, 1000.0]))
    assert (model.aperture_km, j, model.q, model.detected) == (1000.0, 1, 3.0e25, False)
    assert quoted_model(_limits(), "HCN", "e2", np.array([1000.0])) is None
    assert quoted_model(_limits(), "HCN", "e1", np.array([2000.0])) is None


def test_aperture_brightness_temperature_is_rayleigh_jeans():
    # closed form (Rayleigh-Jeans): T = S c^2 / (2 k nu^2 Omega)
    s, area, pix, nu = 0.05 * u.Jy, 80.0, 0.3 * u.arcsec, 265.886 * u.GHz
    omega = (area * pix**2).to(u.sr)
    expected = (s / omega * u.sr * const.c**2 / (2 * const.k_B * nu**2)).to(u.K)
    assert aperture_brightness_temperature(s, area, pix, nu).to_value(u.K) == pytest.approx(expected.value,
                                                                                            rel=1e-9)


def _line_spectra(n_chan=201, dv=0.1) -> LineSpectra:
    meta = ProductMeta(cube_id="e1_hcn", epoch="e1", line_id="HCN_265886", species="HCN", target_x=20.0,
                       target_y=20.0, r_h_au=1.2, delta_au=0.95)
    vel = (np.arange(n_chan) - n_chan // 2) * dv
    rng = np.random.default_rng(3)
    aps = Table({"aperture": ["1000 km", "3000 km"], "radius_km": [1000.0, 3000.0],
                 "radius_pix": [4.8, 14.4], "area_pix": [np.pi * 4.8**2, np.pi * 14.4**2],
                 "sigma_chan": [0.01, 0.02], "sigma_window": [0.005, 0.01]})
    return LineSpectra(meta=meta, flux=rng.normal(scale=0.01, size=(2, n_chan)), blank=np.zeros((2, n_chan)),
                       apertures=aps, channels=Table({"velocity": vel, "line_free": np.abs(vel) > 3,
                                                      "window_weight": (np.abs(vel) <= 1.0).astype(float)}),
                       window=1.0, centre=(20.0, 20.0), pixel_scale_arcsec=0.3, grid_shape=(41, 41),
                       beam_deg=(1.2 / 3600, 0.9 / 3600, 65.0), rest_frequency_hz=265.886e9)


def test_line_model_holds_q_times_the_pipelines_flux_per_unit_q():
    from pipeline.rates.q_units import stack_input

    spectra = _line_spectra()
    coma = ComaModel()
    panels, notes = line_spectrum_panels([spectra], _limits(), CAT, coma)
    assert len(panels) == 1 and notes == []
    p = panels[0]
    # the model's integral over velocity is Q times the line flux per unit Q in that aperture, the response the
    # stack divides by (pipeline.rates.q_units.stack_input): profile_model is normalised (its doctest)
    _, rows = stack_input(spectra, CAT, [40.0] * u.K, coma)
    factor = 1e3 if p.y_label.endswith("[mJy]") else 1.0
    assert np.sum(p.model) / factor * 0.1 == pytest.approx(2.0e25 * rows[0]["response"], rel=1e-3)
    assert p.model_label.startswith("model at Q")
    # in K for a cube in K: the same spectrum as the aperture's mean brightness temperature
    kelvin, _ = line_spectrum_panels([spectra], _limits(), CAT, coma, kelvin=True)
    ratio = aperture_brightness_temperature(1 * u.Jy, np.pi * 4.8**2, 0.3 * u.arcsec,
                                           CAT.get_line("HCN_265886").freq).value
    np.testing.assert_allclose(kelvin[0].flux, spectra.flux[0] * ratio, rtol=1e-12)


def test_band_model_is_continuum_plus_q_times_response_times_template():
    band = CAT.get_band("H2O_nu3")
    lam = np.linspace(2.45, 2.90, 300)
    continuum = 1e-16 * np.ones((1, 1, lam.size))
    response, q = 2.0e-44, 4.0e26                                                # W m-2 s, 1/s
    bands = Table(rows=[{"band_id": band.band_id, "species": band.species, "covered": True, "reason": "",
                         "aperture_index": 0, "aperture_km": 1000.0, "window_lo": 2.58, "window_hi": 2.75,
                         "response": response}])
    measured = BandMeasurements(
        cube_id="e1_ir", epoch="e1", r_h_au=1.2, delta_au=0.95, resolving_power=600.0,
        resolving_power_source="config", doppler=1.0, centre=(30.0, 30.0), pixel_scale_arcsec=0.1,
        sigma_source="ERR", band_ids=(band.band_id,), spectra=np.full((1, lam.size), 1e-16),
        sigma=np.full((1, lam.size), 1e-18), continuum=continuum,
        wave=Table({"observed": lam * u.um, "rest": lam * u.um}),
        apertures=Table({"aperture": ["1000 km"], "radius_km": [1000.0] * u.km}), bands=bands, dust=Table(),
        colour=Table())
    panels, _ = band_spectrum_panels(measured, _limits("H2O", detected=True, q=q), CAT)
    (p,) = panels
    scale = 10.0 ** np.floor(np.log10(1e-16))
    band_part = (p.model - p.continuum) * scale                                 # W m-2 um-1
    # closed form: the band template integrates to one (pipeline.spectra.band_measure.band_template), so the
    # band's integral over wavelength is Q x response when the axis spans the whole band
    assert np.trapezoid(band_part, p.x) == pytest.approx(q * response, rel=1e-3)


def test_cube_spectra_figures_drawn_on_workers_are_the_serial_ones_and_keyed_by_content(tmp_path):
    # the figures are independent, so drawing them on two worker processes gives the bytes drawing them in turn
    # gives (to_png writes fixed metadata); the cache path depends on the content only
    import pipeline.report.cubes_section as cf
    from pipeline.processes import in_processes

    figures = [(f"c{k} · epoch e1", [], [f"note {k}"]) for k in range(3)]
    serial = in_processes(cf._draw, figures, workers=1)
    assert all(png[:8] == b"\x89PNG\r\n\x1a\n" for png in serial)
    assert in_processes(cf._draw, figures, workers=2) == serial
    cache = tmp_path / "cache"
    assert cf._content_path(*figures[0], cache) == cf._content_path(*figures[0], cache)
    assert cf._content_path(*figures[0], cache) != cf._content_path(*figures[1], cache)
    assert cf._content_path(*figures[0], cache).parent == cache

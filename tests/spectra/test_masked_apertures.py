"""Blank and flagged pixels inside an aperture: made up for with a projected coma's share of them.

References: the closed form of the pixel integral of 1/rho (the antiderivative x asinh(y/x) + y asinh(x/y));
the exactness of the correction when the lost pixels follow the model (sum = valid sum / (1 - share) is then
the full sum, algebraically); a full-aperture sum computed with numpy as the truth.
"""

import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose

from pipeline.coma.image import projected_coma_image
from pipeline.spectra.apertures import aperture_spectra, aperture_weights, corrected_aperture_spectra
from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra


def test_projected_coma_central_pixel_closed_form():
    # the central pixel of a 1/rho coma centred on it: 4 x G(1/2, 1/2) = 4 asinh(1) (closed form, G as above)
    img = projected_coma_image((21, 21), 10.0, 10.0)
    assert img[10, 10] == pytest.approx(4 * np.arcsinh(1.0), rel=1e-12)
    assert_allclose(img, img[::-1, ::-1], rtol=1e-12)                     # point symmetric about the centre


def test_lost_pixels_that_follow_the_model_are_made_up_exactly():
    shape = (6, 41, 41)
    model = projected_coma_image(shape[1:], 20.0, 20.0, (3.0, 3.0, 0.0))
    data = np.broadcast_to(model, shape) * np.arange(1, 7)[:, None, None]   # each channel a scaled coma
    aps = [aperture_weights(shape[1:], 20.0, 20.0, r) for r in (5.0, 12.0)]
    full, _ = aperture_spectra(np.array(data), aps)
    lost = np.array(data, dtype=float)
    lost[2, 18:21, 22:24] = np.nan                     # blank pixels in channel 2
    quality = np.zeros(shape, dtype=np.int32)
    quality[4, 16, 16:19] = 1 | 4                      # flagged pixels in channel 4 (bit 0: do not use)
    quality[5, 16, 16:19] = 4                          # a flag that is not a bad bit: kept
    sums, n_blank, share = corrected_aperture_spectra(lost, aps, model, 0.25, quality, bad_bits=1)
    assert_allclose(sums, full, rtol=1e-9)             # made up exactly: the lost pixels followed the model
    assert n_blank[0, 2] == 6 and n_blank[0, 4] == 3 and n_blank[0, 5] == 0
    assert 0 < share[0, 2] < 0.25 and share[0, 5] == 0.0
    assert np.all(share[1] <= share[0])                # the larger aperture loses a smaller share
    # a channel whose lost share exceeds the limit stays blank
    lost[3, 15:26, 15:26] = np.nan
    sums, _, share = corrected_aperture_spectra(lost, aps, model, 0.25)
    assert np.isnan(sums[0, 3]) and share[0, 3] > 0.25
    # the plain sum leaves every channel with a lost pixel blank
    plain, _ = aperture_spectra(lost, aps)
    assert np.isnan(plain[0, 2]) and np.isfinite(plain[0, 1])


def test_extraction_recovers_a_line_through_blank_pixels():
    from cubes import subcube

    rng = np.random.default_rng(5)
    nchan, n = 200, 48
    vel = -0.3 * (nchan // 2) + 0.3 * np.arange(nchan)
    coma = projected_coma_image((n, n), (n - 1) / 2, (n - 1) / 2, (1.0 / 0.3, 1.0 / 0.3, 0.0))
    coma = coma / coma.max()
    line = np.where(np.abs(vel) < 0.6, 1.0, 0.0)
    data = line[:, None, None] * coma[None] + 1e-4 * rng.standard_normal((nchan, n, n))
    what = ExtractionSettings(radii=[2.0 * u.arcsec], window=1.0 * u.km / u.s, other_lines=[] * u.km / u.s,
                              max_masked_share=0.25)
    whole = extract_spectra(subcube(data), what)
    holed = data.copy()
    holed[:, 24:26, 20:23] = np.nan                    # a few dead pixels inside the aperture, every channel
    spectra = extract_spectra(subcube(holed), what)

    def window_sum(s):
        w = np.asarray(s.channels["window_weight"], dtype=float)
        return float(np.sum(s.flux[0] * w))

    assert spectra.apertures["max_masked_share"][0] > 0.01
    assert spectra.apertures["n_blank_chan"][0] == nchan
    # the coma's share of the dead pixels is made up: the line flux is that of the whole aperture (the noise
    # of the lost pixels aside, 1e-4 of the signal per pixel)
    assert window_sum(spectra) == pytest.approx(window_sum(whole), rel=2e-3)

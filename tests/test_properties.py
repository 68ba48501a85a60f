"""Property tests (hypothesis): invariances any correct reduction has, on small seeded cubes.

* Reversing the spectral axis (CDELT3 < 0, data flipped) changes nothing: the same aperture spectrum (reversed),
  noise, window sum, production rate and upper limit.
* A cube in mJy/beam (uJy/beam, mK) holding 1000 (10^6, 1000) times the numbers of one in Jy/beam (K) gives the
  same flux densities in Jy: the FITS unit prefixes (FITS standard 4.0, table 28).
* FREQ, VRAD, WAVE and VOPT axes describing the same channels give the same channel frequencies; they match the
  closed forms nu = nu0 (1 - v/c) (radio) and nu = c / lambda, nu = nu0 / (1 + v/c) (optical), with the speed of
  light from astropy.constants.
* A continuum a + b v added to a sub-cube is removed by the first-order baseline: the same spectrum, window sum
  and noise to within float32 rounding (least squares is linear, and a + b v lies in the fitted model space).
* Scaling the noise by k scales the measured noise by k, and, for a sub-cube without a line, the production rate
  and its upper limit by k too: the flat-prior Bayesian limit x + s Phi^-1(1 - (1 - CL) Phi(x / s)) is
  homogeneous of degree one in (x, s), so limits grow with the noise.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.table import Table
from cubes import write_cube, write_subcube
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from pipeline.io.products import LineSpectra, SubCube
from pipeline.catalogue.entries import load_catalogue
from pipeline.io.cubes import read_cube_info
from pipeline.spectra.line_spectra import ExtractionSettings, extract_spectra
from pipeline.rates.limits_table import limit_rows
from pipeline.coma.response import ComaModel
from pipeline.rates.q_units import stack_input

FAST = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
CAT = load_catalogue()
SETTINGS = ExtractionSettings(radii=[1.2 * u.arcsec], window=1.0 * u.km / u.s, other_lines=[] * u.km / u.s)
N_PIX = 24
EPS32 = float(np.finfo(np.float32).eps)

seeds = st.integers(min_value=0, max_value=2**32 - 1)
n_chans = st.integers(min_value=200, max_value=300)
steps = st.floats(min_value=0.15, max_value=0.4)


def _parts(seed: int, nchan: int, dv: float, amp: float = 0.0, sigma: float = 0.01):
    """(noise, line) cubes: N(0, sigma) noise; a Gaussian line (0.4 km/s) on a Gaussian blob at the centre."""
    rng = np.random.default_rng(seed)
    noise = sigma * rng.standard_normal((nchan, N_PIX, N_PIX))
    vel = dv * (np.arange(nchan) - nchan // 2)
    yy, xx = np.mgrid[0:N_PIX, 0:N_PIX]
    blob = np.exp(-0.5 * ((xx - (N_PIX - 1) / 2) ** 2 + (yy - (N_PIX - 1) / 2) ** 2) / 2.0**2)
    return noise, amp * np.exp(-0.5 * (vel / 0.4) ** 2)[:, None, None] * blob[None], vel


def _extract(path):
    hdul = extract_spectra(SubCube.from_fits(path), SETTINGS).to_fits()
    aps = Table.read(hdul["APERTURES"])
    chans = Table.read(hdul["CHANNELS"])
    flux = np.asarray(hdul[0].data, dtype=float)
    dv = abs(float(chans["velocity"][1] - chans["velocity"][0]))
    window_sum = float(np.sum(flux[0] * np.asarray(chans["window_weight"])) * dv)
    return hdul, flux, aps, chans, window_sum


def _q_and_limit(hdul):
    """Production rate, its error and the Bayesian 3-sigma upper limit of the first aperture (40 K)."""
    inp, _ = stack_input(LineSpectra.from_fits(hdul), CAT, [40.0] * u.K, ComaModel("law", "quiet"))
    rows = limit_rows("HCN", "all", [40.0] * u.K, [1.0] * u.km, inp.q / u.s, inp.sigma_q / u.s, 3.0, [], [])
    return float(inp.q[0, 0]), float(inp.sigma_q[0, 0]), float(rows["q_upper"][0].to_value(1 / u.s))


@FAST
@given(seed=seeds, nchan=n_chans, dv=steps, amp=st.floats(min_value=0.0, max_value=0.2))
def test_reversed_spectral_axis_gives_the_same_spectrum_and_limits(tmp_path_factory, seed, nchan, dv, amp):
    folder = tmp_path_factory.mktemp("rev")
    noise, line, vel = _parts(seed, nchan, dv, amp)
    data = noise + line
    forward = write_subcube(folder / "forward.fits", data, channel_km_s=dv)
    backward = write_subcube(folder / "backward.fits", data[::-1], channel_km_s=dv)
    with fits.open(backward, mode="update") as hdul:              # the same channels, listed from the top
        hdul[0].header["CRVAL3"] = float(vel[-1])
        hdul[0].header["CDELT3"] = -dv
        exact = hdul["VELOCITY"].data["velocity"]
        exact[:] = exact[::-1].copy()                               # the exact velocities listed the same way
    h_f, flux_f, aps_f, ch_f, sum_f = _extract(forward)
    h_b, flux_b, aps_b, ch_b, sum_b = _extract(backward)
    assert_allclose(np.asarray(ch_b["velocity"])[::-1], ch_f["velocity"], rtol=0, atol=1e-9)
    # float32 aperture sums of the channels in another order round differently (about 1e-7 of the noise)
    scale = float(aps_f["sigma_chan"][0])
    assert_allclose(flux_b[:, ::-1], flux_f, rtol=1e-5, atol=1e-5 * scale)
    assert_allclose(np.asarray(ch_b["line_free"])[::-1], ch_f["line_free"])
    for name in ("sigma_chan", "sigma_window", "sigma_window_naive"):
        assert_allclose(aps_b[name], aps_f[name], rtol=1e-5)
    assert abs(sum_b - sum_f) <= 1e-5 * float(aps_f["sigma_window"][0])
    q_f, s_f, up_f = _q_and_limit(h_f)
    q_b, s_b, up_b = _q_and_limit(h_b)
    assert_allclose([q_b, s_b, up_b], [q_f, s_f, up_f], rtol=1e-5, atol=1e-5 * s_f)


@FAST
@given(seed=seeds, pair=st.sampled_from([("mJy/beam", "Jy/beam", 1e3), ("uJy/beam", "Jy/beam", 1e6),
                                         ("mK", "K", 1e3)]))
def test_prefixed_brightness_units_give_the_same_flux_in_jy(tmp_path_factory, seed, pair):
    prefixed, plain, factor = pair
    folder = tmp_path_factory.mktemp("unit")
    noise, line, _ = _parts(seed, 220, 0.3, amp=0.05)
    data = noise + line
    ref = write_subcube(folder / "plain.fits", data, bunit=plain)
    scaled = write_subcube(folder / "prefixed.fits", data * factor, bunit=prefixed)
    assert read_cube_info(scaled).bunit == u.Unit(prefixed, format="fits")
    _, flux_p, aps_p, _, sum_p = _extract(ref)
    _, flux_s, aps_s, _, sum_s = _extract(scaled)
    # float32 storage of data x factor rounds each value anew (relative 6e-8): agreement to 1e-5 of the noise
    sigma = float(aps_p["sigma_chan"][0])
    assert_allclose(flux_s, flux_p, rtol=1e-5, atol=1e-5 * sigma)
    assert_allclose(aps_s["sigma_window"], aps_p["sigma_window"], rtol=1e-5)
    assert abs(sum_s - sum_p) <= 1e-5 * float(aps_p["sigma_window"][0]) + 1e-5 * abs(sum_p)


@FAST
@given(f0=st.floats(min_value=80e9, max_value=400e9), df=st.floats(min_value=1e4, max_value=5e6),
       sign=st.sampled_from([-1.0, 1.0]), crpix=st.floats(min_value=-5.0, max_value=20.0),
       v_ref=st.floats(min_value=-300e3, max_value=300e3))
def test_freq_vrad_wave_vopt_axes_of_the_same_channels_agree(tmp_path_factory, f0, df, sign, crpix, v_ref):
    folder = tmp_path_factory.mktemp("axes")
    c = const.c.to_value(u.m / u.s)
    df *= sign
    f_ref = f0 * (1 - v_ref / c)                                 # radio convention
    freq = read_cube_info(write_cube(folder / "f.fits", CTYPE3="FREQ", CUNIT3="Hz", CRVAL3=f_ref, CDELT3=df,
                                     CRPIX3=crpix, RESTFRQ=f0))
    vrad = read_cube_info(write_cube(folder / "v.fits", CTYPE3="VRAD", CUNIT3="m/s", CRVAL3=v_ref,
                                     CDELT3=-c * df / f0, CRPIX3=crpix, RESTFRQ=f0))
    chan = np.arange(freq.shape[0])
    expected = f_ref + (chan + 1 - crpix) * df                   # FITS WCS paper I: linear axis
    assert_allclose(freq.frequencies.to_value(u.Hz), expected, rtol=1e-13)
    assert_allclose(vrad.frequencies.to_value(u.Hz), expected, rtol=1e-12)
    # the radio velocities of those frequencies are the VRAD axis values (nu = nu0 (1 - v/c))
    v_axis = v_ref + (chan + 1 - crpix) * (-c * df / f0)
    # (c (1 - nu/nu0) cancels: double precision leaves about c x 1e-16 = 3e-8 m/s, allow 1e-6 m/s)
    assert_allclose(c * (1 - freq.frequencies.to_value(u.Hz) / f0), v_axis, rtol=1e-12, atol=1e-6)
    # a wavelength axis and an optical-velocity axis of the same (wavelength-linear) channels
    lam0, lam_ref = c / f0, c / f_ref
    dlam = -lam_ref * df / f_ref
    wave = read_cube_info(write_cube(folder / "w.fits", CTYPE3="WAVE", CUNIT3="m", CRVAL3=lam_ref, CDELT3=dlam,
                                     CRPIX3=crpix, RESTFRQ=f0))
    vopt = read_cube_info(write_cube(folder / "o.fits", CTYPE3="VOPT", CUNIT3="m/s", CRVAL3=c * (lam_ref / lam0 - 1),
                                     CDELT3=c * dlam / lam0, CRPIX3=crpix, RESTFRQ=f0))
    lam = lam_ref + (chan + 1 - crpix) * dlam
    assert_allclose(wave.frequencies.to_value(u.Hz), c / lam, rtol=1e-13)          # nu = c / lambda
    assert_allclose(vopt.frequencies.to_value(u.Hz), c / lam, rtol=1e-12)          # nu = nu0 / (1 + v/c)
    # at the reference channel all four describe the same frequency
    ref = int(round(crpix)) - 1
    if 0 <= ref < chan.size and abs(crpix - round(crpix)) < 1e-12:
        for info in (vrad, wave, vopt):
            assert_allclose(info.frequencies[ref].to_value(u.Hz), f_ref, rtol=1e-12)


@FAST
@given(seed=seeds, nchan=n_chans, dv=steps, level=st.floats(min_value=-5.0, max_value=5.0),
       slope=st.floats(min_value=-0.05, max_value=0.05), amp=st.floats(min_value=0.0, max_value=0.2))
def test_a_continuum_is_removed_by_the_baseline(tmp_path_factory, seed, nchan, dv, level, slope, amp):
    folder = tmp_path_factory.mktemp("cont")
    noise, line, vel = _parts(seed, nchan, dv, amp)
    data = noise + line
    continuum = (level + slope * vel)[:, None, None] * np.ones((1, N_PIX, N_PIX))
    _, flux_0, aps_0, _, sum_0 = _extract(write_subcube(folder / "bare.fits", data))
    hdul, flux_c, aps_c, _, sum_c = _extract(write_subcube(folder / "cont.fits", data + continuum))
    # "within rounding": the data are stored and summed in float32, so each channel's aperture flux carries an
    # error of a few float32 epsilons of the largest flux in the aperture (about 1 epsilon is seen; 20 allowed,
    # which is about 1 % of the channel noise for the largest continua drawn)
    area = float(aps_0["area_pix"][0])
    pix_per_beam = (0.3 / 1.0) ** 2 / (np.pi / (4 * np.log(2)))      # pixel / Gaussian beam area
    big = (np.max(np.abs(continuum)) + np.max(np.abs(data))) * area * pix_per_beam
    tol = 20 * EPS32 * big
    assert_allclose(flux_c, flux_0, rtol=0, atol=tol)
    # a window sum (and so the RMS of window sums) moves by at most tol x sum(weights) x dv
    window_tol = tol * float(np.sum(np.asarray(Table.read(hdul["CHANNELS"])["window_weight"]))) * dv
    assert abs(sum_c - sum_0) <= window_tol
    assert_allclose(aps_c["sigma_window"], aps_0["sigma_window"], rtol=0, atol=window_tol)
    assert_allclose(aps_c["sigma_chan"], aps_0["sigma_chan"], rtol=0, atol=tol)


@FAST
@given(seed=seeds, k=st.floats(min_value=1.1, max_value=10.0), amp=st.floats(min_value=0.0, max_value=0.2))
def test_noise_and_limits_grow_with_the_noise(tmp_path_factory, seed, k, amp):
    folder = tmp_path_factory.mktemp("noise")
    noise, line, _ = _parts(seed, 220, 0.3, amp)
    h1, _, aps1, _, _ = _extract(write_subcube(folder / "one.fits", line + noise))
    hk, _, apsk, _, _ = _extract(write_subcube(folder / "k.fits", line + k * noise))
    # the baseline and every noise figure are linear in the noise of the line-free channels (no line there)
    for name in ("sigma_chan", "sigma_window", "sigma_window_naive"):
        assert_allclose(apsk[name], k * aps1[name], rtol=1e-5)
    _, s1, _ = _q_and_limit(h1)
    _, sk, _ = _q_and_limit(hk)
    assert_allclose(sk, k * s1, rtol=1e-5)
    # without a line, Q and its limit scale by k as well (homogeneity of the limit): the limit grows
    h0, *_ = _extract(write_subcube(folder / "n1.fits", noise))
    h0k, *_ = _extract(write_subcube(folder / "nk.fits", k * noise))
    q1, s1, up1 = _q_and_limit(h0)
    qk, sk, upk = _q_and_limit(h0k)
    assert_allclose([qk, sk, upk], [k * q1, k * s1, k * up1], rtol=1e-5, atol=1e-5 * k * s1)
    assert upk > up1 > 0

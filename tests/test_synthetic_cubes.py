"""The demo generator: its closed-form pixel integrals, beam and smoothing, determinism, and the demo config."""

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
import yaml
from scipy import integrate

from synthetic_cubes import demo_scenario, small_scenario, write_scenario
from pipeline.coma.image import beam_kernel, pixel_column_integral
from synthetic_cubes.generate import _HANNING, hanning

REPO = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("rect", [(0.1, 0.9, 0.2, 1.3), (-0.5, 0.5, -0.5, 0.5), (-1.2, 0.3, 0.4, 2.0),
                                  (-2.0, -1.0, -0.7, 0.6)])
def test_pixel_integral_of_inverse_radius(rect):
    # independent: scipy dblquad of 1/sqrt(x^2+y^2) over the rectangle (split at the axes for the singularity)
    x0, x1, y0, y1 = rect
    xs = sorted({x0, x1, *([0.0] if x0 < 0 < x1 else [])})
    ys = sorted({y0, y1, *([0.0] if y0 < 0 < y1 else [])})
    ref = sum(integrate.dblquad(lambda y, x: 1 / np.hypot(x, y), a, b, c, d, epsabs=1e-11)[0]
              for a, b in zip(xs, xs[1:]) for c, d in zip(ys, ys[1:]))
    assert pixel_column_integral(np.array(x0), np.array(x1), np.array(y0), np.array(y1)) == pytest.approx(ref, rel=1e-7)


def test_unit_square_centred_closed_form():
    # closed form: ∫∫ over [-1/2,1/2]^2 of 1/r = 4 ln(1 + sqrt 2) (e.g. by the G(x,y) antiderivative)
    val = pixel_column_integral(np.array(-0.5), np.array(0.5), np.array(-0.5), np.array(0.5))
    assert val == pytest.approx(4 * np.log(1 + np.sqrt(2)), rel=1e-12)


def test_beam_kernel_moments():
    # a Gaussian's second moments give back sigma = FWHM / sqrt(8 ln 2) along its axes
    k = beam_kernel(8.0, 5.0, 0.0)
    assert k.sum() == pytest.approx(1.0)
    half = k.shape[0] // 2
    y, x = np.mgrid[-half:half + 1, -half:half + 1]
    assert np.sqrt(np.sum(k * y**2)) == pytest.approx(8.0 / np.sqrt(8 * np.log(2)), rel=2e-3)  # major along Dec
    assert np.sqrt(np.sum(k * x**2)) == pytest.approx(5.0 / np.sqrt(8 * np.log(2)), rel=2e-3)


def test_hanning_noise_factor():
    # white noise through [1/4, 1/2, 1/4]: variance factor 3/8 (sum of squared weights), lag-1 correlation 2/3
    rng = np.random.default_rng(3)
    x = rng.standard_normal((200_000, 1, 1))
    y = hanning(x)[:, 0, 0]
    assert np.var(y) == pytest.approx(np.sum(_HANNING**2), rel=0.02)
    assert np.corrcoef(y[:-1], y[1:])[0, 1] == pytest.approx(2 / 3, abs=0.01)


def test_demo_config_matches_generator(tmp_path):
    written = yaml.safe_load(write_scenario(replace(demo_scenario(), npix=16, windows=demo_scenario().windows[1:2]),
                                            tmp_path / "demo_data", results="results/demo",
                                            progress=lambda s: None).read_text())
    shipped = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    for key in ("campaign", "outdir", "observatory", "species", "apertures_km", "limits", "excitation", "coma",
                "budget", "comoving", "planned", "infrared", "dust"):
        assert shipped[key] == written[key], key
    sc = demo_scenario()
    assert [c["id"] for c in shipped["cubes"]] == [
        cid for e, _ in sc.epochs
        for cid in [f"{e}_{w.name}" for w in sc.windows] + [f"{e}_{s.name}" for s in sc.infrared if e in s.epochs]]


def test_generation_is_deterministic(tmp_path):
    sc = replace(small_scenario(), npix=16, windows=small_scenario().windows[1:2],
                 epochs=small_scenario().epochs[:1])
    write_scenario(sc, tmp_path / "a", progress=lambda s: None)
    write_scenario(sc, tmp_path / "b", progress=lambda s: None)
    for name in ("e1_hcn.fits", "ephemeris.ecsv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()

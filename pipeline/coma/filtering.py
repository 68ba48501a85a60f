"""Interferometric spatial filtering of an extended coma.

An interferometer samples the sky's visibility only at projected baselines
longer than the shortest one, B_min, so structure on scales larger than about
λ/B_min is resolved out. For a circularly symmetric brightness I(θ) the
visibility is its Hankel transform, V(q) = 2π ∫ I(θ) J0(2π q θ) θ dθ (q in
cycles per radian); for the ρ^-1 coma of a Haser parent well inside its scale
length, I ∝ 1/θ and V(q) ∝ 1/q (Bracewell, *The Fourier Transform and Its
Applications*, the Hankel pair 1/r ↔ 1/q).

:func:`surviving_fraction` removes every spatial frequency below B_min/λ from a
model coma image (a sharp inner edge of the uv coverage, the worst case for a
given B_min), convolves with the beam and returns, per aperture, the fraction
of the model flux that survives. Dividing the measured flux by it corrects
for the filtering under that model.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np

from pipeline.spectra.apertures import aperture_spectra, aperture_weights
from pipeline.coma.image import beam_kernel, coma_molecules_image

__all__ = ["min_spatial_frequency", "surviving_fraction", "inverse_radius_fraction"]


def min_spatial_frequency(shortest_baseline: u.Quantity, wavelength: u.Quantity) -> float:
    """Shortest sampled spatial frequency B_min / λ in cycles per radian."""
    lam = u.Quantity(wavelength).to(u.m, equivalencies=u.spectral())
    return float((u.Quantity(shortest_baseline) / lam).decompose().value)


def inverse_radius_fraction(radius_rad: float, q_min: float) -> float:
    """Surviving fraction of a 1/θ brightness in a circular aperture after removing q < q_min (no beam).

    Notes
    -----
    The filtered brightness is I_f(θ) = (1/θ) [1 - ∫_0^{2π q_min θ} J0(x) dx], so the aperture flux
    relative to the unfiltered 2πR is (1/R) ∫_0^R [1 - Ji0(2π q_min θ)] dθ, with Ji0 from
    scipy.special.itj0y0 (the integral of J0).
    """
    from scipy import integrate, special     # where used: only interferometric filtering needs them

    def integrand(theta):
        return 1.0 - special.itj0y0(2 * np.pi * q_min * theta)[0]

    val, _ = integrate.quad(integrand, 0.0, radius_rad, limit=200)
    return val / radius_rad


def surviving_fraction(shape: tuple[int, int], x: float, y: float, pixel_arcsec: float, radii_pix: list[float],
                       beam_pix: tuple[float, float, float] | None, speed: u.Quantity, length: u.Quantity,
                       q_min: float, delta: u.Quantity, length_daughter: u.Quantity | None = None,
                       pad: int = 4, weight=None) -> np.ndarray:
    """Fraction of the model coma flux in each aperture that survives the loss of spatial frequencies < q_min.

    The model is computed on a grid ``pad`` times larger than ``shape`` (the coma extends past the field and
    its large scales matter), filtered in the Fourier domain, convolved with the beam, and summed with the
    extraction's aperture weights. With ``weight`` (a line's non-LTE column factor f(rho),
    :func:`pipeline.coma.response.line_column_weight_of`) the model is the line's non-LTE brightness.
    """
    ny, nx = shape
    big = (ny * pad, nx * pad)
    ox, oy = (big[1] - nx) // 2, (big[0] - ny) // 2
    pixel_rad = (pixel_arcsec * u.arcsec).to_value(u.rad)
    pixel_km = pixel_rad * u.Quantity(delta).to_value(u.km)
    img = coma_molecules_image(big, x + ox, y + oy, pixel_km, speed, length, length_daughter, weight=weight)
    kernel = None if beam_pix is None else beam_kernel(*beam_pix)
    fy = np.fft.fftfreq(big[0], d=pixel_rad)
    fx = np.fft.fftfreq(big[1], d=pixel_rad)
    q = np.hypot(*np.meshgrid(fx, fy))
    spectrum = np.fft.fft2(img)
    if kernel is not None:
        kpad = np.zeros(big)
        kh, kw = kernel.shape
        kpad[:kh, :kw] = kernel
        kpad = np.roll(kpad, (-(kh // 2), -(kw // 2)), axis=(0, 1))
        spectrum = spectrum * np.fft.fft2(kpad)
    full = np.real(np.fft.ifft2(spectrum))
    filtered = np.real(np.fft.ifft2(np.where(q >= q_min, spectrum, 0.0)))
    weights = [aperture_weights(big, x + ox, y + oy, r) for r in radii_pix]
    s_full, _ = aperture_spectra(full[None], weights)
    s_filt, _ = aperture_spectra(filtered[None], weights)
    return s_filt[:, 0] / s_full[:, 0]

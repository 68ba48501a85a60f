"""Spectra from cubes: apertures, noise, millimetre line spectra, infrared aperture spectra and band measurement."""

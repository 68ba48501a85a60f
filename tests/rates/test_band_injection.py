"""Band injection placements and the differenced recovery."""

import numpy as np

from pipeline.spectra.apertures import aperture_weights
from pipeline.rates.band_injection import ring_positions


def test_positions_fit_and_spread_around_the_nucleus():
    pos = ring_positions((48, 48), 24.0, 23.5, 12.0)
    assert pos[0] == (24.0, 23.5) and len(pos) == 5
    for x, y in pos:
        aperture_weights((48, 48), x, y, 12.0)            # raises if the aperture does not fit
    offsets = [np.hypot(x - 24.0, y - 23.5) for x, y in pos[1:]]
    assert all(o >= 0.25 * 12.0 - 1e-9 for o in offsets)
    # four different directions (one per diagonal)
    angles = sorted(round(float(np.degrees(np.arctan2(y - 23.5, x - 24.0)))) % 360 for x, y in pos[1:])
    assert angles == [45, 135, 225, 315]


def test_no_room_leaves_only_the_nucleus():
    assert ring_positions((24, 24), 12.0, 12.0, 11.4) == [(12.0, 12.0)]
